"""Bootstrap refits that leave the best fit's solution: a sinusoid whose replicates sometimes jump
to another local minimum. Checked against scipy.optimize.least_squares refits started at the best
fit on the same replicate data, and against scipy.stats.bootstrap on the accepted replicates."""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import least_squares

from audit.engine.problem import Problem
from audit.uncertainty.bootstrap import chunk_size, run_bootstrap
from audit.uncertainty.refits import chunk_generator
from audit.uncertainty.resampling import build_scheme

SAMPLES = 2000
SEED = 1


def sinusoid(t, amp, omega, phase):
    return amp * np.sin(omega * t + phase)


def sinusoid_jacobian(t, amp, omega, phase):
    wave = np.cos(omega * t + phase)
    return [np.sin(omega * t + phase), amp * t * wave, amp * wave]


def sinusoid_problem() -> Problem:
    """60 evenly spaced points over about 32 periods; the noise (sd 0.42, SSR about 9.7 at the
    best fit) is large against the amplitude (0.3), so the SSR surface in omega has local minima
    a few standard errors apart, close enough for a Gauss-Newton refit of a noisy replicate to
    jump into one (the best fit: amp 0.248, omega 1.701, phase -0.146)."""
    t = np.linspace(0.0, 120.0, 60)
    y = sinusoid(t, 0.3, 1.7, 0.4) + np.random.default_rng(6).normal(0.0, 0.42, t.size)
    return Problem(model=sinusoid, x=t, y=y, names=("amp", "omega", "phase"), jacobian=sinusoid_jacobian)


def scipy_refit(problem: Problem, y: np.ndarray, start: np.ndarray, rows=slice(None)) -> np.ndarray:
    """scipy.optimize.least_squares (trust-region reflective) on the given observations, from ``start``.

    Variables scaled by the Jacobian's column norms (``x_scale="jac"``), as the engine's
    Levenberg-Marquardt descent scales them: where a replicate's amplitude crosses zero the phase
    is nearly free, and a descent with unscaled variables ends on another period image of the
    same curve (phase 2*pi*k away) than a column-scaled one; each is a descent from the best fit.
    """
    t = problem.x[rows]
    return least_squares(lambda a: sinusoid(t, *a) - y[rows], start, x_scale="jac", xtol=1e-14, ftol=1e-14,
                         gtol=1e-14).x


@pytest.fixture(scope="module")
def sinusoid_bootstrap():
    problem = sinusoid_problem()
    # Reference best fit: scipy.optimize.least_squares from the generating values.
    best = scipy_refit(problem, problem.y, np.array([0.3, 1.7, 0.4]))
    result = run_bootstrap(problem, best, method="residual", samples=SAMPLES, seed=SEED)
    scheme = build_scheme("residual", problem, best)
    size = chunk_size(problem)
    data = np.vstack([scheme.draw(chunk_generator(SEED, index), min(size, SAMPLES - first)).y
                      for index, first in enumerate(range(0, SAMPLES, size))])
    return problem, best, result, data


def test_only_refits_on_the_best_fits_solution_enter_the_intervals(sinusoid_bootstrap):
    problem, best, result, data = sinusoid_bootstrap
    replicates, scale = result.replicates, result.asymptotic.std_errors
    distance = np.max(np.abs(replicates.params - best) / scale, axis=1)
    used = np.flatnonzero(replicates.used)
    # Basin jumps hide in the tail: check every used refit beyond 3 standard errors, and a sample
    # of the others.
    far = used[distance[used] > 3.0]
    sample = np.concatenate([far, np.random.default_rng(0).choice(used[distance[used] <= 3.0], 60, replace=False)])
    # Reference: scipy.optimize.least_squares started at the best fit on the same replicate data
    # reaches the same point as every used refit (to a thousandth of a standard error).
    for k in sample:
        reference = scipy_refit(problem, data[k], best)
        assert np.max(np.abs(replicates.params[k] - reference) / scale) < 1e-3, k
    # The converged refits left out reached another solution: the reference refit ends over a
    # standard error away from them.
    other = np.flatnonzero(np.array([fate == "other" for fate in replicates.to_dict()["fate"]]))
    assert len(other) >= 3
    for k in other:
        reference = scipy_refit(problem, data[k], best)
        assert np.max(np.abs(replicates.params[k] - reference) / scale) > 1.0, k


def test_amplitude_intervals_stay_positive_and_match_scipy_bootstrap(sinusoid_bootstrap):
    problem, best, result, _ = sinusoid_bootstrap
    amp = result.replicates.params[result.replicates.used, 0]
    assert result.percentile_lower[0] > 0 and result.bca.lower[0] > 0
    given = SimpleNamespace(bootstrap_distribution=amp)
    observations = np.arange(problem.n_obs)

    def fitted_amp(rows, axis=-1):
        return scipy_refit(problem, problem.y, best, rows)[0]

    # Reference: scipy.stats.bootstrap handed the used replicates; for BCa it computes the
    # estimate and its own jackknife acceleration from scipy.optimize.least_squares refits of the
    # leave-one-out data sets (started at the best fit).
    for method, ours in (("percentile", (result.percentile_lower[0], result.percentile_upper[0])),
                         ("BCa", (result.bca.lower[0], result.bca.upper[0]))):
        reference = stats.bootstrap((observations,), fitted_amp, n_resamples=0, bootstrap_result=given,
                                    method=method, vectorized=False, confidence_level=0.95).confidence_interval
        assert ours == pytest.approx((reference.low, reference.high), rel=1e-6)
