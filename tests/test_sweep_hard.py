"""The sweep on hard problems: nothing converges, aliased frequencies, a safe region that
decides the step factor.

References beside each check: numpy.linalg (rank), numdifftools (derivatives),
scipy.optimize.least_squares (optima), a textbook Gauss-Newton update written out with
numpy.linalg (fates of starts), and hand derivations written out in the comments.
"""
from __future__ import annotations

import json

import numdifftools as nd
import numpy as np
import pytest
from scenario_files import MODEL_FILE, csv_text, data_columns, scenario_toml
from scipy.optimize import least_squares

from audit.cli import main
from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan
from audit.sweep.result import BEST
from audit.sweep.run import SweepRequest, run_sweep


def sweep(folder, **request):
    scenario = load_scenario(folder)
    return scenario, run_sweep(scenario, SweepRequest.from_scenario(scenario, **request), ParallelPlan(jobs=1))


# ---------------------------------------------------------------- no start converges

PRODUCT_X = np.linspace(0.5, 5.0, 12)
PRODUCT_TOML = scenario_toml(title="only the product of a and b enters", data=data_columns("x", "y"),
                             model={"expression": "a * b * x"},
                             parameters={"a": {"start": 1.0, "range": [0.1, 10]},
                                         "b": {"start": 2.0, "range": [0.1, 10]}},
                             sweep={"points": 256, "resolution": 11})

DECAY_X = np.linspace(0.5, 5.0, 12)
DECAY_MODEL = """
    import numpy as np

    def model(x, A, k):
        return A * np.exp(-k * x)

    def jacobian(x, A, k):
        decay = np.exp(-k * x)
        return [decay, A * x * decay]   # wrong sign: d/dk of A·exp(−k·x) is −A·x·exp(−k·x)
    """
DECAY_TOML = scenario_toml(title="decay whose hand-written Jacobian has a sign error", data=data_columns("x", "y"),
                           model={**MODEL_FILE, "function": "model", "jacobian": "jacobian"},
                           parameters={"A": {"start": 4.0, "range": [0.5, 20]},
                                       "k": {"start": 0.5, "range": [0.05, 5], "scale": "log"}},
                           sweep={"points": 256, "resolution": 11})


@pytest.fixture
def product_folder(write_scenario):
    y = 3.0 * PRODUCT_X + np.random.default_rng(1).normal(0.0, 0.1, PRODUCT_X.size)
    return write_scenario(PRODUCT_TOML, data=csv_text("x,y", PRODUCT_X, y))


@pytest.fixture
def decay_folder(write_scenario):
    y = 5.0 * np.exp(-0.7 * DECAY_X) + np.random.default_rng(2).normal(0.0, 0.05, DECAY_X.size)
    return write_scenario(DECAY_TOML, model=DECAY_MODEL, data=csv_text("x,y", DECAY_X, y))


def test_a_sweep_where_the_jacobian_never_has_full_rank_reports_rank_loss(product_folder, tmp_path, capsys):
    # Hand derivation: d(a·b·x)/da = b·x and d(a·b·x)/db = a·x are proportional columns for every
    # (a, b), so J has rank 1 everywhere; numpy.linalg.matrix_rank confirms it at two points.
    for a, b in ((1.0, 2.0), (7.0, 0.3)):
        assert np.linalg.matrix_rank(np.column_stack([b * PRODUCT_X, a * PRODUCT_X])) == 1
    _, result = sweep(product_folder)
    # Every Gauss-Newton step is undetermined, so every run of every step factor is singular.
    assert result.share("singular").min() == pytest.approx(1.0)
    assert len(result.solution_ssr) == 0 and result.recommended is None
    assert "identify" in result.next_step and "rank" in result.next_step
    out = tmp_path / "out"
    status = main(["sweep", str(product_folder), "-o", str(out), "--jobs", "1", "--json"])
    assert status == 1  # a finding, not a crash (exit 2 would be bad input)
    payload = json.loads(capsys.readouterr().out)
    assert payload["solutions"] == [] and payload["recommendation"] is None
    assert payload["next_step"] == result.next_step
    assert (out / "figures" / "sweep-outcomes.png").is_file()
    status = main(["sweep", str(product_folder), "-o", str(tmp_path / "lm"), "--jobs", "1", "--solver", "lm"])
    assert status == 1
    assert "identify" in capsys.readouterr().out


