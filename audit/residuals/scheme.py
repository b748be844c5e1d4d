"""Which bootstrap scheme the residuals suit, with the reason in words (common practice):

- residual: errors independent with one spread; resampling residuals onto the fitted curve
  uses the model fully and gives the tightest honest intervals;
- wild: the spread changes with the fitted values; each point keeps its own residual's size,
  flipped in sign at random;
- pairs: x was drawn at random together with y, or the model's form is in doubt (a pattern
  along x); resampling whole (x, y) rows leans least on the model.

Every scheme assumes independent errors; a pattern along x is first a reason to revisit the
model.
"""
from __future__ import annotations

from .check import FLAGGED, Check

RESIDUAL = "residual"
WILD = "wild"
PAIRS = "pairs"


def recommend_scheme(runs: Check, serial: Check, variance: Check, variance_rank: Check,
                     x_random: bool) -> tuple[str, str]:
    """The scheme (residual, wild or pairs) and why, from the four checks."""
    pattern = [label for check, label in ((runs, "runs of signs"), (serial, "Durbin-Watson"))
               if check.status in FLAGGED]
    if pattern:
        return PAIRS, (f"the residuals show a pattern along x ({' and '.join(pattern)} flagged), so the model's "
                       f"form is in doubt: pairs resampling leans least on it, but revise the model first, "
                       f"since every scheme assumes independent errors")
    if any(check.status in FLAGGED for check in (variance, variance_rank)):
        if x_random:
            return PAIRS, ("the spread changes with the fitted values and x was drawn at random with y: "
                           "resample (x, y) pairs")
        return WILD, "the spread changes with the fitted values: wild resampling keeps each point's own residual size"
    if x_random:
        return PAIRS, "x was drawn at random with y: resampling (x, y) pairs reproduces how the data arose"
    return RESIDUAL, ("no pattern along x and no change of spread: resampling residuals onto the fitted curve "
                      "uses the model fully")
