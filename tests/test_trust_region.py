"""The Levenberg-Marquardt step of one iteration (``engine.trust_region``) against numpy.linalg.

The damped step p of a run solves (JᵀJ + μ·D²)·p = Jᵀr with D the remembered column norms; μ = 0
when the Gauss-Newton step is no longer than the trust radius Δ in the scaled norm ‖D·p‖, else
‖D·p‖ lies within 10 % of Δ (``RADIUS_SLACK``). The references solve those equations with
numpy.linalg.solve, lstsq and pinv on the Jacobian stacked by hand, at the damping the engine found.
"""
from __future__ import annotations

import numpy as np
import pytest
from engine_problems import two_exponentials

from audit import Outcome, Problem, fit_batch
from audit.engine import trust_region
from audit.engine.linsolve import StepSystem
from audit.engine.trust_region import RADIUS_SLACK, TrustRegion

RUNS = 40


def system_at(params: np.ndarray, memory_factor: np.ndarray):
    """The weighted step problem of ``two_exponentials`` at ``params`` (k, 4) with remembered column
    norms ``memory_factor`` (k, 4) times the current ones: (StepSystem, J (k, m, 4), r (k, m), D (k, 4))."""
    problem = two_exponentials()
    rows = problem.derivative_rows(params, problem.x, np.arange(4))
    jacobian = np.stack([np.broadcast_to(row, (len(params), problem.n_obs)) for row in rows], axis=2)
    residual = problem.y - problem.predict(params)
    memory = np.linalg.norm(jacobian, axis=1) * memory_factor
    return StepSystem.build(rows, residual, memory), jacobian, residual, memory


