"""One residual check's outcome, and the significance levels that grade it.

A check's p-value is graded against two levels: below ``fail`` it fails, below ``warn`` it
warns, otherwise it passes. The defaults, 0.05 and 0.001, are the usual 5 % test level and a
level at which chance is no longer a credible explanation even after five checks on the same
residuals (common practice). A check that cannot be computed on these residuals is "not
applicable" and its finding says why.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

from audit.errors import InputError
from audit.jsonable import jsonable

PASS = "pass"
WARN = "warn"
FAIL = "fail"
NOT_APPLICABLE = "not applicable"
#: Statuses that ask the user to look.
FLAGGED = (WARN, FAIL)


@dataclass(frozen=True)
class Levels:
    """Significance levels: p < fail fails, fail ≤ p < warn warns, p ≥ warn passes."""

    warn: float = 0.05
    fail: float = 0.001

    def __post_init__(self) -> None:
        if not 0 < self.fail <= self.warn < 1:
            raise InputError(f"significance levels must satisfy 0 < fail_level <= warn_level < 1, "
                             f"got fail_level={self.fail:g}, warn_level={self.warn:g}")

    def grade(self, p_value: float) -> str:
        """The status of a check with this p-value."""
        if p_value < self.fail:
            return FAIL
        return WARN if p_value < self.warn else PASS


@dataclass(frozen=True)
class Check:
    """One test on the residuals.

    Attributes:
        name: "runs", "serial", "normality", "variance" or "variance_rank".
        statistic: the test statistic (see each check's module); NaN when not applicable.
        p_value: two-sided p-value; NaN when not applicable.
        status: pass, warn, fail or not applicable.
        finding: one line in plain words: the number behind the status and what it means.
        details: further numbers of the test, by name.
    """

    name: str
    statistic: float
    p_value: float
    status: str
    finding: str
    details: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return jsonable({"name": self.name, "statistic": self.statistic, "p_value": self.p_value,
                         "status": self.status, "finding": self.finding, "details": self.details})


def not_applicable(name: str, reason: str) -> Check:
    """A check that could not run, with the reason as its finding."""
    return Check(name=name, statistic=math.nan, p_value=math.nan, status=NOT_APPLICABLE,
                 finding=f"not applicable: {reason}")
