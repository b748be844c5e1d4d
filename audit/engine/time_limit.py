"""A time budget per chunk of fits, so that a model that is very slow, or never returns, for some
runs marks them instead of hanging the audit.

``[model] time_limit`` is the number of seconds one chunk of fits may take: one ``fit_batch``
call (a sweep chunk's runs of one solver, a bootstrap chunk's refits, one step of the profile
walk). ``fit_batch`` opens the budget (``chunk_budget``); every model call inside it runs under an
interval timer (SIGALRM) set to what is left of it, whose handler raises ``ModelTimeout`` in the
model's Python code, so that even a call that never returns ends at the chunk's deadline. Once
the budget is spent the interrupted call, or the next one, raises ``ChunkTimeout``; ``fit_batch``
then marks the runs still fitting as timed out and returns the ones that had ended. A model call
outside a chunk (the check of a scenario at its starting values, a bootstrap's basin test) gets
the limit for itself.

A timer works only in the main thread of a process, which is where the model runs with
``--jobs 1`` and in each of joblib's worker processes; a thread could not stop Python code at all,
while a timer needs no process to be killed, so finished work stays in memory. Where there is no
timer (a Dask worker's thread, a caller's own thread, Windows) no limit is applied. Compiled code
that never returns to the interpreter cannot be interrupted either.
"""
from __future__ import annotations

import signal
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager

#: time.monotonic() at which the open chunk's budget runs out; None when no chunk is open.
_deadline: float | None = None


class ModelTimeout(BaseException):
    """A model call ran past its time limit.

    A BaseException, so that a model's own ``except Exception`` cannot swallow it and keep going.
    """


class ChunkTimeout(ModelTimeout):
    """The open chunk's budget is spent: the runs still fitting are timed out."""


@contextmanager
def chunk_budget(seconds: float | None) -> Iterator[None]:
    """Let the model calls in the body share one budget of ``seconds`` (None: no limit).

    A budget opened inside another one leaves the outer deadline in force.
    """
    global _deadline
    if seconds is None or not can_limit() or _deadline is not None:
        yield
        return
    _deadline = time.monotonic() + seconds
    try:
        yield
    finally:
        _deadline = None


def budget_spent() -> bool:
    """True when a chunk's budget is open in this thread and has run out."""
    return _deadline is not None and can_limit() and time.monotonic() >= _deadline


@contextmanager
def time_limit(seconds: float | None) -> Iterator[None]:
    """Raise ``ModelTimeout`` in the body once it has run ``seconds`` (None: no limit), or
    ``ChunkTimeout`` at once when the open chunk's budget is already spent; inside a chunk the
    timer goes off at the chunk's deadline if that comes first."""
    if seconds is None or not can_limit():
        yield
        return
    if _deadline is not None:
        left = _deadline - time.monotonic()
        if left <= 0:
            raise ChunkTimeout
        seconds = min(seconds, left)
    previous = signal.signal(signal.SIGALRM, _expired)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def can_limit() -> bool:
    """Whether a time limit can be applied here (a timer exists and this is the main thread)."""
    return hasattr(signal, "setitimer") and threading.current_thread() is threading.main_thread()


def _expired(signum, frame) -> None:
    raise ModelTimeout
