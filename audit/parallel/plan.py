"""The one place that knows how work is spread: joblib processes, or a Dask cluster via joblib.

Stages cut their work into chunks and hand a function and the chunks to ``map_chunks``. The
chunks, and so the results, are the same whatever runs them; only the wall-clock time changes.
"""
from __future__ import annotations

import functools
import os
import threading
import time
from collections.abc import Callable, Iterable, Iterator, Sized
from contextlib import ExitStack
from dataclasses import dataclass
from typing import Any

import joblib

from ..errors import InputError

BACKENDS = ("processes", "dask")
#: Seconds it costs to start worker processes and load numpy, scipy and the package in them.
#: Work estimated below it stays in this process: a bootstrap of about a second ran 1.55 times
#: faster with one job than with two fresh workers.
WORKER_START_SECONDS = 1.0
#: How often a worker process checks that the process that started it is still there.
PARENT_CHECK_SECONDS = 1.0


@dataclass(frozen=True)
class ParallelPlan:
    """How to run chunks.

    Attributes:
        jobs: worker processes on this machine; -1 (default) uses every core. Ignored by Dask,
            whose workers are whatever the cluster has.
        backend: "processes" (joblib's process pool on this machine) or "dask".
        scheduler: address of a running Dask scheduler, e.g. "tcp://10.0.0.5:8786"
            (backend "dask" only).
    """

    jobs: int = -1
    backend: str = "processes"
    scheduler: str | None = None

    def __post_init__(self) -> None:
        if self.backend not in BACKENDS:
            raise InputError(f"backend must be one of {', '.join(BACKENDS)}, got {self.backend!r}")
        if self.jobs == 0 or self.jobs < -1:
            raise InputError(f"jobs must be a positive number of processes or -1 for all cores, got {self.jobs}")
        if self.backend == "dask" and not self.scheduler:
            raise InputError("the dask backend needs the address of a running scheduler (--scheduler ADDRESS)")

    @property
    def workers(self) -> int:
        """Processes used on this machine (1 for Dask, which counts its own)."""
        if self.backend == "dask":
            return 1
        return (os.cpu_count() or 1) if self.jobs == -1 else self.jobs


def map_chunks(function: Callable[[Any], Any], chunks: Iterable[Any], plan: ParallelPlan, *,
               first_here: bool = True) -> Iterator[Any]:
    """Apply ``function`` to every chunk; yield the results in the order of ``chunks``.

    Chunks are consumed lazily (a few per worker ahead), so a long iterable of small chunk
    descriptions never sits in memory at once. With one job everything runs in this process.
    When the chunks are a sized collection on local processes and ``first_here`` is set, the
    first is run here and timed; if the rest would take less than WORKER_START_SECONDS, they run
    here too (workers are started only when the work pays for them). The results are the same
    either way.
    """
    if plan.backend == "dask":
        # joblib's Dask backend hashes the function in a background thread; an unhashable one
        # would fail there unseen and leave this generator waiting for ever.
        try:
            hash(function)
        except TypeError:
            raise TypeError(f"{type(function).__name__} must be hashable to run on Dask "
                            "(a dataclass needs eq=False or frozen=True)") from None
    local_pool = plan.backend == "processes" and plan.workers > 1
    if first_here and local_pool and isinstance(chunks, Sized) and len(chunks) > 1:
        remaining = len(chunks) - 1
        chunks = iter(chunks)
        began = time.perf_counter()
        first = function(next(chunks))
        stay_here = (time.perf_counter() - began) * remaining < WORKER_START_SECONDS
        yield first
        if stay_here:
            plan = ParallelPlan(jobs=1)
    with ExitStack() as stack:
        if plan.backend == "dask":
            stack.enter_context(_dask_backend(plan.scheduler))
            parallel = joblib.Parallel(n_jobs=-1, return_as="generator", pre_dispatch="2*n_jobs")
        else:
            parallel = joblib.Parallel(n_jobs=plan.jobs, return_as="generator", pre_dispatch="2*n_jobs",
                                       initializer=watch_parent, initargs=(os.getpid(),))
        yield from parallel(joblib.delayed(function)(chunk) for chunk in chunks)


def local_mapper(plan: ParallelPlan) -> Callable[[Callable[[Any], Any], Sized], Iterator[Any]]:
    """``mapper(function, items)`` over this machine's processes, for work that writes files here
    (figures): a Dask plan's workers may sit on other machines, so it maps over local cores.

    Every item goes to the workers (when there are several), none is first run here to time it:
    the callers hand out only drawing that pays for them, and this process need not pay its
    imports (matplotlib)."""
    local = plan if plan.backend == "processes" else ParallelPlan()
    return functools.partial(map_chunks, plan=local, first_here=False)


def watch_parent(parent: int) -> None:
    """Worker initializer: end this worker process once ``parent``, the process that started it,
    is gone.

    joblib's workers wait for work from their parent; killed outright (SIGKILL, an out-of-memory
    kill), a parent cannot stop them, and they were seen running on, busy or idle, for at least
    400 s. A daemon thread notices the parent's death (the worker is handed to another parent)
    within PARENT_CHECK_SECONDS and ends the worker at once; a worker that starts after its
    parent died ends at once too.
    """
    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(PARENT_CHECK_SECONDS)
        os._exit(1)

    threading.Thread(target=watch, name="fitaudit-parent-watch", daemon=True).start()


class _dask_backend:
    """Connect to the scheduler and make joblib send its tasks there while active."""

    def __init__(self, address: str) -> None:
        self.address = address

    def __enter__(self):
        try:
            from distributed import Client
        except ImportError:
            raise InputError("the dask backend needs the optional packages: pip install 'fitaudit[dask]'") from None
        try:
            self.client = Client(self.address, timeout="10s")
        except OSError as error:
            raise InputError(f"--scheduler {self.address}: cannot reach the Dask scheduler: {error}") from None
        except (ValueError, TypeError) as error:
            # distributed's address parser: no port, a port that is no number, an unknown scheme.
            raise InputError(f"--scheduler {self.address}: not a scheduler address like tcp://host:8786 "
                             f"({error})") from None
        self.config = joblib.parallel_config(backend="dask")
        self.config.__enter__()
        return self

    def __exit__(self, *exc_info) -> None:
        self.config.__exit__(*exc_info)
        self.client.close()
