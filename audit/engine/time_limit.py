"""A time limit on one call of the user's model, so that a model that never returns marks its
runs instead of hanging the audit.

The limit is an interval timer (SIGALRM) whose handler raises ``ModelTimeout`` in the model's
Python code. A timer works only in the main thread of a process, which is where the model runs
with ``--jobs 1`` and in each of joblib's worker processes; a thread could not stop Python code
at all, while a timer needs no process to be killed, so finished work stays in memory. Where
there is no timer (a Dask worker's thread, a caller's own thread, Windows) the limit is not
applied. Compiled code that never returns to the interpreter cannot be interrupted either.
"""
from __future__ import annotations

import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager


class ModelTimeout(BaseException):
    """A model call ran past its time limit.

    A BaseException, so that a model's own ``except Exception`` cannot swallow it and keep going.
    """


@contextmanager
def time_limit(seconds: float | None) -> Iterator[None]:
    """Raise ``ModelTimeout`` in the body once it has run ``seconds`` (None: no limit)."""
    if seconds is None or not can_limit():
        yield
        return
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
