"""Batched solution of the linearised least-squares step J·Δ ≈ r for many runs at once.

Each run's weighted Jacobian is scaled to unit column norms (this removes the worst of the
ill-conditioning that comes from parameters of very different sizes). The fast path solves the
scaled normal equations with a Cholesky factorisation written out over the batch, which for a
handful of parameters costs a few numpy calls instead of one LAPACK call per run. Normal
equations square the condition number, so runs whose Cholesky pivots show a scaled condition
above about 1e4 are solved again from a QR factorisation of [J | r] followed by an SVD of the
small triangular factor; that SVD also decides whether the Jacobian has lost rank.

The same pieces feed the trust-region (Levenberg-Marquardt) steps of ``trust_region``, so a
rejected trial step costs no new factorisation.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Smallest relative Cholesky pivot accepted on the fast path (pivot / diagonal of the scaled
#: Gram matrix). Below it the normal equations would lose more than about 8 digits.
PIVOT_TOLERANCE = 1e-8

#: A scaled Jacobian whose smallest singular value is below this fraction of its largest has
#: lost rank. It sits above the error of central differences (about 1e-10 relative), so that
#: exactly proportional columns are recognised even without an analytic Jacobian.
RANK_TOLERANCE = 1e-9

#: The smallest normal float: a pivot floor and a damping floor.
TINY = np.finfo(float).tiny


@dataclass
class StepSystem:
    """The factorised step problem for A runs with c free parameters.

    Attributes:
        column_norms: (A, c) Euclidean norms of the weighted Jacobian's columns.
        gram: (A, c, c) Gram matrix of the column-scaled Jacobian (unit diagonal).
        gradient: (A, c) scaled Jacobian transposed times the weighted residual.
        emphasis: (A, c) relative damping of each scaled parameter (ones: plain Marquardt).
        factor: (c, c, A) Cholesky factor of ``gram``, runs last (used for the runs not solved
            carefully).
        broken: (A,) True where the derivatives or residuals are not finite.
        rank_deficient: (A,) True where the scaled Jacobian has lost rank.
        careful: (A,) True where the QR/SVD path replaces the normal equations.
        left, singular_values, right, projected: for the careful runs, the SVD of the
            triangular factor divided by sqrt(emphasis), and Qᵀr.
        free_columns: (A, c) 1.0 where the run fits the parameter, 0.0 where it holds it fixed;
            steps are multiplied by it so that rounding cannot move a held parameter.
    """

    column_norms: np.ndarray
    gram: np.ndarray
    gradient: np.ndarray
    emphasis: np.ndarray
    factor: np.ndarray
    broken: np.ndarray
    rank_deficient: np.ndarray
    careful: np.ndarray
    left: np.ndarray
    singular_values: np.ndarray
    right: np.ndarray
    projected: np.ndarray
    free_columns: np.ndarray

    @classmethod
    def build(cls, rows: list[np.ndarray], residual: np.ndarray, norm_memory: np.ndarray | None = None,
              held: np.ndarray | None = None) -> "StepSystem":
        """Factorise the step problem.

        Args:
            rows: c weighted derivative rows (one per free parameter), each broadcastable to
                (A, m).
            residual: (A, m) weighted residual y - f.
            norm_memory: (A, c) largest column norms seen so far in these runs. Damping then
                uses them instead of the current norms, so that a parameter whose derivative
                fades (an exponential rate running off) cannot take ever larger steps.
            held: (A, c) True where a run holds that parameter fixed: its column is replaced by
                a unit column of its own, decoupled from the others and with no gradient, so
                its step is exactly zero.
        """
        count, width = residual.shape[0], len(rows)
        raw_gram, raw_gradient = _row_products(rows, residual, count)
        if held is not None:
            kept = ~held.T
            raw_gram = np.where(kept[:, None, :] & kept[None, :, :], raw_gram, 0.0)
            np.einsum("iia->ia", raw_gram)[held.T] = 1.0
            raw_gradient = np.where(held.T, 0.0, raw_gradient)
        norms = np.sqrt(np.einsum("iia->ia", raw_gram))
        broken = ~(np.isfinite(raw_gram).all(axis=(0, 1)) & np.isfinite(raw_gradient).all(axis=0))
        dead_column = ~(norms > 0)
        norms = np.where(dead_column | broken, 1.0, norms)
        gram = raw_gram / norms[:, None, :] / norms[None, :, :]
        if broken.any():
            gram[:, :, broken] = np.eye(width)[:, :, None]
        factor, pivots = cholesky_runs_last(gram)
        gradient = np.where(broken, 0.0, raw_gradient / norms).T
        norms, dead_column = norms.T, dead_column.T
        gram = gram.transpose(2, 0, 1)
        emphasis = np.ones((count, width)) if norm_memory is None else (np.maximum(norm_memory, norms) / norms) ** 2
        careful = (pivots.min(axis=0) < PIVOT_TOLERANCE) & ~dead_column.any(axis=1) & ~broken
        rank_deficient = dead_column.any(axis=1) & ~broken
        left, values, right, projected, unit_values = _careful_factors(rows, residual, norms, careful, held, emphasis,
                                                                       norm_memory is not None)
        if len(unit_values):
            rank_deficient[careful] = unit_values[:, -1] <= RANK_TOLERANCE * unit_values[:, 0]
        free_columns = np.ones((count, width)) if held is None else (~held).astype(float)
        return cls(norms, gram, gradient, emphasis, factor, broken, rank_deficient, careful, left, values, right,
                   projected, free_columns)

    def restricted(self, keep: np.ndarray) -> "StepSystem":
        """The same system for the runs in ``keep`` only."""
        if keep.all():
            return self
        careful_keep = keep[self.careful]
        return StepSystem(
            self.column_norms[keep], self.gram[keep], self.gradient[keep], self.emphasis[keep], self.factor[..., keep],
            self.broken[keep], self.rank_deficient[keep], self.careful[keep],
            self.left[careful_keep], self.singular_values[careful_keep],
            self.right[careful_keep], self.projected[careful_keep], self.free_columns[keep],
        )

    def gauss_newton(self) -> np.ndarray:
        """(A, c) Gauss-Newton steps in parameter units; NaN rows where rank was lost."""
        # Every run goes through the Cholesky solve (one pass, no gathering); the careful runs'
        # results, meaningless where the pivots collapsed, are then replaced.
        with np.errstate(all="ignore"):
            steps = cholesky_solve(self.factor, self.gradient.T).T
        if self.rank_deficient.any():
            steps[self.rank_deficient] = np.nan
        if self.careful.any():
            with np.errstate(divide="ignore", invalid="ignore"):
                coefficients = np.einsum("aji,aj->ai", self.left, self.projected) / self.singular_values
            careful_steps = np.einsum("aij,ai->aj", self.right, coefficients) / np.sqrt(self.emphasis[self.careful])
            careful_steps[self.rank_deficient[self.careful]] = np.nan
            steps[self.careful] = careful_steps
        return steps / self.column_norms * self.free_columns


def _careful_factors(rows: list[np.ndarray], residual: np.ndarray, norms: np.ndarray, careful: np.ndarray,
                     held: np.ndarray | None, emphasis: np.ndarray, damped: bool) -> tuple[np.ndarray, ...]:
    """SVD of the triangular factor of [Js | r] for the runs solved carefully (see ``build``).

    Returns:
        left, values, right: the SVD of R / sqrt(emphasis); projected: Qᵀr; unit_values: the
        singular values of R itself (the same as ``values`` unless ``damped``).
    """
    count, width = residual.shape[0], len(rows)
    if not careful.any():
        empty = np.empty((0, width))
        square = np.empty((0, width, width))
        return square, empty, square, empty, empty
    chosen = np.flatnonzero(careful)
    scaled = np.empty((len(chosen), width, residual.shape[1]))
    for j, row in enumerate(rows):
        scaled[:, j] = np.broadcast_to(row, residual.shape)[chosen]
    scaled /= norms[chosen][:, :, None]
    if held is not None:
        # Held columns become unit columns on rows of their own (appended observations with
        # zero residual), which is what the Gram matrix says.
        scaled = np.concatenate([np.where(held[careful][:, :, None], 0.0, scaled),
                                 _diagonal(held[careful].astype(float))], axis=2)
        residual = np.concatenate([residual, np.zeros((count, width))], axis=1)
    triangle, projected = _triangular_factor(scaled, residual[careful])
    left, values, right = np.linalg.svd(triangle / np.sqrt(emphasis[careful])[:, None, :])
    # Rank is judged on unit columns; with damping emphasis that needs its own SVD.
    unit_values = np.linalg.svd(triangle, compute_uv=False) if damped else values
    return left, values, right, projected, unit_values


def _row_products(rows: list[np.ndarray], residual: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
    """JᵀJ (c, c, A) and Jᵀr (c, A), runs last (every product and every pivot is then one
    contiguous row), from c derivative rows broadcastable to (A, m) and residuals (A, m)."""
    width = len(rows)
    columns = rows + [residual]
    products = np.empty((width, width + 1, count))
    for i in range(width):
        for j in range(i, width + 1):
            products[i, j] = np.einsum("...m,...m->...", columns[i], columns[j])
    for i in range(width):
        products[i + 1 : width, i] = products[i, i + 1 : width]
    return products[:, :width], products[:, width]


def _diagonal(values: np.ndarray) -> np.ndarray:
    """(A, c, c) diagonal matrices from (A, c) diagonals."""
    out = np.zeros(values.shape + values.shape[-1:])
    np.einsum("aii->ai", out)[...] = values
    return out


def cholesky_runs_last(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cholesky factors of A symmetric c×c matrices stored runs last, (c, c, A).

    Never raises: a non-positive pivot is replaced by a tiny one so that the caller can read the
    problem off the returned pivots.

    Returns:
        factor (c, c, A) lower triangular, and pivots (c, A) relative to the matrix diagonal.
    """
    width, _, count = matrix.shape
    factor = np.zeros_like(matrix)
    pivots = np.empty((width, count))
    for j in range(width):
        diagonal = matrix[j, j]
        pivot = diagonal - sum_over_first(factor[j, :j] * factor[j, :j])
        scale = np.where(diagonal > 0, diagonal, 1.0)
        pivots[j] = pivot / scale
        root = np.sqrt(np.maximum(pivot, TINY * scale))
        factor[j, j] = root
        if j + 1 < width:
            below = matrix[j + 1 :, j] - sum_over_first(np.swapaxes(factor[j + 1 :, :j], 0, 1) * factor[j, :j, None])
            factor[j + 1 :, j] = below / root
    return factor, pivots


