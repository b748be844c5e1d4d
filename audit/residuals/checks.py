"""Residual checks of one fit on plain arrays: the entry point and its result.

Every check works on the weighted residuals r·sqrt(w), which have one spread when the weights
are right. The runs test and Durbin-Watson read them in x order (the first predictor when there
are several). Residuals no larger than NEGLIGIBLE times the largest weighted fitted value are
rounding noise: they carry no sign, and when all are that small no check runs.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from audit.errors import InputError
from audit.jsonable import jsonable

from .check import FAIL, NOT_APPLICABLE, PASS, WARN, Check, Levels, not_applicable
from .normality import normality_check
from .scheme import RESIDUAL, recommend_scheme
from .serial import serial_check
from .sign_runs import runs_check
from .spread import spread_checks

#: Relative size below which a residual is rounding noise of the fitted value: a few hundred
#: units in the last place of double precision, and far below any measurement's resolution.
NEGLIGIBLE = 1e-12
#: Fewest residuals any of the tests accepts (Shapiro-Wilk needs 3).
MIN_RESIDUALS = 3
CHECK_NAMES = ("runs", "serial", "normality", "variance", "variance_rank")


@dataclass
class ResidualChecks:
    """The residual checks of one fit.

    Attributes:
        weighted_residuals: (m,) r·sqrt(w) in the order given.
        order: (m,) indices that sort the data by x (first predictor), stable.
        n_params: number of fitted parameters n.
        levels: significance levels that graded the checks.
        runs, serial, normality, variance, variance_rank: the checks (see ``Check``).
        scheme: the bootstrap scheme the data suit: "residual", "wild" or "pairs".
        scheme_reason: why, in words.
    """

    weighted_residuals: np.ndarray
    order: np.ndarray
    n_params: int
    levels: Levels
    runs: Check
    serial: Check
    normality: Check
    variance: Check
    variance_rank: Check
    scheme: str
    scheme_reason: str

    @property
    def checks(self) -> tuple[Check, ...]:
        return (self.runs, self.serial, self.normality, self.variance, self.variance_rank)

    @property
    def status(self) -> str:
        """The worst status among the checks that ran; not applicable when none ran."""
        statuses = {check.status for check in self.checks}
        for worst in (FAIL, WARN, PASS):
            if worst in statuses:
                return worst
        return NOT_APPLICABLE

    def to_dict(self) -> dict:
        return jsonable({
            "m": self.weighted_residuals.size,
            "n_params": self.n_params,
            "warn_level": self.levels.warn,
            "fail_level": self.levels.fail,
            "status": self.status,
            "checks": [check.to_dict() for check in self.checks],
            "scheme": self.scheme,
            "scheme_reason": self.scheme_reason,
            "weighted_residuals": self.weighted_residuals,
            "order": self.order,
        })


def check_residuals(residuals, fitted, x, n_params: int, *, weights=None, warn_level: float = 0.05,
                    fail_level: float = 0.001, x_random: bool = False) -> ResidualChecks:
    """Run the residual checks and suggest a bootstrap scheme.

    Args:
        residuals: (m,) y − f(x; a), unweighted.
        fitted: (m,) f(x; a).
        x: (m,) or (m, k) predictors; the first column orders the data.
        n_params: number of fitted parameters n (m − n must be ≥ 1 for the checks to run).
        weights: (m,) positive weights w, or None for 1.
        warn_level, fail_level: p below warn_level warns, below fail_level fails.
        x_random: True when x was drawn at random with y rather than set by design, which
            favours pairs resampling.

    Raises:
        InputError: shapes disagree, values are not finite, weights are not positive,
            n_params is negative or the levels are not 0 < fail_level <= warn_level < 1.
    """
    residuals, fitted, x, weights = _validated(residuals, fitted, x, n_params, weights)
    levels = Levels(warn=warn_level, fail=fail_level)
    scale = np.sqrt(weights)
    weighted = residuals * scale
    order = np.argsort(x if x.ndim == 1 else x[:, 0], kind="stable")
    negligible = NEGLIGIBLE * float(np.max(np.abs(fitted * scale)))

    reason = _why_not_applicable(weighted, n_params, negligible)
    if reason is not None:
        runs, serial, normality, variance, variance_rank = (not_applicable(name, reason) for name in CHECK_NAMES)
        scheme, scheme_reason = RESIDUAL, f"not judged ({reason}); the residual scheme is the default"
    else:
        ordered = weighted[order]
        runs = runs_check(ordered, negligible, levels)
        serial = serial_check(ordered, levels)
        normality = normality_check(weighted, levels)
        variance, variance_rank = spread_checks(weighted, fitted, levels)
        scheme, scheme_reason = recommend_scheme(runs, serial, variance, variance_rank, x_random)
    return ResidualChecks(weighted_residuals=weighted, order=order, n_params=n_params, levels=levels, runs=runs,
                          serial=serial, normality=normality, variance=variance, variance_rank=variance_rank,
                          scheme=scheme, scheme_reason=scheme_reason)


def _why_not_applicable(weighted: np.ndarray, n_params: int, negligible: float) -> str | None:
    m = weighted.size
    if m < MIN_RESIDUALS:
        return f"the checks need at least {MIN_RESIDUALS} residuals, there are {m}"
    if m <= n_params:
        return (f"no degrees of freedom left ({m} data, {n_params} parameters): "
                f"the residuals carry no information about the errors")
    if np.max(np.abs(weighted)) <= negligible:
        return "the residuals vanish to rounding: the model passes through every point, there is no scatter to test"
    return None


def _validated(residuals, fitted, x, n_params, weights):
    residuals = np.asarray(residuals, dtype=float)
    if residuals.ndim != 1 or not np.all(np.isfinite(residuals)):
        raise InputError(f"residuals must be a 1-D array of finite numbers, got shape {residuals.shape}"
                         + ("" if residuals.ndim != 1 else " with non-finite values"))
    m = residuals.size
    fitted = np.asarray(fitted, dtype=float)
    if fitted.shape != (m,) or not np.all(np.isfinite(fitted)):
        raise InputError(f"fitted values must be {m} finite numbers like the residuals, got shape {fitted.shape}")
    x = np.asarray(x, dtype=float)
    if x.ndim not in (1, 2) or x.shape[0] != m or not np.all(np.isfinite(x)):
        raise InputError(f"x must be finite with shape ({m},) or ({m}, k), got shape {x.shape}")
    if weights is None:
        weights = np.ones(m)
    weights = np.asarray(weights, dtype=float)
    if weights.shape != (m,) or not np.all(np.isfinite(weights) & (weights > 0)):
        raise InputError(f"weights must be {m} positive finite numbers, got shape {weights.shape}")
    if isinstance(n_params, bool) or not isinstance(n_params, (int, np.integer)) or n_params < 0:
        raise InputError(f"n_params must be a whole number >= 0, got {n_params!r}")
    return residuals, fitted, x, weights
