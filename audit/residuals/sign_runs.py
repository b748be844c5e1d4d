"""Runs of residual signs along x (the Wald-Wolfowitz runs test).

Independent errors give signs in random order; a model that misses a feature of the data leaves
long stretches of one sign (too few runs), and negatively correlated errors alternate (too
many). With n1 positive and n2 negative residuals (N = n1 + n2) the number of runs R has mean
2·n1·n2/N + 1 and variance 2·n1·n2·(2·n1·n2 − N) / (N²·(N − 1)) (Wald & Wolfowitz 1940).

Rule for the p-value: when both n1 and n2 are at most EXACT_LIMIT, the exact distribution of R
(Swed & Eisenhart 1943, whose tables stop at 20) gives it; above that, the normal
approximation z = (R − mean)/sd does. Either way the p-value is two-sided.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import stats

from .check import FLAGGED, Check, Levels, not_applicable

EXACT_LIMIT = 20


def runs_check(ordered: np.ndarray, negligible: float, levels: Levels) -> Check:
    """The runs test on residuals already in x order.

    Args:
        ordered: (m,) weighted residuals sorted by x.
        negligible: residuals with |r| at or below this carry no sign and are left out.
        levels: significance levels.
    """
    signs = np.sign(ordered[np.abs(ordered) > negligible])
    positive = int(np.count_nonzero(signs > 0))
    negative = signs.size - positive
    if positive == 0 or negative == 0:
        side = "positive" if negative == 0 else "negative"
        return not_applicable("runs", f"all {signs.size} residuals have the same sign ({side}), and the runs "
                                      f"test needs both; the curve misses every point on one side, so check "
                                      f"whether the model lacks an offset")
    runs = 1 + int(np.count_nonzero(signs[1:] != signs[:-1]))
    total = positive + negative
    expected = 2 * positive * negative / total + 1
    variance = 2 * positive * negative * (2 * positive * negative - total) / (total**2 * (total - 1))
    z = (runs - expected) / math.sqrt(variance) if variance > 0 else math.nan
    exact = positive <= EXACT_LIMIT and negative <= EXACT_LIMIT
    p_value = runs_p_value(runs, positive, negative) if exact else float(2 * stats.norm.sf(abs(z)))
    status = levels.grade(p_value)
    summary = (f"{runs} runs of signs along x where {expected:.1f} are expected for independent errors "
               f"(p = {p_value:.2g})")
    if status not in FLAGGED:
        meaning = "no pattern along x"
    elif runs < expected:
        meaning = "too few: the residuals follow a pattern along x, the model may miss a feature of the data"
    else:
        meaning = "too many: the signs alternate more than chance allows (negatively correlated errors)"
    return Check(name="runs", statistic=float(runs), p_value=p_value, status=status, finding=f"{summary}: {meaning}",
                 details={"runs": runs, "expected": expected, "z": z, "positive": positive, "negative": negative,
                          "exact": exact})


def runs_p_value(runs: int, positive: int, negative: int) -> float:
    """Exact two-sided p-value of ``runs`` runs among ``positive`` + ``negative`` signs.

    Twice the smaller tail probability, at most 1. The distribution (Swed & Eisenhart 1943):
    P(R = 2k) = 2·C(n1−1, k−1)·C(n2−1, k−1) / C(N, n1) and
    P(R = 2k+1) = [C(n1−1, k−1)·C(n2−1, k) + C(n1−1, k)·C(n2−1, k−1)] / C(N, n1),
    summed in exact integers.
    """
    weights = {count: _arrangements(count, positive, negative) for count in range(2, positive + negative + 1)}
    total = math.comb(positive + negative, positive)
    lower = sum(weight for count, weight in weights.items() if count <= runs)
    upper = sum(weight for count, weight in weights.items() if count >= runs)
    return min(1.0, 2 * min(lower, upper) / total)


def _arrangements(runs: int, n1: int, n2: int) -> int:
    """How many orderings of n1 plus and n2 minus signs have exactly ``runs`` runs."""
    half = runs // 2
    if runs % 2 == 0:
        return 2 * math.comb(n1 - 1, half - 1) * math.comb(n2 - 1, half - 1)
    return math.comb(n1 - 1, half - 1) * math.comb(n2 - 1, half) + math.comb(n1 - 1, half) * math.comb(n2 - 1, half - 1)
