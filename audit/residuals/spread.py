"""Whether the residuals' spread changes with the fitted values (heteroscedasticity).

- ``variance``: Breusch-Pagan test in Koenker's studentised form (Koenker 1981): regress the
  squared residuals on [1, fitted]; the statistic m·R² is chi-square with 1 degree of freedom
  for constant variance. Koenker's form drops the normality the original test assumed. With one
  regressor R² is the squared correlation of r² with the fitted values.
- ``variance_rank``: Spearman's rank correlation of |r| with the fitted values (scipy.stats.
  spearmanr, t approximation for p), which one outlier cannot drive.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

from .check import FLAGGED, Check, Levels, not_applicable


def spread_checks(weighted: np.ndarray, fitted: np.ndarray, levels: Levels) -> tuple[Check, Check]:
    """The Breusch-Pagan and rank-correlation checks.

    Args:
        weighted: (m,) weighted residuals, any order.
        fitted: (m,) fitted values, same order.
        levels: significance levels.
    """
    sizes = np.abs(weighted)
    if np.ptp(fitted) == 0:
        reason = "every fitted value is the same, so there is nothing to relate the spread to"
        return not_applicable("variance", reason), not_applicable("variance_rank", reason)
    if np.ptp(sizes) == 0:
        reason = "every residual has the same size, so the spread cannot change"
        return not_applicable("variance", reason), not_applicable("variance_rank", reason)

    r_squared = float(np.corrcoef(weighted**2, fitted)[0, 1] ** 2)
    statistic = weighted.size * r_squared
    p_value = float(stats.chi2.sf(statistic, 1))
    status = levels.grade(p_value)
    meaning = ("the spread changes with the fitted values" if status in FLAGGED
               else "no sign that the spread changes with the fitted values")
    finding = f"Breusch-Pagan m·R² = {statistic:.3g} (chi-square, 1 dof, p = {p_value:.2g}): {meaning}"
    variance = Check(name="variance", statistic=statistic, p_value=p_value, status=status, finding=finding,
                     details={"r_squared": r_squared})

    rank = stats.spearmanr(sizes, fitted)
    rho, rank_p = float(rank.statistic), float(rank.pvalue)
    rank_status = levels.grade(rank_p)
    if rank_status not in FLAGGED:
        rank_meaning = "no trend in the residuals' size"
    else:
        rank_meaning = f"the residuals' size {'grows' if rho > 0 else 'shrinks'} as the fitted values grow"
    finding = f"rank correlation of |residual| with fitted value {rho:.2f} (p = {rank_p:.2g}): {rank_meaning}"
    variance_rank = Check(name="variance_rank", statistic=rho, p_value=rank_p, status=rank_status, finding=finding)
    return variance, variance_rank
