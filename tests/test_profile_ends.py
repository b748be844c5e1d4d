"""Profile-likelihood interval ends against exact 1-D profiles: every profile point a full
scipy.optimize.least_squares refit of the other parameters, each crossing of the threshold
SSR_min·(1 + F(0.95; 1, ν)/ν) found by scipy.optimize.brentq."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import brentq, least_squares

from audit import Problem
from audit.engine.best_fit import best_known_fit
from audit.identifiability.analysis import analyse
from audit.inputs.settings import IdentifiabilitySettings, SolverSettings

#: Five significant digits are the requirement; the refined ends are checked one digit tighter.
END_RTOL = 1e-6


def michaelis_menten(x, vmax, km):
    return vmax * x / (km + x)


def low_concentration_data(seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Duplicate measurements at concentrations up to 0.4·Km only (Vmax 30, Km 5, 7 % noise):
    the data see the initial slope well and the saturation hardly at all."""
    rng = np.random.default_rng(seed)
    x = np.repeat([0.25, 0.5, 0.75, 1.0, 1.5, 2.0], 2)
    return x, michaelis_menten(x, 30.0, 5.0) * (1 + 0.07 * rng.standard_normal(x.size))


def exact_profile_ends(model, x, y, start, far, steps=400, confidence=0.95):
    """The reference: (n, 2) profile interval ends (NaN where the profile stays below the threshold
    up to ``far``), from scipy alone.

    The best fit is a scipy least_squares fit from ``start``. Each side of parameter j walks
    from the best fit to far[j][side] in ``steps`` equal ratios (equal differences where the
    side changes sign), refitting the others with least_squares warm-started from the previous
    point; the first point above the threshold brackets the crossing, which brentq finds with
    every evaluation a least_squares refit started from the last point below.
    """
    tight = dict(method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=100_000)

    def residual(params):
        return model(x, *params) - y

    best = least_squares(residual, start, **tight).x
    n, dof = len(best), len(x) - len(best)
    ssr_min = float(residual(best) @ residual(best))
    threshold = ssr_min * (1 + stats.f.ppf(confidence, 1, dof) / dof)

    def profile_ssr(j, value, others):
        free = np.arange(n) != j

        def pinned_residual(theta):
            params = np.empty(n)
            params[free], params[j] = theta, value
            return residual(params)

        found = least_squares(pinned_residual, others, **tight)
        return 2 * found.cost, found.x

    ends = np.full((n, 2), np.nan)
    for j in range(n):
        free = np.arange(n) != j
        for side in range(2):
            target = far[j][side]
            fraction = np.arange(1, steps + 1) / steps
            path = (best[j] * (target / best[j]) ** fraction if target * best[j] > 0
                    else best[j] + (target - best[j]) * fraction)
            inner, others = best[j], best[free]
            for value in path:
                ssr, found = profile_ssr(j, value, others)
                if ssr > threshold:
                    anchor = others
                    ends[j, side] = brentq(lambda v: profile_ssr(j, v, anchor)[0] - threshold, inner, value,
                                           xtol=1e-300, rtol=1e-14)
                    break
                inner, others = value, found
    return ends, best, threshold


def audit_profiles(model, x, y, names, start, lower, upper, log_axis, points=41):
    problem = Problem(model, x, y, names)
    params, outcome = best_fit(problem, np.asarray(start, dtype=float), SolverSettings(tolerance=1e-10))
    return analyse(problem, params, lower=np.asarray(lower, dtype=float), upper=np.asarray(upper, dtype=float),
                   log_axis=np.asarray(log_axis), settings=IdentifiabilitySettings(profile_points=points),
                   fit_outcome=outcome)


