"""Extended-precision check of a reference fit whose residual sum of squares double precision cannot resolve.

Some certified residual sums of squares are so small that double precision cannot reproduce
them even at the certified parameters: each residual y − f is computed with a rounding error of
about eps·(|y| + |f|) (the decimal data's conversion to binary alone contributes eps/2·|y|), so
the computed SSR is uncertain by about 2·eps·Σ|r_i|·(|y_i| + |f_i|). When that bound is a
sizeable fraction of the SSR, the SSR's digits say nothing about the solver.

For those problems a converged double-precision fit is refined by a few Gauss-Newton steps in
extended precision (mpmath, ``EXTENDED_DIGITS`` significant digits), with the data taken from
their exact decimal text, and the SSR of the refined point is compared with the certified one.
This shows that the double-precision fit lies at the certified minimum to within its own
precision; it does not replace the double-precision parameters.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inputs.formula import CompiledFormula

#: Significant decimal digits of the extended-precision arithmetic: far beyond the 11 certified
#: digits, and enough to square the condition number of the hard problems' Jacobians.
EXTENDED_DIGITS = 40
#: Gauss-Newton steps at most; from a converged double fit two or three reach full precision.
REFINE_STEPS = 8


def ssr_digits_available(residual: np.ndarray, y: np.ndarray, fitted: np.ndarray, ssr: np.ndarray) -> np.ndarray:
    """How many significant digits of the SSR double precision can resolve, per run.

    Args:
        residual: (B, m) y − f.
        y: (m,) observations.
        fitted: (B, m) model values.
        ssr: (B,) residual sums of squares.

    Returns:
        (B,) −log10(2·eps·Σ|r_i|·(|y_i| + |f_i|) / SSR), the digits left above the rounding
        floor; +inf for an exact fit.
    """
    eps = np.finfo(float).eps
    with np.errstate(divide="ignore", invalid="ignore"):
        floor = 2 * eps * np.sum(np.abs(residual) * (np.abs(y) + np.abs(fitted)), axis=-1) / ssr
        return -np.log10(floor)


@dataclass
class ExtendedRefinement:
    """A double-precision fit refined in extended precision.

    Attributes:
        params: (n,) refined parameters, rounded to double for reporting.
        ssr: the refined point's residual sum of squares (rounded to double).
        steps: Gauss-Newton steps taken.
        shift: largest relative parameter change from the double-precision fit.
    """

    params: np.ndarray
    ssr: float
    steps: int
    shift: float


def refine_in_extended_precision(model: CompiledFormula, response: CompiledFormula | None,
                                 data_text: tuple[tuple[str, ...], ...], params: np.ndarray) -> ExtendedRefinement:
    """Refine ``params`` by Gauss-Newton steps in extended precision.

    Args:
        model: the compiled model formula.
        response: the compiled response transform (a function of the response name), or None.
        data_text: (m, 1 + k) data cells as written, response first.
        params: (n,) a converged double-precision fit.

    Returns:
        The refined point and its SSR. Cost grows with m·n; meant for the few problems that
        need it.
    """
    import mpmath

    with mpmath.workdps(EXTENDED_DIGITS):
        function, derivatives = model.callable_with("mpmath")
        rows = [[mpmath.mpf(cell) for cell in row] for row in data_text]
        y = [row[0] for row in rows]
        if response is not None:
            transform, _ = response.callable_with("mpmath")
            y = [transform(value) for value in y]
        predictors = [row[1:] for row in rows]
        point = [mpmath.mpf(float(value)) for value in params]
        start = list(point)
        steps = 0
        for steps in range(1, REFINE_STEPS + 1):
            residual = mpmath.matrix([obs - function(*cells, *point) for obs, cells in zip(y, predictors)])
            jacobian = mpmath.matrix([derivatives(*cells, *point) for cells in predictors])
            move, _ = mpmath.qr_solve(jacobian, residual)
            point = [value + delta for value, delta in zip(point, move)]
            if max(abs(delta) / max(abs(value), mpmath.eps) for delta, value in zip(move, point)) \
                    < mpmath.mpf(10) ** (5 - EXTENDED_DIGITS):
                break
        ssr = mpmath.fsum((obs - function(*cells, *point)) ** 2 for obs, cells in zip(y, predictors))
        shift = max(abs(new - old) / max(abs(old), mpmath.eps) for new, old in zip(point, start))
        return ExtendedRefinement(params=np.array([float(value) for value in point]), ssr=float(ssr),
                                  steps=steps, shift=float(shift))
