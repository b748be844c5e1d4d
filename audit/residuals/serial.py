"""Correlation of neighbouring residuals along x: lag-1 autocorrelation and Durbin-Watson d.

d = Σ(e_t − e_{t−1})² / Σ e_t² (Durbin & Watson 1950) is near 2 for independent errors, towards
0 when neighbours share their sign (a trend the model misses, or positively correlated errors)
and towards 4 when they alternate. The rule of thumb that d between about 1.5 and 2.5 shows no
worrying correlation is common practice.

p-value: the exact distribution of d depends on the model's Jacobian, which plain residual
arrays do not carry, so the large-sample form is used: d ≈ 2·(1 − r1) with the lag-1
autocorrelation r1 of independent errors about N(0, 1/m) (Bartlett 1946), hence
z = (d − 2)·sqrt(m)/2, two-sided. It ignores the few degrees of freedom the fit took, so with
a handful of points it is rough.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import stats

from .check import FLAGGED, Check, Levels


def serial_check(ordered: np.ndarray, levels: Levels) -> Check:
    """Durbin-Watson d and lag-1 autocorrelation of residuals already in x order.

    Args:
        ordered: (m,) weighted residuals sorted by x, not all zero.
        levels: significance levels.
    """
    m = ordered.size
    durbin_watson = float(np.sum(np.diff(ordered) ** 2) / np.sum(ordered**2))
    centred = ordered - ordered.mean()
    lag1 = float(np.sum(centred[1:] * centred[:-1]) / np.sum(centred**2)) if np.any(centred) else math.nan
    z = (durbin_watson - 2) * math.sqrt(m) / 2
    p_value = float(2 * stats.norm.sf(abs(z)))
    status = levels.grade(p_value)
    summary = (f"Durbin-Watson d = {durbin_watson:.2f} (2 for independent errors; lag-1 autocorrelation {lag1:.2f}, "
               f"p = {p_value:.2g})")
    if status not in FLAGGED:
        meaning = "no sign of correlated neighbours"
    elif durbin_watson < 2:
        meaning = "neighbours along x share their sign: a pattern the model misses, or correlated errors"
    else:
        meaning = "neighbours along x alternate in sign: negatively correlated errors"
    return Check(name="serial", statistic=durbin_watson, p_value=p_value, status=status,
                 finding=f"{summary}: {meaning}", details={"lag1_autocorrelation": lag1, "z": z})
