"""How the appendix writes numbers and gaps: significant digits, a dash for what is missing."""
from __future__ import annotations

import math

from .document import Paragraph

MISSING = "—"


def number(value, digits: int = 6) -> str:
    """``value`` to ``digits`` significant digits; a dash for None or a non-finite value."""
    if value is None or not math.isfinite(float(value)):
        return MISSING
    return f"{float(value):.{digits}g}"


def interval(lower, upper, digits: int = 6) -> str:
    """"[lower, upper]" with dashes for missing (open or unknown) ends."""
    return f"[{number(lower, digits)}, {number(upper, digits)}]"


def share(value) -> str:
    """A share as a percentage with one decimal, or a dash."""
    return MISSING if value is None or not math.isfinite(float(value)) else f"{100 * float(value):.1f}%"


def not_run(reason: str) -> Paragraph:
    """The note a section shows for a stage that did not run."""
    return Paragraph(f"Not run: {reason or 'the stage did not run'}", "note")
