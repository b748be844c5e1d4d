"""The bootstrap's refits in chunks: what a chunk is, the worker that refits one, and the chunk
cache that keeps every finished chunk, so that an interrupted bootstrap resumes where it stopped.

Chunk k of the replicates draws from a generator seeded by the scenario's seed and k alone
(``chunk_generator``); chunk k of the leave-one-out refits leaves out its own observations. So a
chunk's content depends on the settings and its index only, never on the worker, the number of
jobs or an earlier run, and a chunk read back from the cache is the chunk that would be computed.
Each finished chunk is stored at once through ``parallel.chunk_cache.ChunkStore`` (written
atomically, checksummed; a damaged file is computed again), in a folder named by a hash of
everything that decides its content (``refit_cache_folder``).
"""
from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from ..engine.batch import RefitSettings, fit_batch
from ..engine.problem import Problem
from ..parallel.chunk_cache import ChunkStore, cache_key, code_digest
from ..parallel.plan import ParallelPlan, map_chunks
from .replicates import RefitEnds, same_point
from .resampling import Scheme, leave_one_out

#: The kinds of refit chunk, in the order they run; each kind has its own chunk files.
KINDS = ("bootstrap", "jackknife")


@dataclass(frozen=True)
class RefitChunk:
    """One piece of work: ``count`` refits of one kind, starting at replicate ``first``."""

    kind: str
    index: int
    first: int
    count: int


@dataclass(frozen=True, eq=False)
class Refitter:
    """Draws (or builds) the data of one chunk, refits it and checks where each refit ended;
    runs inside the workers.

    Compared and hashed by identity (eq=False): its fields hold arrays, and the Dask backend
    hashes the function it sends."""

    problem: Problem
    scheme: Scheme
    best: np.ndarray
    scale: np.ndarray
    refit: RefitSettings
    seed: int

    def __call__(self, chunk: RefitChunk) -> RefitEnds:
        if chunk.kind == "bootstrap":
            problem, data = self.problem, self.scheme.draw(chunk_generator(self.seed, chunk.index), chunk.count)
        else:
            problem, data = leave_one_out(self.problem, chunk.first, chunk.count)
        starts = np.tile(self.best, (chunk.count, 1))
        options = dict(y=data.y, x=data.x, weights=data.weights, tol=self.refit.tolerance,
                       max_iter=self.refit.max_iterations)
        # The descent from the best fit tells its basin: full Levenberg-Marquardt steps, each one
        # lowering the SSR; refits that are such runs already are their own descent. The
        # leave-one-out estimates are descents alone: BCa's acceleration measures how the
        # estimate moves with each observation, not how the refits' solver copes, and a set
        # missing the observations where that solver failed would skew it.
        descends = chunk.kind == "jackknife" or (self.refit.method == "lm" and self.refit.step_factor == 1.0)
        if descends:
            fit = descent = fit_batch(problem, starts, 1.0, method="lm", **options)
        else:
            fit = fit_batch(problem, starts, self.refit.step_factor, method=self.refit.method, **options)
            descent = fit_batch(problem, starts, 1.0, method="lm", **options)
        same = same_point(problem, fit.params, descent.params, self.scale, y=data.y, x=data.x,
                          weights=data.weights)
        return RefitEnds(params=fit.params, ssr=fit.ssr, outcome=fit.outcome, iterations=fit.iterations,
                         descent=descent.params, descent_outcome=descent.outcome, same_point=same)


def chunk_generator(seed: int, index: int) -> np.random.Generator:
    """The generator bootstrap chunk ``index`` draws its replicates from: the seed and the index
    alone decide it, never the worker that runs the chunk."""
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(index,)))


def split(kind: str, total: int, size: int) -> list[RefitChunk]:
    """``total`` refits of ``kind`` in chunks of ``size`` (the last one shorter)."""
    return [RefitChunk(kind=kind, index=k, first=first, count=min(size, total - first))
            for k, first in enumerate(range(0, total, size))]


def refit_cache_folder(parent: Path, fingerprint: str, settings: dict) -> Path:
    """The folder under ``parent`` for the chunks of one bootstrap: named by a hash of the
    problem's ``fingerprint`` (its model's code and its data), the JSON-able ``settings`` (best
    fit, scheme, samples, seed, refit settings, chunk size), the package version and the source
    of its computing modules, so that nothing computed otherwise is ever reused."""
    key = cache_key({"fingerprint": fingerprint, "version": __version__, "code": code_digest(), **settings})
    return Path(parent) / f"bootstrap-{key}"


def refit_all(worker: Refitter, chunks: list[RefitChunk], plan: ParallelPlan, folder: Path | None,
              progress: Callable[[int], None] | None = None) -> tuple[dict[str, list[RefitEnds]], dict[str, int]]:
    """Every chunk's fits, in the order of ``chunks``: read from ``folder`` where stored, the
    others computed through ``map_chunks`` and stored as each finishes (``folder`` None: none
    stored or read).

    Returns:
        The fits per kind (KINDS), and the counts of chunks {"total", "reused", "computed"}.
    """
    stores = {kind: ChunkStore(folder, kind) for kind in KINDS} if folder is not None else None
    found: dict[tuple[str, int], RefitEnds] = {}
    for chunk in chunks:
        stored = _stored(stores[chunk.kind], chunk) if stores is not None else None
        if stored is not None:
            found[chunk.kind, chunk.index] = stored
            if progress is not None:
                progress(chunk.count)
    missing = [chunk for chunk in chunks if (chunk.kind, chunk.index) not in found]
    for chunk, fits in zip(missing, map_chunks(worker, missing, plan)):
        if stores is not None:
            stores[chunk.kind].save(chunk.index, {**dataclasses.asdict(fits), "span": _span(chunk)})
        found[chunk.kind, chunk.index] = fits
        if progress is not None:
            progress(chunk.count)
    pieces = {kind: [found[chunk.kind, chunk.index] for chunk in chunks if chunk.kind == kind] for kind in KINDS}
    reused = len(chunks) - len(missing)
    return pieces, {"total": len(chunks), "reused": reused, "computed": len(missing)}


def _span(chunk: RefitChunk) -> np.ndarray:
    return np.array([chunk.first, chunk.count], dtype=np.int64)


def _stored(store: ChunkStore, chunk: RefitChunk) -> RefitEnds | None:
    """The stored fits of ``chunk``, or None when missing, damaged or of another span."""
    arrays = store.load(chunk.index)
    if arrays is None or not np.array_equal(arrays.pop("span", None), _span(chunk)):
        return None
    try:
        return RefitEnds(**arrays)
    except TypeError:
        return None            # arrays of another layout
