"""High-accuracy numeric partial derivatives at a set of check points, with error bounds.

The outside reference of the derivative audit is numdifftools: central differences over a
sequence of shrinking steps, combined by Richardson extrapolation, which also yields an error
estimate for every element. All check points are differentiated in one numdifftools call: the
function handed to it maps a relative shift u (n,) to the model values of every point at once,

    g(u) = f(x; a_k + u * scale_k)  for k = 1..K, flattened to (K·m,),

so that every evaluation is one batched model call, and the steps numdifftools takes in u are
relative to each parameter's size (absolute steps would be far too large for a rate of 1e-5 and
far too small for a position of 500).

numdifftools keeps its whole Richardson table (every step, every estimate) for every output value,
about 1.5 KB per derivative element, so the observations are handed to it in blocks of at most
BLOCK_ELEMENTS elements (K points × n parameters × rows): its working memory stays near 25 MB
however many rows the data has. A block evaluates the model on its own rows only, which is right
for a model whose value at an observation depends on that observation alone; a model that reads
other rows (a shift by the first time, a mean) is recognised because its values on a block differ
from its values on all rows, and is then evaluated on all rows for every block, which costs
model calls but not memory.

Two safeguards beyond numdifftools' own estimate:
- its estimate ignores the rounding of the model values, which dominates where a derivative is
  tiny compared with the model value; a rounding bound eps·|f| / step is added;
- at a kink (abs, a branch) the extrapolated central difference can look settled and still be
  wrong. Forward and backward derivatives are therefore formed as well; where they differ beyond
  their errors, the model is not smooth at that point and the element is marked unreliable.
"""
from __future__ import annotations

import dataclasses
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
#: Derivative elements (points × parameters × rows) handed to numdifftools in one call.
BLOCK_ELEMENTS = 2**14


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

    Returns the arrays described in ``NumericDerivatives``, each (K, n, m) or (K, n).
    """
    points = np.asarray(points, dtype=float)
    count, n = points.shape
    scale = relative_steps(problem, points)
    values_at_points = problem.predict(points)                      # (K, m)
    shape = (count, n, problem.n_obs)
    central, error, kink = np.empty(shape), np.empty(shape), np.empty(shape)
    rows_per_block = max(1, BLOCK_ELEMENTS // (count * n))
    row_wise = True
    for first in range(0, problem.n_obs, rows_per_block):
        rows = slice(first, min(first + rows_per_block, problem.n_obs))
        block = _rows_of(problem, rows)
        row_wise = row_wise and _same_values(block, points, values_at_points[:, rows])
        shifted_model = (_shifted(block, points, scale) if row_wise
                         else _shifted(problem, points, scale, rows))
        central[:, :, rows], error[:, :, rows], kink[:, :, rows] = _block_derivatives(
            shifted_model, scale, values_at_points[:, rows])
    with np.errstate(all="ignore"):
        finite = np.isfinite(central) & np.isfinite(error)
        column_scale = np.max(np.where(finite, np.abs(central), 0.0), axis=2)
        scale_3d = column_scale[:, :, None]
        # Kinks and reliability are judged against the whole column's size, known only now.
        smooth = ~(kink > KINK_FRACTION * scale_3d)
        reliable = finite & smooth & ~(error > UNRELIABLE_FRACTION * scale_3d)
    return NumericDerivatives(values=central, error=error, column_scale=column_scale,
                              smooth=smooth, reliable=reliable)


def _rows_of(problem: Problem, rows: slice) -> Problem:
    """The problem restricted to a block of observations."""
    weights = None if problem.weights is None else problem.weights[rows]
    return dataclasses.replace(problem, x=problem.x[..., rows], y=problem.y[rows], weights=weights)


def _same_values(block: Problem, points: np.ndarray, whole_values: np.ndarray) -> bool:
    """Whether the model gives a block's rows the values it gives them among all rows.

    Elementwise numpy arithmetic gives identical bits either way; a tolerance of a few ulps
    leaves room for a vectorised loop that rounds a block's edge differently. A model whose
    output has the length of the whole data whatever x it is given gives NaN on a block.
    """
    block_values = block.predict(points)
    with np.errstate(invalid="ignore"):
        close = np.abs(block_values - whole_values) <= 4 * EPS * np.abs(whole_values)
    return bool(np.all(close | (np.isnan(block_values) & np.isnan(whole_values))
                       | (block_values == whole_values)))


def _shifted(problem: Problem, points: np.ndarray, scale: np.ndarray, rows: slice | None = None):
    """g(u) of the module docstring on ``problem``'s rows, or on ``rows`` of a whole evaluation."""
    def shifted_model(shift: np.ndarray) -> np.ndarray:
        values = problem.predict(points + shift * scale)
        return (values if rows is None else values[:, rows]).ravel()
    return shifted_model


def _block_derivatives(shifted_model, scale: np.ndarray, values_at_points: np.ndarray):
    """(central, error bound, kink excess) each (K, n, rows) for one block of observations.

    The kink excess is how far the left and right derivatives differ beyond their error bounds;
    the caller compares it with the column's size.
    """
    rows = values_at_points.shape[1]
    central, forward, backward = (_extrapolated(shifted_model, method, scale, rows)
                                  for method in ("central", "forward", "backward"))
    with np.errstate(all="ignore"):
        rounding = [EPS * np.abs(values_at_points)[:, None, :] / (step * scale[:, :, None])
                    for step in (central[2], forward[2], backward[2])]
        gap = np.abs(forward[0] - backward[0])
        one_sided_error = forward[1] + backward[1] + rounding[1] + rounding[2]
        return central[0], central[1] + rounding[0], gap - SAFETY * one_sided_error


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
