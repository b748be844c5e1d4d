"""High-accuracy numeric partial derivatives at a set of check points, with error bounds.

The outside reference of the derivative audit is numdifftools: central differences over a
sequence of shrinking steps, combined by Richardson extrapolation, which also yields an error
estimate for every element. All check points are differentiated in one numdifftools call: the
function handed to it maps a relative shift u (n,) to the model values of every point at once,

    g(u) = f(x; a_k + u * scale_k)  for k = 1..K, flattened to (K·m,),

so that every evaluation is one batched model call, and the steps numdifftools takes in u are
relative to each parameter's size (absolute steps would be far too large for a rate of 1e-5 and
far too small for a position of 500).

Two safeguards beyond numdifftools' own estimate:
- its estimate ignores the rounding of the model values, which dominates where a derivative is
  tiny compared with the model value; a rounding bound eps·|f| / step is added;
- at a kink (abs, a branch) the extrapolated central difference can look settled and still be
  wrong. Forward and backward derivatives are therefore formed as well; where they differ beyond
  their errors, the model is not smooth at that point and the element is marked unreliable.
"""
from __future__ import annotations

from dataclasses import dataclass

import numdifftools
import numpy as np

from ..engine.problem import FLOOR_FRACTION, Problem

#: A difference counts as real only beyond this multiple of its error bound.
SAFETY = 10.0
#: Left and right derivatives further apart than this fraction of the column's size (and beyond
#: their error bounds) mean the model has a kink or a jump there.
KINK_FRACTION = 1e-3
#: An element whose error bound exceeds this fraction of the column's size cannot judge anything.
UNRELIABLE_FRACTION = 1e-3
EPS = np.finfo(float).eps
#: Relative steps from 1/2 down by factors of 2 (15 of them, to about 3e-5): large enough for
#: Richardson extrapolation to beat rounding, never so large that a parameter changes sign.
STEPS = numdifftools.MaxStepGenerator(base_step=0.5, step_ratio=2.0, num_steps=15)


@dataclass
class NumericDerivatives:
    """numdifftools' derivatives at K points, n parameters, m observations.

    Attributes:
        values: (K, n, m) central-difference estimates (Richardson-extrapolated).
        error: (K, n, m) error bound: numdifftools' estimate plus the rounding bound.
        column_scale: (K, n) largest |value| of each column at each point (0 for a zero column).
        smooth: (K, n, m) False where the left and right derivatives differ (kink or jump).
        reliable: (K, n, m) finite, smooth and with an error bound small against the column.
    """

    values: np.ndarray
    error: np.ndarray
    column_scale: np.ndarray
    smooth: np.ndarray
    reliable: np.ndarray


def relative_steps(problem: Problem, points: np.ndarray) -> np.ndarray:
    """(K, n) the size each parameter is measured on: max(|a|, floor), as the engine does."""
    typical = problem.typical if problem.typical is not None else np.abs(points).max(axis=0)
    floor = FLOOR_FRACTION * np.where(typical > 0, typical, 1.0)
    return np.maximum(np.abs(points), floor)


def numeric_derivatives(problem: Problem, points: np.ndarray) -> NumericDerivatives:
    """Reference derivatives of ``problem.model`` at ``points`` (K, n), where the model is finite.

    Raises:
        InputError: when the model's output has the wrong shape (from ``Problem.predict``).
    """
    points = np.asarray(points, dtype=float)
    count, n = points.shape
    scale = relative_steps(problem, points)
    values_at_points = problem.predict(points)                      # (K, m)

    def shifted_model(shift: np.ndarray) -> np.ndarray:
        return problem.predict(points + shift * scale).ravel()

    central, forward, backward = (_extrapolated(shifted_model, method, scale, problem.n_obs)
                                  for method in ("central", "forward", "backward"))
    with np.errstate(all="ignore"):
        rounding = [EPS * np.abs(values_at_points)[:, None, :] / (step * scale[:, :, None])
                    for step in (central[2], forward[2], backward[2])]
        error = central[1] + rounding[0]
        finite = np.isfinite(central[0]) & np.isfinite(error)
        column_scale = np.max(np.where(finite, np.abs(central[0]), 0.0), axis=2)
        scale_3d = column_scale[:, :, None]
        gap = np.abs(forward[0] - backward[0])
        one_sided_error = forward[1] + backward[1] + rounding[1] + rounding[2]
        smooth = ~(gap > SAFETY * one_sided_error + KINK_FRACTION * scale_3d)
        reliable = finite & smooth & ~(error > UNRELIABLE_FRACTION * scale_3d)
    return NumericDerivatives(values=central[0], error=error, column_scale=column_scale,
                              smooth=smooth, reliable=reliable)


def _extrapolated(function, method: str, scale: np.ndarray, n_obs: int):
    """(values, error, step) each (K, n, m), in the units of the parameters (not of the shift)."""
    count, n = scale.shape
    result = numdifftools.Jacobian(function, step=STEPS, method=method, full_output=True)(np.zeros(n))
    estimate, error, step = _unpack(result)

    def per_point(array) -> np.ndarray:
        # numdifftools gives (K·m, n), squeezed for n = 1; back to (K, n, m).
        return np.moveaxis(np.asarray(array, dtype=float).reshape(count, n_obs, n), 2, 1)

    return per_point(estimate) / scale[:, :, None], per_point(error) / scale[:, :, None], per_point(step)


def _unpack(result) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(estimate, error estimate, final step) from numdifftools' full output, old and new style."""
    if hasattr(result, "error_estimate"):
        return result.estimate, result.error_estimate, result.final_step
    estimate, info = result
    return estimate, info.error_estimate, info.final_step
