"""How a single fit ended: small integer codes, each with a name and a one-line meaning.

The engine writes these codes into `BatchFit.outcome`; every later stage (sweep, bootstrap,
profiles, report) reads them from here, so the table below is the one place that defines them.
"""
from __future__ import annotations

from enum import IntEnum

import numpy as np


class Outcome(IntEnum):
    """Termination status of one run of the batched solver."""

    CONVERGED = 0
    DIVERGED = 1
    OSCILLATING = 2
    STALLED = 3
    SINGULAR = 4
    MODEL_ERROR = 5
    TIMED_OUT = 6

    @property
    def label(self) -> str:
        """Lower-case name used in tables and JSON, e.g. ``"model_error"``."""
        return self.name.lower()

    @property
    def meaning(self) -> str:
        """One line saying what the code means."""
        return MEANINGS[self]


MEANINGS: dict[Outcome, str] = {
    Outcome.CONVERGED: "the largest scaled parameter change fell below the tolerance",
    Outcome.DIVERGED: ("parameters or the residual sum of squares became non-finite or ran past their blow-up bounds, "
                       "or the model overflowed once a parameter ran past ten times its range"),
    Outcome.OSCILLATING: ("successive steps kept reversing direction without shrinking while the residual sum of "
                          "squares did not fall by more than its rounding noise"),
    Outcome.STALLED: "the iteration limit was reached without converging, diverging or oscillating",
    Outcome.SINGULAR: "the Jacobian lost rank, so the step is not determined by the data",
    Outcome.MODEL_ERROR: ("the model raised, or returned non-finite or wrongly shaped values, at this run's "
                          "parameters, all within ten times their ranges"),
    Outcome.TIMED_OUT: ("its chunk of fits used up [model] time_limit before the run ended (the model was slow, "
                        "or never returned, somewhere in that chunk)"),
}


def outcome_labels(codes: np.ndarray) -> list[str]:
    """Map an array of outcome codes to their labels."""
    return [Outcome(int(code)).label for code in np.asarray(codes).ravel()]


def outcome_counts(codes: np.ndarray) -> dict[str, int]:
    """Number of runs per outcome label, every outcome listed (zeros included)."""
    counts = np.bincount(np.asarray(codes, dtype=np.int64).ravel(), minlength=len(Outcome))
    return {outcome.label: int(counts[outcome]) for outcome in Outcome}
