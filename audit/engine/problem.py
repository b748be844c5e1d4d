"""The fitting problem: data, weights, parameter names and batched model / Jacobian calls.

A model is written once, in numpy, with the parameters as separate arguments::

    def model(x, amplitude, rate, offset):
        return amplitude * np.exp(-rate * x) + offset

The problem calls it with every parameter as a column of shape (B, 1) and x of shape (m,) (or
(k, m) for k predictors), so ordinary broadcasting evaluates B runs at once to (B, m). Per-run
predictors (the pairs bootstrap) have shape (B, m), or (k, B, m) for k predictors.

A hand-derived Jacobian takes the same arguments and returns one array per parameter (a sequence
in parameter order, or a dict keyed by name), each broadcastable to (B, m). Without one, a
batched central-difference Jacobian is used.
"""
from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from .time_limit import ChunkTimeout, ModelTimeout, budget_spent, time_limit

#: Relative step of the central differences: the cube root of machine epsilon balances the
#: truncation error (O(h^2)) against rounding (O(eps / h)).
CENTRAL_DIFFERENCE_STEP = np.finfo(float).eps ** (1.0 / 3.0)

#: A parameter smaller than this fraction of its typical magnitude is measured on the
#: typical magnitude instead of its own size (convergence test, difference steps), so that a
#: parameter near zero cannot stall the relative-change test.
FLOOR_FRACTION = 1e-3
#: Two parameter sets give the same curve when their weighted difference at the samples is below
#: this fraction of the weighted residuals' norm at the fit compared with (converged end points
#: agree to about the solver tolerance, far below it), or below CURVE_FLOOR of the weighted
#: data's norm (exact data). The sweep's equivalent solutions and the bootstrap's basin check
#: share it.
CURVE_TOLERANCE = 1e-3
CURVE_FLOOR = 1e-9


class _ShapeMismatch(ValueError):
    """The model's output cannot be broadcast to (B, m) for the runs it was given.

    A failure of those runs like any exception the model raises: a model can return the right
    shape at most parameters and the wrong one at a few (a branch that drops an axis). A model
    that has the wrong shape everywhere is refused when its scenario is loaded.
    """