def starts_and_memory(seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    params = np.array([5.0, 1.3, 2.0, 0.2]) * np.exp(rng.uniform(-0.5, 0.5, (RUNS, 4)))
    return params, np.exp(rng.uniform(0.0, 1.0, (RUNS, 4)))    # memory ≥ the current norms


def test_damped_steps_solve_the_damped_normal_equations_at_the_radius():
    params, memory_factor = starts_and_memory(11)
    system, jacobian, residual, scale = system_at(params, memory_factor)
    region = TrustRegion(system)
    assert region.exact.all()       # well conditioned: every run on the Cholesky path
    # Reference Gauss-Newton steps: numpy.linalg.lstsq per run.
    newton = np.array([np.linalg.lstsq(j, r, rcond=None)[0] for j, r in zip(jacobian, residual)])
    np.testing.assert_allclose(region.full_step(), newton, rtol=1e-9, atol=1e-12)
    full_length = np.linalg.norm(scale * newton, axis=1)
    radius = full_length * np.geomspace(0.01, 2.0, RUNS)     # from far inside to beyond the full step
    steps = region.damped(np.arange(RUNS), radius)
    fits = full_length <= (1 + RADIUS_SLACK) * radius
    assert fits.any() and not fits.all()
    assert np.all(steps.damping[fits] == 0) and np.all(steps.damping[~fits] > 0)
    length = np.linalg.norm(scale * steps.steps, axis=1)
    assert np.all(np.abs(length[~fits] / radius[~fits] - 1) <= RADIUS_SLACK)
    for run in range(RUNS):
        # Reference: numpy.linalg.solve of (JᵀJ + μ·D²)·p = Jᵀr at the engine's μ.
        j, d = jacobian[run], scale[run]
        expected = np.linalg.solve(j.T @ j + steps.damping[run] * np.diag(d**2), j.T @ residual[run])
        np.testing.assert_allclose(steps.steps[run], expected, rtol=1e-9, atol=1e-14)
        # The predicted SSR decrease of a full step (α = 1): 2·pᵀJᵀr − ‖J·p‖².
        predicted = 2 * expected @ j.T @ residual[run] - np.sum((j @ expected) ** 2)
        np.testing.assert_allclose(steps.predicted_reduction(np.ones(1))[run], predicted, rtol=1e-9)


def test_the_cholesky_iteration_finds_the_damping_of_the_eigen_decomposition(monkeypatch):
    params, memory_factor = starts_and_memory(12)
    system, jacobian, _, scale = system_at(params, memory_factor)
    newton = np.array([np.linalg.lstsq(j, r, rcond=None)[0] for j, r in zip(jacobian, system_residual(params))])
    radius = np.linalg.norm(scale * newton, axis=1) * np.geomspace(0.001, 0.9, RUNS)
    cholesky = TrustRegion(system).damped(np.arange(RUNS), radius)
    monkeypatch.setattr(trust_region, "CONDITION_LIMIT", 0.0)      # every run on the eigen path
    eigen_region = TrustRegion(system)
    assert not eigen_region.exact.any()
    eigen = eigen_region.damped(np.arange(RUNS), radius)
    # Both run the same Newton iteration on 1/‖u(μ)‖ from the same start, so they stop at the same μ.
    np.testing.assert_allclose(cholesky.damping, eigen.damping, rtol=1e-8)
    np.testing.assert_allclose(cholesky.steps, eigen.steps, rtol=1e-8, atol=1e-14)


def system_residual(params: np.ndarray) -> np.ndarray:
    problem = two_exponentials()
    return problem.y - problem.predict(params)


def test_runs_the_cholesky_path_cannot_vouch_for_take_the_eigen_path_in_a_mixed_batch():
    params, memory_factor = starts_and_memory(13)
    params[0, 0] = 0.0          # a = 0: the column of b, −a·x·exp(−b·x), is zero (rank lost)
    memory_factor[1, 1] = 1e10  # run 1 remembers b's column 1e10 times its norm: M's condition ~1e20
    system, jacobian, residual, scale = system_at(params, memory_factor)
    region = TrustRegion(system)
    assert not region.exact[:2].any() and region.exact[2:].all()
    # Reference for run 0: numpy.linalg.lstsq's minimum-norm solution, which leaves the dead
    # column's parameter at zero.
    minimum_norm = np.linalg.lstsq(jacobian[0], residual[0], rcond=None)[0]
    assert abs(minimum_norm[1]) < 1e-15
    np.testing.assert_allclose(region.full_step()[0], minimum_norm, rtol=1e-9, atol=1e-12)
    radius = 0.3 * np.linalg.norm(scale * region.full_step(), axis=1)   # shorter than every full step
    steps = region.damped(np.arange(RUNS), radius)
    assert np.all(steps.damping > 0)
    assert np.all(np.abs(np.linalg.norm(scale * steps.steps, axis=1) / radius - 1) <= RADIUS_SLACK)
    for run in range(RUNS):
        # Reference: numpy.linalg.solve of (JᵀJ + μ·D²)·p = Jᵀr; for run 0 without the dead column,
        # whose parameter does not move.
        kept = [0, 2, 3] if run == 0 else [0, 1, 2, 3]
        j, d = jacobian[run][:, kept], scale[run][kept]
        expected = np.linalg.solve(j.T @ j + steps.damping[run] * np.diag(d**2), j.T @ residual[run])
        np.testing.assert_allclose(steps.steps[run][kept], expected, rtol=1e-8, atol=1e-14)
    assert abs(steps.steps[0, 1]) < 1e-12


@pytest.mark.parametrize("rows", [np.array([5, 0, 17]), np.array([0])])
def test_a_subset_of_runs_gets_the_steps_it_gets_in_the_whole_batch(rows):
    params, memory_factor = starts_and_memory(14)
    params[0, 0] = 0.0          # run 0 on the eigen path, as above
    system, jacobian, residual, scale = system_at(params, memory_factor)
    region = TrustRegion(system)
    newton = np.array([np.linalg.lstsq(j, r, rcond=None)[0] for j, r in zip(jacobian, residual)])
    radius = 0.2 * np.linalg.norm(scale * newton, axis=1)
    whole = region.damped(np.arange(RUNS), radius)
    part = region.damped(rows, radius[rows])
    np.testing.assert_array_equal(part.steps, whole.steps[rows])
    np.testing.assert_array_equal(part.damping, whole.damping[rows])


def test_a_jacobian_that_underflows_everywhere_is_rank_lost_not_a_giant_step():
    # A Gaussian peak (constructed data) started with its centre 26 widths away from every
    # observation: its derivatives are 1e-266 or less, so every product in JᵀJ underflows to zero.
    x = np.linspace(400.0, 500.0, 35)

    def model(x, height, width, centre):
        return height / width * np.exp(-0.5 * ((x - centre) / width) ** 2)

    def jacobian(x, height, width, centre):
        bell = np.exp(-0.5 * ((x - centre) / width) ** 2)
        return [bell / width, height * bell * ((x - centre) ** 2 / width**4 - 1 / width**2),
                height * bell * (x - centre) / width**3]

    problem = Problem(model, x, model(x, 1.5, 5.0, 450.0), ("height", "width", "centre"), jacobian=jacobian)
    start = np.array([1.8, 5.95, 710.0])
    columns = np.column_stack(jacobian(x, *start))
    assert np.any(columns != 0)
    # Reference: the Gram matrix numpy forms is exactly zero (numpy.linalg.matrix_rank 0), while
    # Jᵀr is not: a solver that divided by it would step off to about 1e32.
    assert np.linalg.matrix_rank(columns.T @ columns) == 0 and np.any(columns.T @ problem.y != 0)
    fit = fit_batch(problem, start[None, :], method="lm")
    assert fit.outcome[0] == Outcome.SINGULAR and fit.iterations[0] == 1
    np.testing.assert_array_equal(fit.params[0], start)