def test_a_sweep_with_a_wrong_hand_jacobian_names_the_derivative_check(decay_folder, tmp_path, capsys):
    scenario, result = sweep(decay_folder)
    # numdifftools at the scenario's start: the hand column for k has the opposite sign.
    start = scenario.start
    numeric = nd.Jacobian(lambda p: p[0] * np.exp(-p[1] * DECAY_X))(start)
    hand = np.column_stack(scenario.problem.jacobian(DECAY_X, *start))
    np.testing.assert_allclose(hand[:, 0], numeric[:, 0], rtol=1e-8)
    np.testing.assert_allclose(hand[:, 1], -numeric[:, 1], rtol=1e-8)
    assert result.recommended is None and not np.any(result.shares[..., BEST])
    assert "fitaudit derivatives" in result.next_step and "k" in result.next_step
    status = main(["sweep", str(decay_folder), "-o", str(tmp_path / "out"), "--jobs", "1"])
    assert status == 1
    assert "fitaudit derivatives" in capsys.readouterr().out


# ---------------------------------------------------------------- aliased frequencies

SINE_DT = 0.25
SINE_T = np.arange(40) * SINE_DT


def sine_toml(**sweep: object) -> str:
    """The sampled sinusoid amp·sin(omega·t + phase) with ``sweep`` settings (also tests/test_sweep_aliases.py)."""
    return scenario_toml(title="a sampled sinusoid", data=data_columns("t", "y"),
                         model={"expression": "amp * sin(omega * t + phase)"},
                         parameters={"amp": {"start": 1.0, "range": [0.1, 5]},
                                     "omega": {"start": 1.0, "range": [0.2, 4]},
                                     "phase": {"start": 0.0, "range": [-3, 3]}}, sweep=sweep)


def test_aliases_of_the_frequency_do_not_replace_the_in_range_optimum(write_scenario):
    y = 2.0 * np.sin(1.7 * SINE_T + 0.4) + np.random.default_rng(11).normal(0.0, 0.5, SINE_T.size)
    _, result = sweep(write_scenario(sine_toml(points=4096, resolution=11), data=csv_text("t,y", SINE_T, y)))
    # Reference: scipy.optimize.least_squares from a start near the in-range optimum.
    reference = least_squares(lambda p: p[0] * np.sin(p[1] * SINE_T + p[2]) - y, [2.0, 1.8, 0.3],
                              method="lm", xtol=1e-14)
    assert result.solution_inside[0]
    np.testing.assert_allclose(result.solution_params[0], reference.x, rtol=1e-6)
    assert result.best_ssr == pytest.approx(2 * reference.cost, rel=1e-9)
    assert result.recommended is not None and result.shares[..., BEST].max() > 0
    assert "no start reached" not in result.recommendation_reason
    # Hand derivation, samples t_i = i·Δt: for integer k, sin((s·ω + 2πk/Δt)·t_i + φ') =
    # sin(s·ω·t_i + φ' + 2πk·i) = sin(s·ω·t_i + φ'), so (a', s·ω + 2πk/Δt, φ') gives the curve of
    # (a, ω, φ) at every sample when a'·sin(s·ω·t + φ') = a·sin(ω·t + φ): for s = +1 that is
    # a'·e^{iφ'} = a·e^{iφ} (φ' = φ + 2πj, or a' = −a with φ' = φ + π + 2πj); for s = −1,
    # a'·sin(φ' − ω·t) = −a'·sin(ω·t − φ'), so −a'·e^{−iφ'} = a·e^{iφ}. Together:
    # s·a'·e^{i·s·φ'} = a·e^{iφ}.
    amp, omega, phase = reference.x
    aliases = np.flatnonzero(result.solution_same_curve)
    assert aliases.size and not np.any(result.solution_inside[aliases])
    for row in aliases:
        a2, w2, p2 = result.solution_params[row]
        explained = []
        for sign in (1.0, -1.0):
            k = (w2 - sign * omega) * SINE_DT / (2 * np.pi)
            explained.append(abs(k - round(k)) < 1e-4
                             and abs(sign * a2 * np.exp(1j * sign * p2) - amp * np.exp(1j * phase)) < 1e-4)
        assert any(explained), result.solution_params[row]
        assert result.solution_ssr[row] == pytest.approx(result.best_ssr, rel=1e-6)
    # Runs reaching a catalogued alias reach the best fit's curve: counted with the reference (the
    # runs reaching aliases beyond the catalogue too: tests/test_sweep_aliases.py counts them all).
    together = result.shares[..., BEST] + result.solution_shares[..., aliases].sum(axis=-1)
    assert np.all(result.curve_shares >= together - 1e-12) and np.any(together > result.shares[..., BEST])


# ---------------------------------------------------------------- recommendation and safe region

MM_S = np.linspace(0.4, 4.0, 10)
MM_TOML = scenario_toml(title="an enzyme assay measured only far below saturation", data=data_columns("S", "v"),
                        model={"expression": "Vmax * S / (Km + S)"},
                        parameters={"Vmax": {"start": 10.0, "range": [1, 1000], "scale": "log"},
                                    "Km": {"start": 1.0, "range": [0.1, 1000], "scale": "log"}},
                        sweep={"design": "sobol", "points": 2048, "maps": []})


