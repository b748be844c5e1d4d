"""A sampled sinusoid in the sweep: every run reaching an alias of the best fit's curve is counted,
and each catalogued alias is named for what it is.

References beside each check: scipy.optimize.least_squares (the in-range optimum and refits),
and the hand derivation of the aliases of y = amp·sin(omega·t + phase) sampled at t_i = i·Δt,
written out in ``on_best_curve``.
"""
from __future__ import annotations

import numpy as np
import pytest
from scenario_files import csv_text
from scipy.optimize import least_squares
from test_sweep_hard import SINE_DT, SINE_T, sine_toml

import audit.sweep.run
from audit.engine.batch import fit_batch
from audit.engine.outcomes import Outcome
from audit.engine.problem import Problem
from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan
from audit.sweep.equivalent_solutions import ALIAS, MIRROR, PERIOD_SHIFT, find_equivalent
from audit.sweep.result import BEST
from audit.sweep.run import SweepRequest, run_sweep
from audit.sweep.starts import make_design, search_space

SINE_Y = 2.0 * np.sin(1.7 * SINE_T + 0.4) + np.random.default_rng(11).normal(0.0, 0.5, SINE_T.size)


def sine_residuals(p: np.ndarray) -> np.ndarray:
    return p[0] * np.sin(p[1] * SINE_T + p[2]) - SINE_Y


def refit(start) -> np.ndarray:
    """Reference: scipy.optimize.least_squares from ``start``, to the digits double precision allows."""
    return least_squares(sine_residuals, start, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15).x


def in_range_optimum() -> np.ndarray:
    """The in-range optimum: a refit from a start near it."""
    return refit([2.0, 1.8, 0.3])


def alias_order(params: np.ndarray, best: np.ndarray, tolerance: float = 1e-4) -> np.ndarray:
    """(k,) the integer k of the alias relation each of ``params`` (k, 3) satisfies with ``best``,
    NaN where none holds.

    Hand derivation, samples t_i = i·Δt: for integer k, sin((s·ω + 2πk/Δt)·t_i + φ') =
    sin(s·ω·t_i + φ' + 2πk·i) = sin(s·ω·t_i + φ'), so (a', s·ω + 2πk/Δt, φ') gives the curve of
    (a, ω, φ) at every sample when a'·sin(s·ω·t + φ') = a·sin(ω·t + φ): for s = +1 that is
    a'·e^{iφ'} = a·e^{iφ} (φ' = φ + 2πj, or a' = −a with φ' = φ + π + 2πj); for s = −1,
    a'·sin(φ' − ω·t) = −a'·sin(ω·t − φ'), so −a'·e^{−iφ'} = a·e^{iφ}. Together:
    s·a'·e^{i·s·φ'} = a·e^{iφ} and ω' = s·ω + 2πk/Δt.
    """
    amp, omega, phase = best
    order = np.full(len(params), np.nan)
    for sign in (1.0, -1.0):
        k = (params[:, 1] - sign * omega) * SINE_DT / (2 * np.pi)
        phasor = sign * params[:, 0] * np.exp(1j * sign * params[:, 2])
        holds = (np.abs(k - np.round(k)) < tolerance) & (np.abs(phasor - amp * np.exp(1j * phase)) < tolerance)
        order = np.where(holds & np.isnan(order), np.round(k), order)
    return order


@pytest.fixture
def sine_folder(write_scenario):
    return write_scenario(sine_toml(points=4096, maps=[]), data=csv_text("t,y", SINE_T, SINE_Y))


