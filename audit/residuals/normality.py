"""Whether the residuals look normally distributed: the Shapiro-Wilk test (scipy.stats.shapiro).

Normal errors make least squares the maximum-likelihood fit and the t intervals exact for
linear models; the residual bootstrap leans on the residuals' shape as it is, so a flag here
matters most for the asymptotic intervals.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from .check import FLAGGED, Check, Levels, not_applicable


def normality_check(weighted: np.ndarray, levels: Levels) -> Check:
    """Shapiro-Wilk W and p on (m,) weighted residuals, m ≥ 3."""
    if np.ptp(weighted) == 0:
        return not_applicable("normality", "every residual has the same value, which no distribution test can judge")
    result = stats.shapiro(weighted)
    statistic, p_value = float(result.statistic), float(result.pvalue)
    status = levels.grade(p_value)
    meaning = ("the residuals are unlikely to come from a normal distribution (skew, heavy tails or outliers); "
               "t intervals lean on normality" if status in FLAGGED else "no sign of non-normal residuals")
    return Check(name="normality", statistic=statistic, p_value=p_value, status=status,
                 finding=f"Shapiro-Wilk W = {statistic:.3f} (p = {p_value:.2g}): {meaning}")
