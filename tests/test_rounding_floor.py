"""Damped zig-zags and the SSR's rounding floor: converging runs are not oscillations.

The reference is a hand derivation (``zigzag_problem``'s docstring): the minimum, and the rate
at which Gauss-Newton approaches it, in closed form.
"""
from __future__ import annotations

import numpy as np
import pytest
from engine_problems import cycling_problem

from audit import Outcome, Problem, fit_batch

#: Start, minimum and size of the large residual of ``zigzag_problem``.
START, MINIMUM, LARGE_RESIDUAL = 3.0, 2.0, 1000.0


def zigzag_problem(rate: float) -> Problem:
    """Two observations, y = (s, Y) at x = 0, 1, and f(x; a) = (1 − x)·a + x·k·(a − s)²/2 with
    k = rate / Y (s = MINIMUM, Y = LARGE_RESIDUAL).

    Hand derivation, with u = a − s: the residuals are r = (−u, Y − k·u²/2), so
    SSR(u) = u² + (Y − k·u²/2)² and dSSR/du = 2u·(1 − kY + k²u²/2). For kY < 1 that vanishes
    only at u = 0: the one minimum is a = s, with SSR = Y². The Jacobian is J = (1, k·u), and
    the Gauss-Newton update u + JᵀR/JᵀJ works out to u·(kY + k²u²/2) / (1 + k²u²) ≈ kY·u:
    Gauss-Newton converges linearly at the rate kY (the large-residual rate Σ rᵢf''ᵢ / Σ f'ᵢ²
    at the minimum). With kY < 0 the iterates zig-zag around s, each step |kY| times the last;
    the SSR then exceeds Y² by only (1 − kY)·u², below 1e-9 of Y² = 1e6 from |u| ≈ 0.03 on,
    and below its own rounding noise (about 4·eps·Y² ≈ 1e-9) from |u| ≈ 3e-5 on, while the
    steps, about (1 − kY)·|u|, are still far above the tolerance.
    """
    slope = rate / LARGE_RESIDUAL

    def model(x, a):
        return (1 - x) * a + x * slope * (a - MINIMUM) ** 2 / 2

    def jacobian(x, a):
        return [(1 - x) + x * slope * (a - MINIMUM)]

    return Problem(model, np.array([0.0, 1.0]), np.array([MINIMUM, LARGE_RESIDUAL]), ("a",), jacobian=jacobian)


@pytest.mark.parametrize("method", ["gn", "lm"])
@pytest.mark.parametrize("rate", [-0.8, -0.95])
def test_a_damped_zigzag_converges_to_the_minimum(method, rate):
    tol = 1e-10
    fit = fit_batch(zigzag_problem(rate), [[START]], method=method, tol=tol, max_iter=1000)
    assert fit.outcome[0] == Outcome.CONVERGED
    # Hand derivation (zigzag_problem): the minimum is a = s exactly. The last step was below
    # tol·|a|, and a zig-zag's remaining distance is below its last step (|kY| / (1 + |kY|) < 1).
    assert abs(fit.params[0, 0] - MINIMUM) <= tol * MINIMUM
    # The SSR at the minimum is Y², to its rounding noise.
    assert fit.ssr[0] == pytest.approx(LARGE_RESIDUAL**2, rel=1e-12)


def test_gauss_newton_zigzags_at_the_derived_rate():
    """The test problem is the hard case it claims to be: Gauss-Newton's iterates reverse and
    shrink by the derived rate kY = −0.8 at each step (zigzag_problem's docstring)."""
    rate = -0.8
    fit = fit_batch(zigzag_problem(rate), [[START]], tol=1e-10, max_iter=200, history=200)
    offsets = fit.history[0, :, 0] - MINIMUM
    offsets = offsets[np.isfinite(offsets)]
    # k²u² ≤ 6.4e-7 here, and the rounding of a (about 4e-16) is negligible above |u| = 1e-6.
    resolved = offsets[np.abs(offsets) > 1e-6]
    assert len(resolved) >= 10
    np.testing.assert_allclose(resolved[1:] / resolved[:-1], rate, rtol=1e-4)


def test_a_two_cycle_is_still_oscillating_at_a_large_ssr():
    """The Newton 2-cycle of ``cycling_problem`` (a = 0, 1, 0, 1, ...), with a fourth observation
    that adds a constant residual of 1e4 to every run: the SSR's rounding noise grows with the
    SSR, yet the iterates repeat exactly, so the SSR never falls and the run still cycles."""
    cycle = cycling_problem()
    problem = Problem(lambda x, a: np.where(x > 3, 0.0, x * (a**3 - 2 * a + 2)), np.array([1.0, 2.0, 3.0, 4.0]),
                      np.array([0.0, 0.0, 0.0, 1e4]), ("a",),
                      jacobian=lambda x, a: [np.where(x > 3, 0.0, x * (3 * a**2 - 2))])
    for problem in (cycle, problem):
        fit = fit_batch(problem, [[0.0]], 1.0, history=6)
        assert fit.outcome[0] == Outcome.OSCILLATING
        # Newton's map for a³ − 2a + 2 sends 0 to 1 and 1 to 0 (by hand: 0 − 2/(−2) = 1,
        # 1 − 1/1 = 0).
        assert set(fit.history[0].ravel()[-4:]) == {0.0, 1.0}