def gauss_newton_fates(starts: np.ndarray, v: np.ndarray, step_factor: float, optimum: np.ndarray,
                       iterations: int = 200, tolerance: float = 1e-8) -> np.ndarray:
    """(B,) True where the damped Gauss-Newton iteration a ← a + α·J⁺·(v − f(a)) stops at ``optimum``.

    Textbook update: pseudo-inverse from numpy.linalg.pinv, derivatives by hand (∂f/∂Vmax =
    S/(Km + S), ∂f/∂Km = −Vmax·S/(Km + S)²). A run stops once max_j |α·Δ_j| / max(|a_j|, s_j) <
    tolerance, s_j a thousandth of the larger range end (the documented convergence test), within
    ``iterations`` steps; it reached the optimum when it stopped within 1e-4 of it.
    """
    params = starts.astype(float).copy()
    scale = 1e-3 * np.array([1000.0, 1000.0])
    stopped = np.zeros(len(params), dtype=bool)
    with np.errstate(all="ignore"):
        for _ in range(iterations):
            vmax, km = params[:, :1], params[:, 1:]
            jacobian = np.stack([MM_S / (km + MM_S), -vmax * MM_S / (km + MM_S) ** 2], axis=-1)
            residual = v - vmax * MM_S / (km + MM_S)
            finite = np.all(np.isfinite(jacobian), axis=(1, 2)) & np.all(np.isfinite(residual), axis=1)
            step = np.full_like(params, np.nan)
            step[finite] = step_factor * (np.linalg.pinv(jacobian[finite]) @ residual[finite][..., None])[..., 0]
            moving = ~stopped
            params[moving] += step[moving]
            small = np.max(np.abs(step) / np.maximum(np.abs(params), scale), axis=1) < tolerance
            stopped |= moving & small
    return stopped & np.all(np.abs(params - optimum) <= 1e-4 * np.abs(optimum), axis=1)


def safe_radius(distance: np.ndarray, reached: np.ndarray, level: float = 0.99, min_starts: int = 100) -> float:
    """Largest cube (half-width = distance of a start) around the optimum holding at least
    ``min_starts`` starts of which ``level`` reached it; NaN when none (the documented rule)."""
    order = np.argsort(distance, kind="stable")
    count = np.arange(1, len(order) + 1)
    share = np.cumsum(reached[order]) / count
    good = (count >= min_starts) & (share >= level)
    return float(distance[order][np.flatnonzero(good)[-1]]) if good.any() else float("nan")


def test_the_recommended_step_factor_comes_with_the_region_it_is_safe_from(write_scenario):
    rng = np.random.default_rng(5)
    v = 60.0 * MM_S / (20.0 + MM_S) * (1.0 + rng.normal(0.0, 0.03, MM_S.size))
    scenario, result = sweep(write_scenario(MM_TOML, data=csv_text("S,v", MM_S, v)))
    # Reference optimum: scipy.optimize.least_squares from a nearby start.
    optimum = least_squares(lambda p: p[0] * MM_S / (p[1] + MM_S) - v, [90.0, 30.0], method="lm", xtol=1e-14).x
    np.testing.assert_allclose(result.best_params, optimum, rtol=1e-6)
    # Fates of every design start from the textbook update; distances in unit-cube coordinates
    # (log10 axes scaled to their ranges, the largest coordinate difference), as documented.
    from audit.sweep.starts import make_design, search_space
    design = make_design(search_space(scenario), "sobol", 2048, scenario.sweep.seed)
    starts = design.starts(0, design.count)
    low, high = np.log10([1.0, 0.1]), np.log10([1000.0, 1000.0])
    distance = np.max(np.abs((np.log10(starts) - np.log10(optimum)) / (high - low)), axis=1)
    shares, radii = {}, {}
    for factor in result.step_factors:
        reached = gauss_newton_fates(starts, v, factor, optimum)
        shares[factor], radii[factor] = reached.mean(), safe_radius(distance, reached)
        assert result.share("best", "gn", factor) == pytest.approx(shares[factor], abs=0.01)
    # The hard case: the highest basin share belongs to a step factor with no safe region,
    # while another one has a region.
    highest = max(shares, key=shares.get)
    assert np.isnan(radii[highest]) and any(np.isfinite(r) for r in radii.values())
    method, factor = result.recommended
    chosen = result.step_factors[factor]
    assert chosen != highest and np.isfinite(radii[chosen])
    assert result.region_radius[method, factor] == pytest.approx(radii[chosen], abs=2e-3)
    # The reason names the region and why the setting with more successes was passed over.
    reason = result.recommendation_reason
    assert f"safe from starts within {result.region_radius[method, factor]:.3f} of each range" in reason
    assert f"step factor {highest:g} reaches the best from more starts" in reason
    assert result.to_dict()["recommendation"]["reason"] == reason