# ---------------------------------------------------------------- closed but wide
def test_wide_closed_profile_intervals_of_a_low_concentration_saturation_fit():
    x, y = low_concentration_data(seed=8)
    ranges = dict(lower=[0.1, 0.1], upper=[1000.0, 1000.0], log_axis=[True, True])
    result = audit_profiles(michaelis_menten, x, y, ("vmax", "km"), [20.0, 3.0], **ranges)
    profiles = result.profiles
    # Reference: scipy.optimize.least_squares refits + brentq (exact_profile_ends), walking to
    # the range bounds.
    exact, best, threshold = exact_profile_ends(michaelis_menten, x, y, [20.0, 3.0],
                                                far=[(0.1, 1000.0), (0.1, 1000.0)])
    assert np.isfinite(exact).all()                       # the reference closes all four sides ...
    assert (exact[:, 1] > 4 * best).all()                 # ... far beyond the estimate
    assert list(profiles.lower_status) == list(profiles.upper_status) == ["closed", "closed"]
    np.testing.assert_allclose(profiles.lower, exact[:, 0], rtol=END_RTOL)
    np.testing.assert_allclose(profiles.upper, exact[:, 1], rtol=END_RTOL)
    # Reference: the same scipy fit and threshold: each end's refit sits on the threshold.
    assert profiles.threshold == pytest.approx(threshold, rel=1e-9)
    np.testing.assert_allclose(profiles.end_ssr, threshold, rtol=1e-8)


# ---------------------------------------------------------------- truly open
def test_profile_open_up_to_the_range_bound_is_reported_open_at_the_bound():
    x, y = low_concentration_data(seed=4)
    ranges = dict(lower=[0.1, 0.1], upper=[1000.0, 1000.0], log_axis=[True, True])
    result = audit_profiles(michaelis_menten, x, y, ("vmax", "km"), [20.0, 3.0], **ranges)
    profiles = result.profiles
    # Reference: scipy.optimize.least_squares refits + brentq: the lower sides cross, the upper
    # sides stay below the threshold all the way to the range bound 1000.
    exact, _, _ = exact_profile_ends(michaelis_menten, x, y, [20.0, 3.0], far=[(0.1, 1000.0), (0.1, 1000.0)])
    assert np.isfinite(exact[:, 0]).all() and np.isnan(exact[:, 1]).all()
    assert list(profiles.lower_status) == ["closed", "closed"]
    assert list(profiles.upper_status) == ["open_at_bound", "open_at_bound"]
    np.testing.assert_allclose(profiles.lower, exact[:, 0], rtol=END_RTOL)
    assert np.isnan(profiles.upper).all()
    walked_to = np.nanmax(profiles.values, axis=1)
    np.testing.assert_allclose(walked_to, 1000.0, rtol=1e-12)   # the walk went all the way
    assert result.practical.all()


# ---------------------------------------------------------------- NIST StRD
NIST_PROFILED = {
    "Misra1a": lambda x, b1, b2: b1 * (1 - np.exp(-b2 * x)),
    "DanWood": lambda x, b1, b2: b1 * x**b2,
    "Chwirut2": lambda x, b1, b2, b3: np.exp(-b1 * x) / (b2 + b3 * x),
    "BoxBOD": lambda x, b1, b2: b1 * (1 - np.exp(-b2 * x)),
}


@pytest.mark.parametrize("name", sorted(NIST_PROFILED))
def test_profile_ends_of_nist_problems_match_exact_profiles(nist, name):
    reference = nist(name)
    model = NIST_PROFILED[name]
    n = len(reference.certified)
    result = audit_profiles(model, reference.x, reference.y, reference.names, reference.start2,
                            lower=np.full(n, np.nan), upper=np.full(n, np.nan), log_axis=np.zeros(n, dtype=bool))
    # Reference: scipy.optimize.least_squares refits + brentq, each side walked ten certified
    # standard deviations (NIST StRD file) out from the certified value.
    reach = 10 * reference.certified_sd
    far = np.column_stack([reference.certified - reach, reference.certified + reach])
    exact, best, _ = exact_profile_ends(model, reference.x, reference.y, reference.start2, far=far)
    np.testing.assert_allclose(best, reference.certified, rtol=1e-6)    # NIST certified values
    assert np.isfinite(exact).all()
    profiles = result.profiles
    assert set(profiles.lower_status) == set(profiles.upper_status) == {"closed"}
    np.testing.assert_allclose(profiles.lower, exact[:, 0], rtol=END_RTOL)
    np.testing.assert_allclose(profiles.upper, exact[:, 1], rtol=END_RTOL)


def best_fit(problem: Problem, start, solver: SolverSettings) -> tuple[np.ndarray, str]:
    """The fit the identifiability stage audits when no sweep ran: the best from ``start``."""
    known = best_known_fit(problem, np.asarray(start, dtype=float), **solver.fit_options(), accept_lost_rank=True)
    assert known is not None, "nothing from the start converged"
    return known.params, known.outcome
