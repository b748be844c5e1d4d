"""Start designs for the multistart sweep: where in parameter space the fits begin.

Every design lives in the unit cube [0, 1]^n and is carried to the parameters' ranges axis by
axis, linearly or logarithmically as the scenario declares. A design is a rule ``point index
-> start``, never a stored list: ``StartDesign.unit(first, stop)`` computes the points
``first .. stop - 1`` alone, so a sweep of a million starts holds one chunk at a time and any
chunk can be recomputed anywhere (a worker process, a Dask worker, a resumed run).

- ``grid``: k points per axis, range ends included, k = the whole n-th root of the requested
  count (at least 2); the actual count k^n is what the design reports.
- ``sobol``: scrambled Sobol' points (scipy.stats.qmc.Sobol); a chunk is the sequence
  fast-forwarded to its first index.
- ``lhs``: a Latin hypercube of all N points: on each axis, point i falls in stratum π(i) of N
  equal strata, at a uniform position inside it. π is a keyed pseudo-random permutation of
  0..N-1 (``permutation.keyed_permutation``) that maps any single index without storing the
  others, and the position comes from a counter-based generator (Philox) advanced to the
  point, so each chunk is computed alone and the union of all chunks is one valid Latin
  hypercube of N points, whatever the chunking.
- ``map``: a resolution × resolution grid over two parameters, the others held at a base point
  (normally the best fit): the slices drawn as basin maps.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from .permutation import keyed_permutation, permutation_keys

DESIGNS = ("grid", "sobol", "lhs")
#: scipy's Sobol' engine makes at most 2^30 distinct points with its default precision.
SOBOL_LIMIT = 2**30
#: Philox yields four 64-bit words per counter step; each LHS point takes whole steps so that a
#: point's jitter depends on its index only.
_PHILOX_WORDS = 4


@dataclass(frozen=True)
class SearchSpace:
    """The box the starts are spread over.

    Attributes:
        names: parameter names (n).
        lower, upper: (n,) range ends, lower < upper.
        log: (n,) True where the axis is logarithmic (then lower > 0).
    """

    names: tuple[str, ...]
    lower: np.ndarray
    upper: np.ndarray
    log: np.ndarray

    @property
    def n_params(self) -> int:
        return len(self.names)

    def to_unit(self, params: np.ndarray) -> np.ndarray:
        """Unit-cube coordinates (..., n) of parameter values (..., n); outside the range they
        fall outside [0, 1]. Non-positive values on a log axis give NaN."""
        params = np.asarray(params, dtype=float)
        low, high = self._axis_values(self.lower), self._axis_values(self.upper)
        with np.errstate(invalid="ignore", divide="ignore"):
            values = np.where(self.log, np.log10(np.where(params > 0, params, np.nan)), params)
        return (values - low) / (high - low)

    def contains(self, params: np.ndarray) -> np.ndarray:
        """(k,) True where every parameter of ``params`` (k, n) lies within its range."""
        unit = self.to_unit(params)
        return np.all((unit >= 0) & (unit <= 1), axis=-1)

    def from_unit(self, unit: np.ndarray) -> np.ndarray:
        """Parameter values (..., n) of unit-cube coordinates (..., n)."""
        low, high = self._axis_values(self.lower), self._axis_values(self.upper)
        values = low + np.asarray(unit, dtype=float) * (high - low)
        # Powers only on the log axes: a linear range beyond about ±308 would overflow 10**value.
        values[..., self.log] = 10.0 ** values[..., self.log]
        return values

    def _axis_values(self, ends: np.ndarray) -> np.ndarray:
        return np.where(self.log, np.log10(np.where(self.log, ends, 1.0)), ends)


def search_space(scenario) -> SearchSpace:
    """The sweep's box from a scenario's parameter ranges.

    Raises:
        InputError: for a parameter without a range. The sweep's shares are shares of a region
            the user chose; a silently invented span would make them shares of nothing in
            particular, so the message proposes a span instead of assuming one.
    """
    for parameter in scenario.parameters:
        if not parameter.has_range:
            span = max(abs(parameter.start), 1.0)
            suggestion = (f"[{parameter.start / 10:g}, {parameter.start * 10:g}], scale = \"log\""
                          if parameter.start > 0 else f"[{parameter.start - span:g}, {parameter.start + span:g}]")
            raise InputError(f"{scenario.path / 'scenario.toml'} [parameters] {parameter.name}: the sweep needs a "
                             f"range to spread starts over; add e.g. range = {suggestion}")
    return SearchSpace(
        names=tuple(p.name for p in scenario.parameters),
        lower=np.array([p.lower for p in scenario.parameters]),
        upper=np.array([p.upper for p in scenario.parameters]),
        log=np.array([p.axis == "log" for p in scenario.parameters]),
    )


@dataclass(frozen=True)
class StartDesign:
    """A rule that gives the i-th start of a design; see the module docstring.

    Attributes:
        space: the box.
        kind: "grid", "sobol", "lhs" or "map".
        count: number of points N.
        per_axis: grid: points per axis (k); map: the resolution.
        sobol_seed: seed of the Sobol' scrambling (sobol only).
        permutation_keys: (n, rounds) round keys of the per-axis permutations (lhs only).
        jitter_key: Philox key of the positions inside the strata (lhs only).
        map_axes: the two varied parameters' indices (map only), first along x.
        base: (n,) the values of the parameters held fixed (map only).
    """

    space: SearchSpace
    kind: str
    count: int
    per_axis: int = 0
    sobol_seed: int = 0
    permutation_keys: np.ndarray | None = None
    jitter_key: int = 0
    map_axes: tuple[int, int] = (0, 1)
    base: np.ndarray | None = None

    def unit(self, first: int, stop: int) -> np.ndarray:
        """(stop - first, n) unit-cube coordinates of points first .. stop - 1.

        Raises:
            InputError: when the span is not inside 0 .. count.
        """
        if not 0 <= first <= stop <= self.count:
            raise InputError(f"design points {first}..{stop} lie outside 0..{self.count}")
        index = np.arange(first, stop)
        n = self.space.n_params
        if self.kind == "grid":
            digits = np.unravel_index(index, (self.per_axis,) * n)
            return np.column_stack(digits) / (self.per_axis - 1)
        if self.kind == "map":
            return self._map_unit(index)
        if self.kind == "sobol":
            return self._sobol_unit(first, stop)
        return self._latin_unit(index)

    def starts(self, first: int, stop: int) -> np.ndarray:
        """(stop - first, n) starting parameters of points first .. stop - 1."""
        return self.values(self.unit(first, stop))

    def values(self, unit: np.ndarray) -> np.ndarray:
        """(k, n) starting parameters of this design's points with the (k, n) unit coordinates
        ``unit`` (from ``unit``; computed once, they can be passed around instead of recomputed)."""
        values = self.space.from_unit(unit)
        if self.kind == "map":
            # The held parameters take the base values exactly, not after a round trip
            # through unit coordinates.
            held = np.setdiff1d(np.arange(self.space.n_params), self.map_axes)
            values[:, held] = self.base[held]
        return values

    def _map_unit(self, index: np.ndarray) -> np.ndarray:
        row, column = np.divmod(index, self.per_axis)
        unit = np.broadcast_to(self.space.to_unit(self.base), (len(index), self.space.n_params)).copy()
        x_axis, y_axis = self.map_axes
        unit[:, x_axis] = column / (self.per_axis - 1)
        unit[:, y_axis] = row / (self.per_axis - 1)
        return unit

    def _sobol_unit(self, first: int, stop: int) -> np.ndarray:
        from scipy.stats import qmc   # here: scipy.stats takes seconds to import, a cached rerun needs none

        engine = qmc.Sobol(self.space.n_params, scramble=True, rng=np.random.default_rng(self.sobol_seed))
        if first:
            engine.fast_forward(first)
        with warnings.catch_warnings():
            # Balance over the whole design is reported once by the sweep, not per chunk.
            warnings.simplefilter("ignore", UserWarning)
            return engine.random(stop - first)

    def _latin_unit(self, index: np.ndarray) -> np.ndarray:
        n = self.space.n_params
        steps = math.ceil(n / _PHILOX_WORDS)
        bit_generator = np.random.Philox(key=self.jitter_key)
        bit_generator.advance(int(index[0]) * steps if len(index) else 0)
        jitter = np.random.Generator(bit_generator).random((len(index), steps * _PHILOX_WORDS))[:, :n]
        strata = np.column_stack([keyed_permutation(index, self.count, self.permutation_keys[axis])
                                  for axis in range(n)]) if len(index) else np.empty((0, n))
        return (strata + jitter) / self.count


def make_design(space: SearchSpace, kind: str, points: int, seed: int) -> StartDesign:
    """A space-filling design of about ``points`` starts.

    Args:
        space: the box.
        kind: "grid", "sobol" or "lhs".
        points: requested number of starts (grid: rounded down to a whole power, at least 2
            per axis).
        seed: the scenario's [sweep] seed; every random choice of the design derives from a
            ``numpy.random.Generator`` seeded with it.

    Raises:
        InputError: for an unknown kind or fewer than one point.
    """
    if kind not in DESIGNS:
        raise InputError(f"design must be one of {', '.join(DESIGNS)}, got {kind!r}")
    if points < 1:
        raise InputError(f"the design needs at least one point, got {points}")
    if kind == "sobol" and points > SOBOL_LIMIT:
        raise InputError(f"a Sobol' design has at most {SOBOL_LIMIT} points, got {points}")
    n = space.n_params
    if kind == "grid":
        per_axis = max(2, int(math.floor(points ** (1.0 / n) + 1e-9)))
        return StartDesign(space=space, kind=kind, count=per_axis ** n, per_axis=per_axis)
    rng = np.random.default_rng(seed)
    if kind == "sobol":
        return StartDesign(space=space, kind=kind, count=points, sobol_seed=int(rng.integers(2**63)))
    return StartDesign(space=space, kind=kind, count=points, permutation_keys=permutation_keys(rng, n),
                       jitter_key=int(rng.integers(2**63)))


def map_design(space: SearchSpace, axes: tuple[int, int], resolution: int, base: np.ndarray) -> StartDesign:
    """A resolution × resolution grid over parameters ``axes`` (x first), the rest at ``base``.

    Raises:
        InputError: for a resolution below 2 or axes that are not two distinct parameters.
    """
    if resolution < 2:
        raise InputError(f"a map needs a resolution of at least 2, got {resolution}")
    if len(set(axes)) != 2 or not all(0 <= axis < space.n_params for axis in axes):
        raise InputError(f"a map needs two distinct parameters, got {axes}")
    return StartDesign(space=space, kind="map", count=resolution**2, per_axis=resolution,
                       map_axes=(int(axes[0]), int(axes[1])), base=np.asarray(base, dtype=float).copy())


def map_axis_values(design: StartDesign) -> tuple[np.ndarray, np.ndarray]:
    """The (resolution,) parameter values along a map's x and y axes."""
    ticks = np.linspace(0.0, 1.0, design.per_axis)
    unit = np.broadcast_to(design.space.to_unit(design.base), (design.per_axis, design.space.n_params)).copy()
    x_axis, y_axis = design.map_axes
    unit[:, x_axis] = ticks
    unit[:, y_axis] = ticks
    values = design.space.from_unit(unit)
    return values[:, x_axis], values[:, y_axis]
