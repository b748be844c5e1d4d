"""Singular values of the weighted Jacobian and its weakest directions, told as parameter combinations.

Normalisation. Each parameter a_j is counted in units of its conditional standard error
s / ‖J_j‖ (the uncertainty it would have if every other parameter were known; J_j is the j-th
column of the weighted Jacobian, s the residual standard deviation). In those units the
Jacobian has unit-length columns, its singular values do not depend on the parameters' units,
and a right singular vector v with a small singular value σ says two equivalent things:

* moving the parameters along v (each by v_j conditional standard errors) changes the fit by
  only σ times as much as a unit move of a single parameter would;
* the combination Σ v_j·a_j (a_j in those units, so that each alone has standard error 1 when
  the others are known) has standard error 1/σ: it is what the data barely constrain.

The words name the parameters with a loading of at least ``LOADING_SHOWN`` of the largest,
the largest scaled to 1 and positive: "tau and dT drift together: tau + 0.98·dT is barely
constrained" (same signs: the estimates are positively correlated), or "... trade off against
each other: tau − 0.98·dT ..." (opposite signs).

How weak is weak: the condition index κ_k = σ_max / σ_k of the unit-column matrix; 30 and
more marks a moderate, 100 and more a strong dependence (Belsley, Kuh & Welsch, Regression
Diagnostics, 1980; values from memory). fitaudit says "weakly constrained" from 30, "barely
constrained" from 1000, and "not constrained at all" where σ_k / σ_max is below the rank
tolerance of the solver.
"""
from __future__ import annotations

import numpy as np

from ..engine.linsolve import RANK_TOLERANCE

#: Condition indices from which a direction is reported as weak, and as barely constrained.
WEAK_INDEX = 30.0
BARELY_INDEX = 1000.0
#: Loadings smaller than this share of the largest are left out of the words (shown in bars).
LOADING_SHOWN = 0.1


def singular_values(weighted_jacobian: np.ndarray) -> dict[str, np.ndarray | float]:
    """Raw and column-scaled singular analysis of an (m, n) weighted Jacobian.

    Returns:
        dict with ``raw`` (n,) singular values, ``scaled`` (n,) singular values of the
        unit-column matrix, ``directions`` (n, n) its right singular vectors as rows (same
        order, strongest first, each with its largest loading positive), ``column_norms`` (n,),
        ``condition_raw`` and ``condition_scaled`` (largest over smallest; inf when singular).
    """
    norms = np.linalg.norm(weighted_jacobian, axis=0)
    raw = np.linalg.svd(weighted_jacobian, compute_uv=False)
    unit = weighted_jacobian / np.where(norms > 0, norms, 1.0)
    _, scaled, right = np.linalg.svd(unit, full_matrices=False)
    if len(scaled) < len(norms):
        scaled = np.concatenate([scaled, np.zeros(len(norms) - len(scaled))])
        _, _, right = np.linalg.svd(unit, full_matrices=True)
    right = right * np.where(_leading(right) < 0, -1.0, 1.0)[:, None]

    def condition(values: np.ndarray) -> float:
        return float(values[0] / values[-1]) if values[-1] > 0 else np.inf

    return {"raw": raw, "scaled": scaled, "directions": right, "column_norms": norms,
            "condition_raw": condition(raw), "condition_scaled": condition(scaled)}


def _leading(rows: np.ndarray) -> np.ndarray:
    """(k,) the largest loading of each row; among loadings equal to within rounding, the first."""
    size = np.abs(rows)
    first = np.argmax(size >= (1 - 1e-9) * size.max(axis=1, keepdims=True), axis=1)
    return np.take_along_axis(rows, first[:, None], axis=1)[:, 0]


def condition_indices(scaled: np.ndarray) -> np.ndarray:
    """(n,) σ_max / σ_k of the unit-column matrix (inf for a zero singular value)."""
    with np.errstate(divide="ignore"):
        return np.where(scaled > 0, scaled[0] / np.where(scaled > 0, scaled, 1.0), np.inf)


def weak_rows(scaled: np.ndarray) -> np.ndarray:
    """Row indices of the directions to report: condition index ≥ WEAK_INDEX, weakest first;
    the single weakest direction when none is that weak."""
    index = condition_indices(scaled)
    rows = np.flatnonzero(index >= WEAK_INDEX)[::-1]
    return rows if len(rows) else np.array([len(scaled) - 1])


def describe(loadings: np.ndarray, singular_value: float, largest: float, names: tuple[str, ...]) -> str:
    """One sentence naming the combination along ``loadings`` (n,) and how weakly it is constrained."""
    strength = _strength(singular_value, largest)
    shown = np.flatnonzero(np.abs(loadings) >= LOADING_SHOWN * np.max(np.abs(loadings)))
    # Loadings equal to within rounding keep the parameters' own order.
    shown = shown[np.argsort(-np.round(np.abs(loadings[shown]) / np.max(np.abs(loadings)), 9), kind="stable")]
    lead = shown[0]
    coefficients = loadings / loadings[lead]
    if len(shown) == 1:
        weak = largest > 0 and largest / max(singular_value, np.finfo(float).tiny) >= WEAK_INDEX
        return f"{names[lead]} on its own is {strength}" + (": the fit hardly depends on it" if weak else "")
    combination = names[lead] + "".join(
        f" {'+' if coefficients[j] > 0 else '−'} {_coefficient(abs(coefficients[j]))}·{names[j]}" for j in shown[1:])
    if len(shown) == 2:
        other = shown[1]
        relation = "drift together" if coefficients[other] > 0 else "trade off against each other"
        who = f"{names[lead]} and {names[other]} {relation}"
    else:
        who = ", ".join(names[j] for j in shown[:-1]) + f" and {names[shown[-1]]} are tied"
    return f"{who}: {combination} is {strength}"


def _coefficient(value: float) -> str:
    return f"{value:.2f}" if 0.01 <= value < 100 else f"{value:.2g}"


def _strength(singular_value: float, largest: float) -> str:
    if not largest > 0 or singular_value <= RANK_TOLERANCE * largest:
        return "not constrained at all by the data"
    index = largest / singular_value
    if index >= BARELY_INDEX:
        return f"barely constrained (condition index {index:.3g})"
    if index >= WEAK_INDEX:
        return f"weakly constrained (condition index {index:.3g})"
    return f"the least constrained combination, still well determined (condition index {index:.3g})"