def test_every_run_reaching_an_alias_counts_toward_the_best_curve(sine_folder, tmp_path, monkeypatch):
    scenario = load_scenario(sine_folder)
    request = SweepRequest.from_scenario(scenario)
    result = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path / "one")
    best = in_range_optimum()
    np.testing.assert_allclose(result.best_params, best, rtol=1e-6)
    # End points of every run of the design: fit_batch on the same starts and settings; a run
    # reaches the best fit's curve when the hand-derived alias relation holds (k = 0 included).
    design = make_design(search_space(scenario), request.design, request.points, request.seed)
    starts = design.starts(0, design.count)
    expected = np.empty(result.curve_shares.shape)
    for m, method in enumerate(request.methods):
        for f, factor in enumerate(request.step_factors):
            fit = fit_batch(scenario.problem, starts, np.full(len(starts), factor), method=method,
                            tol=request.tolerance, max_iter=request.max_iterations)
            converged = fit.outcome == Outcome.CONVERGED
            expected[m, f] = np.count_nonzero(np.isfinite(alias_order(fit.params[converged], best))) / design.count
    np.testing.assert_allclose(result.curve_shares, expected, rtol=0, atol=1e-12)
    # The hard case: the catalogue (64 solutions) holds only some of the aliases the runs reached.
    catalogued = result.shares[..., BEST] + result.solution_shares[..., result.solution_same_curve].sum(axis=-1)
    assert np.all(result.curve_shares > catalogued + 0.01)
    # Cut into smaller chunks (other local catalogues, other solutions beyond the cap), the count
    # is the same: every run's end point is tested, not its catalogue entry.
    monkeypatch.setattr(audit.sweep.run, "CHUNK_RUNS", 1024)
    smaller = run_sweep(scenario, SweepRequest.from_scenario(scenario), ParallelPlan(jobs=2), tmp_path / "two")
    assert smaller.chunks["total"] > result.chunks["total"]
    np.testing.assert_array_equal(smaller.curve_shares, result.curve_shares)


def test_catalogued_aliases_are_named_by_the_hand_derived_relation(sine_folder):
    scenario = load_scenario(sine_folder)
    result = run_sweep(scenario, SweepRequest.from_scenario(scenario), ParallelPlan(jobs=1))
    best = result.best_params
    same = np.flatnonzero(result.solution_same_curve)
    order = alias_order(result.solution_params[same], best)
    assert np.all(np.isfinite(order))
    # k ≠ 0: another frequency, the same values only at the samples (hand derivation above).
    for row, k in zip(same, order):
        assert (result.solution_equivalence[row] == ALIAS) == (k != 0), (result.solution_params[row], k)
    assert np.any(order != 0)


def test_a_phase_shifted_by_a_period_and_an_alias_frequency_are_told_apart():
    problem = load_problem()
    best = in_range_optimum()
    # Refits (scipy.optimize.least_squares) from starts near the best fit with its phase plus 2π
    # and minus 4π, and with its frequency plus 2π/Δt; sin is 2π-periodic (textbook), so the
    # first two are the same curve everywhere, the third only at the samples (hand derivation in
    # ``alias_order``).
    shifted = [refit(best + [0.05, -0.01, offset]) for offset in (2 * np.pi, -4 * np.pi)]
    aliased = refit(best + [0.05, 2 * np.pi / SINE_DT, 0.0])
    np.testing.assert_allclose([p[2] - best[2] for p in shifted], [2 * np.pi, -4 * np.pi], atol=1e-8)
    np.testing.assert_allclose(aliased[1] - best[1], 2 * np.pi / SINE_DT, atol=1e-8)
    # (−amp, −omega, −phase): a·sin(ωt + φ) = (−a)·sin(−ωt − φ), a sign mirror (sin is odd).
    mirrored = -best
    params = np.array([best, *shifted, aliased, mirrored])
    found = find_equivalent(problem, params, np.array([False, True, True, True, True]), 1e-4, np.full(3, 1e-6))
    assert list(found.same_curve) == [False, True, True, True, True]
    assert found.kind[1:] == [PERIOD_SHIFT, PERIOD_SHIFT, ALIAS, MIRROR]
    period = f"{2 * np.pi:.6g}"
    assert found.relation[1] == f"phase + 1×{period}" and found.relation[2] == f"phase − 2×{period}"
    assert found.relation[3] == f"omega + 1×{2 * np.pi / SINE_DT:.6g}"
    assert found.relation[4] == "amp → −amp, omega → −omega, phase → −phase"


def load_problem():
    return Problem(lambda t, amp, omega, phase: amp * np.sin(omega * t + phase), SINE_T, SINE_Y,
                   ("amp", "omega", "phase"))