@dataclass(frozen=True, eq=False)
class Problem:
    """Everything the solver needs to fit one model to one data set.

    Attributes:
        model: ``model(x, *params) -> (B, m)``, see the module docstring.
        x: predictor values, (m,) for one predictor or (k, m) for k predictors.
        y: observations, (m,).
        names: parameter names in the model's argument order, length n.
        jacobian: optional hand-derived partial derivatives, same call as ``model``.
        weights: optional per-observation weights 1/sigma^2, (m,); ``None`` means all ones.
        typical: optional typical magnitude of each parameter, (n,), positive; sets the floor
            of the relative-change test and the difference steps. Scenarios set it from the
            parameter ranges; without it each run uses the size of its own start.
        formula: optional text of the model formula (for reports and derivative checks).
        kernel: optional ``kernel() -> loop or None``: the compiled Gauss-Newton loop of
            ``kernel_loop`` for this model (formula models), or None where it cannot be had;
            ``fit_batch`` then takes the compiled path where it applies (see ``compiled``).
        time_limit: optional seconds one chunk of fits (one ``fit_batch`` call) may take; the
            runs still fitting when it is spent are timed out. A model call outside a chunk may
            take this long; runs whose call does not return in time are treated like runs that
            make the model raise (``engine.time_limit`` says where the limit can be applied).
    """

    model: Callable[..., np.ndarray]
    x: np.ndarray
    y: np.ndarray
    names: tuple[str, ...]
    jacobian: Callable[..., object] | None = None
    weights: np.ndarray | None = None
    typical: np.ndarray | None = None
    formula: str | None = None
    kernel: Callable[[], Callable | None] | None = None
    time_limit: float | None = None
    sqrt_weights: np.ndarray | None = field(init=False, repr=False)

    def __post_init__(self) -> None:
        x = np.asarray(self.x, dtype=float)
        y = np.asarray(self.y, dtype=float)
        if y.ndim != 1:
            raise InputError(f"y must be one-dimensional, got shape {y.shape}")
        if x.ndim not in (1, 2) or x.shape[-1] != y.shape[0]:
            raise InputError(f"x must have shape (m,) or (k, m) with m = {y.shape[0]}, got {x.shape}")
        if len(set(self.names)) != len(self.names) or not self.names:
            raise InputError(f"parameter names must be distinct and non-empty, got {self.names}")
        object.__setattr__(self, "x", x)
        object.__setattr__(self, "y", y)
        object.__setattr__(self, "names", tuple(self.names))
        if self.weights is not None:
            weights = np.asarray(self.weights, dtype=float)
            if weights.shape != y.shape or not np.all(np.isfinite(weights)) or np.any(weights <= 0):
                raise InputError("weights must be finite, positive and one per observation")
            object.__setattr__(self, "weights", weights)
            object.__setattr__(self, "sqrt_weights", np.sqrt(weights))
        else:
            object.__setattr__(self, "sqrt_weights", None)
        if self.typical is not None:
            typical = np.asarray(self.typical, dtype=float)
            if typical.shape != (len(self.names),) or not np.all(typical > 0):
                raise InputError("typical magnitudes must be positive, one per parameter")
            object.__setattr__(self, "typical", typical)
        if self.time_limit is not None and not 0 < self.time_limit < np.inf:
            raise InputError("the time limit of a chunk of fits must be a positive number of seconds, "
                             f"got {self.time_limit}")

    @property
    def n_params(self) -> int:
        return len(self.names)

    @property
    def n_obs(self) -> int:
        return self.y.shape[0]

    @property
    def weighted_y(self) -> np.ndarray:
        """(m,) observations times sqrt(w): the weighted residuals of a model that is zero."""
        return self.y if self.sqrt_weights is None else self.y * self.sqrt_weights

    def typical_magnitude(self, params: np.ndarray) -> np.ndarray:
        """Typical magnitude of each parameter, shaped like ``params`` (..., n).

        The problem's own ``typical`` when set (scenarios set it from the ranges); otherwise the
        size of ``params`` themselves, 1 where a value is 0.
        """
        params = np.asarray(params, dtype=float)
        if self.typical is not None:
            return np.broadcast_to(self.typical, params.shape)
        return np.where(params != 0, np.abs(params), 1.0)

    @property
    def has_jacobian(self) -> bool:
        return self.jacobian is not None

    # ------------------------------------------------------------------ per-run predictors
    def runs_axis(self) -> int:
        """Axis of the run index in per-run predictor arrays: (B, m) or (k, B, m)."""
        return 0 if self.x.ndim == 1 else 1

    def take_runs(self, x: np.ndarray, runs: np.ndarray) -> np.ndarray:
        """Select runs from per-run predictors (shared predictors pass through)."""
        if x.ndim == self.x.ndim:
            return x
        return np.take(x, runs, axis=self.runs_axis())

    def repeat_runs(self, x: np.ndarray, times: int) -> np.ndarray:
        """Tile per-run predictors ``times`` times along the run axis (shared pass through)."""
        if x.ndim == self.x.ndim:
            return x
        reps = [1] * x.ndim
        reps[self.runs_axis()] = times
        return np.tile(x, reps)

    # ------------------------------------------------------------------ batched calls
    def predict(self, params: np.ndarray, x: np.ndarray | None = None) -> np.ndarray:
        """Model values for every run.

        Args:
            params: (B, n) parameter values.
            x: per-run or shared predictors; ``None`` uses the problem's own.

        Returns:
            (B, m) values. Rows of runs where the model raised, or returned a shape that does not
            broadcast to (B, m), are all NaN; non-finite model values are passed through for the
            caller to classify.
        """
        params = np.asarray(params, dtype=float)
        x = self.x if x is None else x
        return _isolate_failures(self._predict_unchecked, params, x, self, None)

    def residuals(self, params: np.ndarray, x: np.ndarray | None = None, y: np.ndarray | None = None,
                  weights: np.ndarray | None = None) -> np.ndarray:
        """(B, m) weighted residuals sqrt(w)·(y − f) at ``params`` (B, n).

        ``x``, ``y`` and ``weights`` default to the problem's own and may be given per run, as
        for ``fit_batch``. Non-finite model values give non-finite residuals, never warnings.
        """
        y = self.y if y is None else y
        sqrt_weights = self.sqrt_weights if weights is None else np.sqrt(weights)
        with np.errstate(all="ignore"):
            weighted = y - self.predict(params, x)
            return weighted if sqrt_weights is None else weighted * sqrt_weights

    def ssr(self, params: np.ndarray, x: np.ndarray | None = None, y: np.ndarray | None = None,
            weights: np.ndarray | None = None) -> np.ndarray:
        """(B,) weighted residual sum of squares at ``params`` (B, n); arguments as ``residuals``."""
        weighted = self.residuals(params, x, y, weights)
        with np.errstate(all="ignore"):
            return np.einsum("bm,bm->b", weighted, weighted)

    def weighted_derivatives(self, params: np.ndarray) -> np.ndarray:
        """(B, n, m) derivative rows times sqrt(w): the weighted Jacobian, transposed."""
        rows = self.derivatives(params)
        return rows if self.sqrt_weights is None else rows * self.sqrt_weights

    def derivatives(
        self,
        params: np.ndarray,
        x: np.ndarray | None = None,
        columns: np.ndarray | None = None,
        floor: np.ndarray | None = None,
    ) -> np.ndarray:
        """Partial derivatives of the model, as one (B, c, m) array.

        The transpose of the usual Jacobian: one row of m values per parameter. Arguments as
        for ``derivative_rows``.
        """
        params = np.asarray(params, dtype=float)
        rows = self.derivative_rows(params, x, columns, floor)
        shape = (params.shape[0], self.n_obs)
        return np.stack([np.broadcast_to(row, shape) for row in rows], axis=1)

    def derivative_rows(
        self,
        params: np.ndarray,
        x: np.ndarray | None = None,
        columns: np.ndarray | None = None,
        floor: np.ndarray | None = None,
    ) -> list[np.ndarray]:
        """Partial derivatives of the model with respect to the chosen parameters.

        Returned as a list rather than one array so that constant or shared derivatives are
        never copied B times; the solver reads them once each.

        Args:
            params: (B, n) parameter values.
            x: per-run or shared predictors; ``None`` uses the problem's own.
            columns: indices of the parameters to differentiate (default all), length c.
            floor: (B, n) or (n,) smallest magnitude used for difference steps.

        Returns:
            c arrays, each broadcastable to (B, m), unweighted; NaN where the model raised.
        """
        params = np.asarray(params, dtype=float)
        x = self.x if x is None else x
        columns = np.arange(self.n_params) if columns is None else np.asarray(columns)
        if self.jacobian is not None:
            def call(p: np.ndarray, xx: np.ndarray) -> list[np.ndarray]:
                return self._analytic_unchecked(p, xx, columns)
            return _isolate_failures(call, params, x, self, len(columns))
        return list(self.central_differences(params, x, columns, floor))

    def central_differences(
        self,
        params: np.ndarray,
        x: np.ndarray,
        columns: np.ndarray,
        floor: np.ndarray | None = None,
    ) -> np.ndarray:
        """Batched central differences (c, B, m), all runs and columns in one model call."""
        count, c = params.shape[0], len(columns)
        magnitude = np.abs(params[:, columns])
        if floor is not None:
            magnitude = np.maximum(magnitude, np.broadcast_to(floor, params.shape)[:, columns])
        magnitude = np.where(magnitude > 0, magnitude, 1.0)
        step = CENTRAL_DIFFERENCE_STEP * magnitude                     # (B, c)
        shifted = np.broadcast_to(params, (2, c, count, params.shape[1])).copy()
        positions = np.arange(c)
        shifted[0, positions, :, columns] += step.T
        shifted[1, positions, :, columns] -= step.T
        # The step actually taken, after rounding of a ± h, keeps the quotient exact.
        taken = shifted[0, positions, :, columns] - shifted[1, positions, :, columns]  # (c, B)
        values = self.predict(shifted.reshape(-1, params.shape[1]), self.repeat_runs(x, 2 * c))
        values = values.reshape(2, c, count, self.n_obs)
        return (values[0] - values[1]) / taken[:, :, None]

    def _predict_unchecked(self, params: np.ndarray, x: np.ndarray) -> np.ndarray:
        columns = [params[:, j : j + 1] for j in range(self.n_params)]
        out = np.asarray(self.model(x, *columns), dtype=float)
        shape = (params.shape[0], self.n_obs)
        return out if out.shape == shape else _broadcast_runs(out, shape, "model")

    def _analytic_unchecked(self, params: np.ndarray, x: np.ndarray, columns: np.ndarray) -> list[np.ndarray]:
        parts = self.jacobian(x, *[params[:, j : j + 1] for j in range(self.n_params)])
        if isinstance(parts, Mapping):
            missing = [name for name in self.names if name not in parts]
            if missing:
                raise _ShapeMismatch(f"jacobian returned no entry for {', '.join(missing)}")
            parts = [parts[name] for name in self.names]
        if not isinstance(parts, (Sequence, np.ndarray)):
            raise _ShapeMismatch("jacobian must return one array per parameter (a list, tuple or dict)")
        if len(parts) != self.n_params:
            raise _ShapeMismatch(f"jacobian returned {len(parts)} arrays for {self.n_params} parameters")
        shape = (params.shape[0], self.n_obs)
        return [_broadcast_runs(np.asarray(parts[j], dtype=float), shape, f"jacobian entry '{self.names[j]}'")
                for j in columns]


