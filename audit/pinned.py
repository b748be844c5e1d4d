"""A problem whose runs each hold one parameter of another problem fixed, at a value of their own.

``fit_batch`` takes one mask of free parameters per call. A profile-likelihood walk wants runs
that fix different parameters side by side (one batch per step, across all parameters and both
directions), so this module wraps the original problem instead:

* the wrapper has n − 1 parameters ("slots"): the original parameters except the pinned one,
  in their order, each divided by its typical magnitude, so that a single convergence scale
  (1) serves every slot whichever parameter a run pins, and the engine's relative-change test
  means exactly what it means for the original problem;
* which parameter a run pins, and at what value, travels in two extra rows of the per-run
  predictors, shape (k + 2, B, m): the k original predictor rows, then the pinned index and
  the pinned value repeated over the m observations.

The wrapper always supplies derivatives, taken from the original problem (its hand-derived
Jacobian, or its own central differences with the original difference floors).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .problem import FLOOR_FRACTION, Problem


@dataclass(frozen=True)
class Pinning:
    """How slot values map to the original parameters.

    Attributes:
        original: the problem being profiled.
        scale: (n,) typical magnitude of each original parameter; slot = parameter / scale.
    """

    original: Problem
    scale: np.ndarray

    @property
    def n_predictor_rows(self) -> int:
        return 1 if self.original.x.ndim == 1 else self.original.x.shape[0]

    def predictors(self, pinned: np.ndarray, values: np.ndarray) -> np.ndarray:
        """Per-run predictors (k + 2, B, m) for runs pinning ``pinned`` (B,) at ``values`` (B,)."""
        count, m = len(pinned), self.original.n_obs
        rows = np.reshape(self.original.x, (self.n_predictor_rows, 1, m))
        rows = np.broadcast_to(rows, (self.n_predictor_rows, count, m))
        marks = np.broadcast_to(np.stack([np.asarray(pinned, dtype=float), values])[:, :, None], (2, count, m))
        return np.concatenate([rows, marks], axis=0)

    def slots(self, params: np.ndarray, pinned: np.ndarray) -> np.ndarray:
        """(B, n − 1) slot values of original parameters ``params`` (B, n) with ``pinned`` (B,) left out."""
        kept = np.arange(params.shape[1])[None, :] != np.asarray(pinned)[:, None]
        return (params / self.scale)[kept].reshape(params.shape[0], -1)

    def full(self, slots: np.ndarray, pinned: np.ndarray, values: np.ndarray) -> np.ndarray:
        """(B, n) original parameters from slots (B, n − 1), pinned indices (B,) and values (B,)."""
        count, n = slots.shape[0], len(self.scale)
        kept = np.arange(n)[None, :] != np.asarray(pinned)[:, None]
        params = np.empty((count, n))
        params[kept] = slots.ravel()
        params *= self.scale
        params[~kept] = values
        return params

    def _unpack(self, x: np.ndarray, slot_columns: tuple[np.ndarray, ...]):
        """Original parameters, pinned mask and original predictors from a wrapper call."""
        if x.ndim == 2:
            x = x[:, None, :]
        count = max(np.shape(column)[0] for column in slot_columns)
        slots = np.column_stack([np.broadcast_to(column, (count, 1)) for column in slot_columns])
        marks = np.broadcast_to(x[-2:, :, 0], (2, count))
        pinned = marks[0].astype(np.int64)
        params = self.full(slots, pinned, marks[1])
        original_x = x[0, 0] if self.original.x.ndim == 1 else x[: self.n_predictor_rows, 0]
        return params, pinned, original_x

    def model(self, x: np.ndarray, *slot_columns: np.ndarray) -> np.ndarray:
        params, _, original_x = self._unpack(x, slot_columns)
        return self.original.predict(params, original_x)

    def jacobian(self, x: np.ndarray, *slot_columns: np.ndarray) -> list[np.ndarray]:
        params, pinned, original_x = self._unpack(x, slot_columns)
        floor = FLOOR_FRACTION * self.scale
        rows = self.original.derivatives(params, original_x, floor=floor)          # (B, n, m)
        kept = np.arange(params.shape[1])[None, :] != pinned[:, None]
        count = params.shape[0]
        slot_rows = rows[kept].reshape(count, -1, self.original.n_obs)
        slot_scale = np.broadcast_to(self.scale, params.shape)[kept].reshape(count, -1)
        return [slot_rows[:, i] * slot_scale[:, i, None] for i in range(slot_rows.shape[1])]


def pinned_problem(original: Problem, scale: np.ndarray) -> tuple[Problem, Pinning]:
    """The wrapper problem (n − 1 slots, unit typical magnitudes) and its ``Pinning``.

    Args:
        original: a problem with at least two parameters.
        scale: (n,) positive typical magnitudes of the original parameters.

    Raises:
        ValueError: for a one-parameter problem (nothing would be left to fit).
    """
    if original.n_params < 2:
        raise ValueError("pinning needs at least two parameters")
    pinning = Pinning(original=original, scale=np.asarray(scale, dtype=float))
    template = pinning.predictors(np.zeros(1, dtype=np.int64), np.zeros(1))[:, 0, :]
    names = tuple(f"slot{i + 1}" for i in range(original.n_params - 1))
    problem = Problem(model=pinning.model, x=template, y=original.y, names=names, jacobian=pinning.jacobian,
                      weights=original.weights, typical=np.ones(len(names)))
    return problem, pinning