def cholesky_solve(factor: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve L·Lᵀ·x = rhs for A systems at once, runs last: factor (c, c, A), rhs (c, A)."""
    return back_substitution(factor, forward_substitution(factor, rhs))


def forward_substitution(factor: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve L·z = rhs for A lower triangular systems, runs last: factor (c, c, A), rhs (c, ..., A)
    (extra axes between are further right-hand sides)."""
    width = rhs.shape[0]
    spread = (slice(None),) + (None,) * (rhs.ndim - 2)   # a factor column against every right-hand side
    forward = np.empty_like(rhs)
    for i in range(width):
        forward[i] = (rhs[i] - sum_over_first(factor[i, :i][spread] * forward[:i])) / factor[i, i]
    return forward


def back_substitution(factor: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve Lᵀ·x = rhs for A lower triangular factors, runs last: factor (c, c, A), rhs (c, A)."""
    width = rhs.shape[0]
    solution = np.empty_like(rhs)
    for i in reversed(range(width)):
        tail = sum_over_first(factor[i + 1 :, i] * solution[i + 1 :])
        solution[i] = (rhs[i] - tail) / factor[i, i]
    return solution


def sum_over_first(terms: np.ndarray) -> np.ndarray | float:
    """Sum over the first axis, added in order for every run whatever the batch's size (an
    einsum may pick a different summation order for a different number of runs, and a run's
    result must not depend on its batch). No terms sum to 0.0."""
    if len(terms) < 2:
        return terms[0] if len(terms) else 0.0
    total = terms[0] + terms[1]
    for term in terms[2:]:
        total += term
    return total


def _triangular_factor(scaled: np.ndarray, residual: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """R (A, c, c) and Qᵀr (A, c) from the QR factorisation of [Js | r], without forming Q.

    ``scaled`` is (A, c, m), the column-scaled Jacobian transposed. With fewer observations
    than c + 1 the matrix is padded with zero rows, which leaves R and Qᵀr unchanged.
    """
    count, width, rows = scaled.shape
    augmented = np.concatenate([np.swapaxes(scaled, 1, 2), residual[:, :, None]], axis=2)
    if rows < width + 1:
        augmented = np.concatenate([augmented, np.zeros((count, width + 1 - rows, width + 1))], axis=1)
    triangle = np.linalg.qr(augmented, mode="r")
    return triangle[:, :width, :width], triangle[:, :width, width]