def _broadcast_runs(values: np.ndarray, shape: tuple[int, int], what: str) -> np.ndarray:
    # A 1-D output is one value per observation; one per run, (B,), is the usual slip, and for a
    # single run its (1,) would broadcast silently into a constant.
    if values.ndim == 1 and values.shape[0] != shape[1]:
        raise _ShapeMismatch(f"{what} returned shape {values.shape}; expected {shape} (runs, observations)")
    if values.shape == shape:
        return values
    try:
        return np.broadcast_to(values, shape)
    except ValueError:
        raise _ShapeMismatch(
            f"{what} returned shape {values.shape}; expected {shape} (runs, observations) "
            "or something that broadcasts to it"
        ) from None


def _isolate_failures(call, params: np.ndarray, x: np.ndarray, problem: Problem, width: int | None):
    """Evaluate ``call`` on all runs; if it raises, bisect to find the runs that make it raise.

    ``call`` returns one (B, m) array (``width`` None) or a list of ``width`` such arrays. Only
    the error path recurses; a model that works is called once. Runs whose evaluation raised,
    gave output of the wrong shape or ran past the time limit get NaN (outside a chunk, a batch
    too large to finish in time is split too). Inside a chunk whose budget is spent it raises
    ``ChunkTimeout`` instead (``engine.time_limit``).
    """
    try:
        with np.errstate(all="ignore"), time_limit(problem.time_limit):
            return call(params, x)
    except (Exception, SystemExit, ModelTimeout):
        # Once the chunk's time is up there is none left to find the slow runs: ``fit_batch``
        # times out every run still fitting.
        if budget_spent():
            raise ChunkTimeout from None
        # sys.exit() inside a model is a failure of those runs, not the end of the audit.
        if params.shape[0] == 1:
            missing = np.full((1, problem.n_obs), np.nan)
            return missing if width is None else [missing] * width
    half = params.shape[0] // 2
    halves = [
        _isolate_failures(call, params[runs], problem.take_runs(x, runs), problem, width)
        for runs in (np.arange(half), np.arange(half, params.shape[0]))
    ]
    if width is None:
        return np.concatenate(halves, axis=0)
    sizes = (half, params.shape[0] - half)
    return [np.concatenate([np.broadcast_to(part[i], (size, problem.n_obs)) for part, size in zip(halves, sizes)])
            for i in range(width)]
