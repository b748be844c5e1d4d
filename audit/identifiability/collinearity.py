"""Collinearity indices of parameter subsets (Brun, Reichert & Künsch, 2001, Water Resources Research).

For a subset K of parameters, with S̃ the sensitivity matrix whose columns are scaled to unit
length, the collinearity index is

    γ_K = 1 / sqrt(λ_min(S̃_Kᵀ S̃_K)) = 1 / σ_min(S̃_K),

the factor by which moving the parameters of K together can undo their effects on the fit:
with each parameter's move measured by the change of the fit it causes alone, the smallest
change of the fit a unit combined move can cause is 1/γ_K (γ_K = 10: the effect of one
parameter can be compensated to 10 % by the others of the subset). The unit-length scaling makes the index
independent of the parameters' units; the rows here are the weighted Jacobian's (each
observation divided by its standard deviation), which is Brun et al.'s choice of scaling the
outputs by their measurement error.

Brun et al. (2001) call a subset identifiable when γ_K stays below a critical value that they
put at 10 to 15 (value from memory); fitaudit flags above 15 by default ([identifiability]
collinearity_limit).

Computation: one QR factorisation S̃ = Q·R with R (n × n); the singular values of S̃_K are
those of R's columns K, so every subset costs an SVD of a small n × |K| matrix, and all subsets
of one size are done in one batched call without squaring the condition number.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from ..jsonable import jsonable

#: Largest subset size examined (the convention of examining subsets up to six parameters).
MAX_SUBSET_SIZE = 6
#: Upper bound on the number of subsets: the largest size is lowered until the count fits.
MAX_SUBSETS = 250_000
#: Subsets handed to one batched SVD call.
CHUNK = 20_000


@dataclass
class Collinearity:
    """Collinearity indices of every parameter subset of size 2 .. max_size.

    A single parameter's index is 1 by construction (one unit column), so subsets start at two.

    Attributes:
        names: parameter names (n).
        limit: critical index; subsets above it count as not identifiable.
        max_size: largest subset size examined.
        members: (S, max_size) parameter indices of each subset, padded with −1.
        size: (S,) subset sizes.
        index: (S,) collinearity indices γ (inf where the columns are exactly dependent).
        largest_identifiable: (L, k) the subsets of the largest size k whose index stays below
            ``limit``, best first; shape (0, 0) when no pair is identifiable.
    """

    names: tuple[str, ...]
    limit: float
    max_size: int
    members: np.ndarray
    size: np.ndarray
    index: np.ndarray
    largest_identifiable: np.ndarray

    def subset_names(self, row: int) -> tuple[str, ...]:
        """Names of the parameters in subset ``row``."""
        return tuple(self.names[j] for j in self.members[row] if j >= 0)

    def to_dict(self) -> dict:
        return jsonable({
            "limit": self.limit,
            "max_size": self.max_size,
            "subsets": [{"parameters": list(self.subset_names(row)), "index": self.index[row]}
                        for row in range(len(self.index))],
            "largest_identifiable": [[self.names[j] for j in subset] for subset in self.largest_identifiable],
        })


def largest_size(n: int, max_size: int = MAX_SUBSET_SIZE, max_subsets: int = MAX_SUBSETS) -> int:
    """Largest k ≤ min(n, max_size) such that all subsets of sizes 2..k number at most ``max_subsets``."""
    size = min(n, max_size)
    while size > 2 and sum(math.comb(n, k) for k in range(2, size + 1)) > max_subsets:
        size -= 1
    return size


def collinearity_indices(weighted_jacobian: np.ndarray, names: tuple[str, ...], limit: float) -> Collinearity:
    """Collinearity indices of all subsets of the columns of ``weighted_jacobian``.

    Args:
        weighted_jacobian: (m, n) weighted sensitivities ∂f_i/∂a_j / sigma_i.
        names: the n parameter names.
        limit: critical collinearity index (> 1).

    Returns:
        Collinearity; with fewer than two parameters, no subsets.
    """
    m, n = weighted_jacobian.shape
    norms = np.linalg.norm(weighted_jacobian, axis=0)
    unit = weighted_jacobian / np.where(norms > 0, norms, 1.0)
    if m < n:
        unit = np.vstack([unit, np.zeros((n - m, n))])
    triangle = np.linalg.qr(unit, mode="r")
    max_size = largest_size(n) if n >= 2 else 0
    members, sizes, indices = [], [], []
    for size in range(2, max_size + 1):
        combos = np.array(list(itertools.combinations(range(n), size)), dtype=np.int64)
        for first in range(0, len(combos), CHUNK):
            chunk = combos[first:first + CHUNK]
            columns = np.moveaxis(triangle[:, chunk], 0, 1)                 # (C, n, size)
            smallest = np.linalg.svd(columns, compute_uv=False)[:, -1]
            dead = (norms[chunk] == 0).any(axis=1)
            with np.errstate(divide="ignore"):
                indices.append(np.where(dead, np.inf, 1.0 / smallest))
            padded = np.full((len(chunk), max_size), -1, dtype=np.int64)
            padded[:, :size] = chunk
            members.append(padded)
            sizes.append(np.full(len(chunk), size, dtype=np.int64))
    if not members:
        empty = np.empty((0, max_size), dtype=np.int64)
        return Collinearity(tuple(names), float(limit), max_size, empty, np.empty(0, dtype=np.int64),
                            np.empty(0), np.empty((0, 0), dtype=np.int64))
    members, sizes, indices = np.concatenate(members), np.concatenate(sizes), np.concatenate(indices)
    return Collinearity(tuple(names), float(limit), max_size, members, sizes, indices,
                        _largest_identifiable(members, sizes, indices, limit))


def _largest_identifiable(members: np.ndarray, sizes: np.ndarray, indices: np.ndarray, limit: float) -> np.ndarray:
    identifiable = indices < limit
    if not identifiable.any():
        return np.empty((0, 0), dtype=np.int64)
    size = sizes[identifiable].max()
    rows = np.flatnonzero(identifiable & (sizes == size))
    rows = rows[np.argsort(indices[rows], kind="stable")]
    return members[rows, :size]
