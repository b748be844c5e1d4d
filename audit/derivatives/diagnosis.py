"""What is wrong with a hand-derived Jacobian column, in plain words.

A column found wrong is tested against the usual mistakes, in this order, each test asking
whether the hand-derived values H and the true ones T (numeric or exact) satisfy a relation to
within the comparison's tolerance at every element that can be judged:

1. not finite: H is NaN or infinite where the model and T are finite;
2. sign error: H = −T; constant factor: H = c·T with one c for all points;
3. parameter factor: H = c_k·T at each point k, but c_k changes with the parameters (a missing
   or extra factor such as 1/tau²); a power law c ∝ a_l**p is named when one fits;
4. swapped / copied: H = ±T_l for another parameter l (swapped when column l holds T_j);
5. right in part of the range: H = T on a good share of the elements (or at whole points) and
   not elsewhere, as a branch or an absolute value does;
6. otherwise a missing or wrong term: the difference H − T is reported through its correlation
   with x and with every true column, at the point where the error is largest.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from ..jsonable import jsonable

#: One-line meaning of every diagnosis kind.
DIAGNOSES: dict[str, str] = {
    "none": "agrees with the reference wherever it could be judged",
    "not_finite": "NaN or infinite where the model and the true derivative are finite",
    "sign_error": "minus the true derivative",
    "constant_factor": "the true derivative times a constant",
    "parameter_factor": "the true derivative times a factor that changes with the parameters",
    "swapped": "holds another parameter's derivative, which in turn holds this one",
    "copies_other": "equals (a multiple of) another parameter's derivative",
    "part_of_range": "right at some points or observations, wrong at others (a branch or an absolute value)",
    "missing_term": "wrong by an amount that varies with x: a term is missing or wrong",
    "unchecked": "could not be judged: no element where the reference is reliable",
}

#: Short names for table cells (constant_factor, swapped and copies_other add their details).
HEADLINES: dict[str, str] = {
    "none": "agrees", "not_finite": "not finite", "sign_error": "sign error",
    "parameter_factor": "factor varies with parameters",
    "part_of_range": "right in part of the range", "missing_term": "missing or wrong term", "unchecked": "unchecked",
}

#: Two factors this close (relatively) are the same; −1 this close is a sign error.
SAME_FACTOR = 1e-6
#: A relation hand = c·true must also hold to this share of the hand-derived column's own size.
SHAPE_MATCH = 1e-3
#: An element counts for "right in part of the range" when the true derivative there is at least
#: this fraction of the column's size (near-zero elements agree trivially).
NEGLIGIBLE = 1e-3
#: Share of the (non-negligible) elements that must agree for "right in part of the range".
PART_SHARE = 0.1


@dataclass
class Diagnosis:
    """The verdict's explanation for one column.

    Attributes:
        kind: a key of ``DIAGNOSES``.
        summary: one sentence in plain words.
        factor: c for sign error / constant factor / copies_other; NaN otherwise.
        factor_range: (lowest, highest) per-point factor for parameter_factor; else NaN pair.
        other: the other parameter (swapped, copies_other, or closest column); None otherwise.
        wrong_points, right_points: labels of points with and without disagreement.
        correlation_columns: {parameter: correlation of H − T with T_parameter} at the worst point.
        correlation_x: {predictor: correlation of H − T with that predictor} at the worst point.
        unreliable_points: labels of points where the numeric reference is unreliable here.
    """

    kind: str
    summary: str
    factor: float = math.nan
    factor_range: tuple[float, float] = (math.nan, math.nan)
    other: str | None = None
    wrong_points: tuple[str, ...] = ()
    right_points: tuple[str, ...] = ()
    correlation_columns: dict[str, float] = field(default_factory=dict)
    correlation_x: dict[str, float] = field(default_factory=dict)
    unreliable_points: tuple[str, ...] = ()

    @property
    def headline(self) -> str:
        """A few words for table cells and figure titles, e.g. "factor 1/2", "swapped with tau"."""
        if self.kind == "constant_factor":
            return f"factor {_number(self.factor)}"
        if self.kind == "swapped":
            return f"swapped with {self.other}"
        if self.kind == "copies_other":
            return f"copies ∂f/∂{self.other}"
        return HEADLINES[self.kind]

    def to_dict(self) -> dict:
        return jsonable({
            "kind": self.kind, "headline": self.headline, "meaning": DIAGNOSES[self.kind], "summary": self.summary,
            "factor": self.factor,
            "factor_range": list(self.factor_range), "other": self.other,
            "wrong_points": list(self.wrong_points), "right_points": list(self.right_points),
            "correlation_columns": self.correlation_columns, "correlation_x": self.correlation_x,
            "unreliable_points": list(self.unreliable_points),
        })


@dataclass(frozen=True)
class Evidence:
    """The arrays a diagnosis reads (K points, n parameters, m observations).

    Attributes:
        hand: (K, n, m) hand-derived derivatives.
        true: (K, n, m) reference derivatives.
        tolerance: (K, n, m) largest difference that still counts as agreement.
        usable: (K, n, m) elements where the reference is reliable.
        smooth: (K, n, m) False where the model has a kink or jump (left and right derivatives differ).
        disagrees: (K, n, m) usable elements beyond the tolerance (or hand not finite).
        column_scale: (K, n) size of each true column at each point.
        points: (K, n) parameter values.
        labels: (K) point labels.
        names: (n) parameter names.
        x_rows: (k, m) predictor values, one row per predictor.
        predictor_names: (k) predictor names.
    """

    hand: np.ndarray
    true: np.ndarray
    tolerance: np.ndarray
    usable: np.ndarray
    smooth: np.ndarray
    disagrees: np.ndarray
    column_scale: np.ndarray
    points: np.ndarray
    labels: tuple[str, ...]
    names: tuple[str, ...]
    x_rows: np.ndarray
    predictor_names: tuple[str, ...]


def diagnose(evidence: Evidence, j: int, wrong: np.ndarray, worst_point: int) -> Diagnosis:
    """Name the mistake in column ``j`` (``wrong``: (n,) columns found wrong)."""
    usable = evidence.usable[:, j]
    unreliable, unreliable_text = _unreliable(evidence, j)
    disagreeing = evidence.disagrees[:, j].any(axis=1)
    wrong_points = tuple(label for label, bad in zip(evidence.labels, disagreeing) if bad)
    right_points = tuple(label for label, bad, some in zip(evidence.labels, disagreeing, usable.any(axis=1))
                         if some and not bad)
    common = {"unreliable_points": unreliable, "wrong_points": wrong_points, "right_points": right_points}
    name = evidence.names[j]
    if not usable.any():
        return Diagnosis("unchecked", f"∂f/∂{name} could not be judged: the numeric reference is unreliable "
                         "at every point", **common)
    if not wrong[j]:
        return Diagnosis("none", "agrees" + (f"; {unreliable_text}" if unreliable else ""), **common)
    found = None
    for test in (_not_finite, _own_factor, _per_point_factor, _other_column, _part_of_range):
        found = test(evidence, j, wrong)
        if found is not None:
            break
    found = found or _missing_term(evidence, j, worst_point)
    if unreliable:
        found["summary"] += f"; {unreliable_text}"
    return Diagnosis(**found, **common)


def no_hand_derivative(evidence: Evidence, j: int) -> Diagnosis:
    """The diagnosis of a column when there is no hand-derived Jacobian."""
    unreliable, text = _unreliable(evidence, j)
    return Diagnosis("unchecked", "no hand-derived derivative" + (f"; {text}" if unreliable else ""),
                     unreliable_points=unreliable)


def _unreliable(evidence: Evidence, j: int) -> tuple[tuple[str, ...], str]:
    """Labels of the points where column j's numeric reference is unreliable, and why, in words."""
    usable, smooth = evidence.usable[:, j], evidence.smooth[:, j]
    labels = tuple(label for label, ok in zip(evidence.labels, usable.all(axis=1)) if not ok)
    kinks = [label for label, ok in zip(evidence.labels, smooth.all(axis=1)) if not ok]
    text = f"numeric derivative unreliable at {_list(labels)}"
    if kinks:
        text += f" (the model is not smooth at {_list(kinks)}: left and right derivatives differ)"
    return labels, text


def _not_finite(evidence: Evidence, j: int, wrong: np.ndarray) -> dict | None:
    bad = evidence.usable[:, j] & ~np.isfinite(evidence.hand[:, j])
    if not bad.any():
        return None
    where = [label for label, row in zip(evidence.labels, bad) if row.any()]
    return {"kind": "not_finite", "summary": f"∂f/∂{evidence.names[j]} is NaN or infinite at {int(bad.sum())} "
            f"observation(s) where the model is finite (at {_list(where)})"}


def _fit_factor(hand: np.ndarray, true: np.ndarray, tolerance: np.ndarray) -> float | None:
    """c with hand = c·true, or None.

    The residual must be within the tolerance (scaled by |c|) everywhere, and also small against
    the hand-derived values themselves: otherwise a column that is merely tiny next to the true
    one (another parameter's derivative of a much smaller size) would pass as "c ≈ 0".
    """
    power = float(true @ true)
    if power == 0:
        return None
    c = float(hand @ true) / power
    residual = np.abs(hand - c * true)
    if np.all(residual <= tolerance * max(1.0, abs(c))) and residual.max() <= SHAPE_MATCH * np.abs(hand).max():
        return c
    return None


def _own_factor(evidence: Evidence, j: int, wrong: np.ndarray) -> dict | None:
    mask = evidence.usable[:, j]
    c = _fit_factor(evidence.hand[:, j][mask], evidence.true[:, j][mask], evidence.tolerance[:, j][mask])
    if c is None:
        return None
    name = evidence.names[j]
    if abs(c + 1) <= SAME_FACTOR:
        return {"kind": "sign_error", "factor": -1.0,
                "summary": f"sign error: the hand-derived ∂f/∂{name} is −1 × the true one"}
    if abs(c) <= SAME_FACTOR:
        return {"kind": "constant_factor", "factor": 0.0,
                "summary": f"the hand-derived ∂f/∂{name} is zero where the true one is not"}
    return {"kind": "constant_factor", "factor": c,
            "summary": f"constant factor: the hand-derived ∂f/∂{name} is {_number(c)} × the true one"}


def _per_point_factor(evidence: Evidence, j: int, wrong: np.ndarray) -> dict | None:
    factors, rows = [], []
    for k in range(len(evidence.labels)):
        mask = evidence.usable[k, j]
        if not mask.any() or evidence.column_scale[k, j] == 0:
            continue
        c = _fit_factor(evidence.hand[k, j][mask], evidence.true[k, j][mask], evidence.tolerance[k, j][mask])
        if c is None:
            return None
        factors.append(c)
        rows.append(k)
    if len(factors) < 2:
        return None
    factors = np.array(factors)
    name = evidence.names[j]
    summary = (f"∂f/∂{name} is the true one times a factor that changes with the parameters "
               f"(from {factors.min():.4g} to {factors.max():.4g}): a factor is missing or extra")
    law = _power_law(factors, evidence.points[rows], evidence.names)
    if law:
        summary += f"; the hand-derived column is {law} × the true one"
    return {"kind": "parameter_factor", "factor_range": (float(factors.min()), float(factors.max())),
            "summary": summary}


def _power_law(factors: np.ndarray, points: np.ndarray, names: tuple[str, ...]) -> str | None:
    """'C·name**p' when factor = C·a_name**p (p a multiple of 1/2) fits every point, else None."""
    if len(factors) < 3 or np.any(factors == 0) or np.any(np.sign(factors) != np.sign(factors[0])):
        return None
    target = np.log(np.abs(factors))
    for l, name in enumerate(names):
        values = points[:, l]
        if np.any(values == 0) or np.ptp(np.log(np.abs(values))) < 1e-3:
            continue
        design = np.column_stack([np.ones(len(values)), np.log(np.abs(values))])
        (intercept, slope), *_ = np.linalg.lstsq(design, target, rcond=None)
        exponent = round(slope * 2) / 2
        if exponent == 0 or abs(slope - exponent) > 1e-6:
            continue
        if np.max(np.abs(design @ [intercept, exponent] - target)) > 1e-6:
            continue
        constant = np.sign(factors[0]) * math.exp(intercept)
        power = name if exponent == 1 else f"{name}**{_number(exponent)}"
        return power if abs(constant - 1) <= SAME_FACTOR else f"{_number(constant)}·{power}"
    return None


def _other_column(evidence: Evidence, j: int, wrong: np.ndarray) -> dict | None:
    mask = evidence.usable[:, j]
    hand = evidence.hand[:, j][mask]
    for l, other in enumerate(evidence.names):
        if l == j:
            continue
        tolerance = evidence.tolerance[:, j][mask] + evidence.tolerance[:, l][mask]
        c = _fit_factor(hand, evidence.true[:, l][mask], tolerance)
        if c is None or abs(c) <= SAME_FACTOR:
            continue
        name = evidence.names[j]
        multiple = "" if abs(c - 1) <= SAME_FACTOR else "−" if abs(c + 1) <= SAME_FACTOR else f"{_number(c)} × "
        back_mask = evidence.usable[:, l]
        back = wrong[l] and _fit_factor(evidence.hand[:, l][back_mask], evidence.true[:, j][back_mask],
                                        evidence.tolerance[:, l][back_mask] + evidence.tolerance[:, j][back_mask])
        if back:
            return {"kind": "swapped", "factor": c, "other": other,
                    "summary": f"columns swapped: the hand-derived ∂f/∂{name} holds {multiple}∂f/∂{other} "
                               f"and the hand-derived ∂f/∂{other} holds ∂f/∂{name}"}
        return {"kind": "copies_other", "factor": c, "other": other,
                "summary": f"the hand-derived ∂f/∂{name} equals {multiple}∂f/∂{other}, "
                           "another parameter's derivative"}
    return None


def _part_of_range(evidence: Evidence, j: int, wrong: np.ndarray) -> dict | None:
    usable = evidence.usable[:, j]
    true = evidence.true[:, j]
    disagrees = evidence.disagrees[:, j]
    # Elements where the true derivative is near zero agree trivially; they count only if wrong.
    substantial = usable & ((np.abs(true) >= NEGLIGIBLE * evidence.column_scale[:, j][:, None]) | disagrees)
    share = (substantial & ~disagrees).sum() / max(substantial.sum(), 1)
    points_wrong = disagrees.any(axis=1)
    points_right = substantial.any(axis=1) & ~points_wrong
    if share < PART_SHARE and not points_right.any():
        return None
    name = evidence.names[j]
    parts = [f"∂f/∂{name} is right in part of the range only: right at {share:.0%} of the observations checked"]
    if points_right.any():
        parts.append(f"right everywhere at {int(points_right.sum())} point(s), wrong at {int(points_wrong.sum())}")
    x = np.broadcast_to(evidence.x_rows[0], disagrees.shape)
    parts.append(f"wrong for {evidence.predictor_names[0]} in [{x[disagrees].min():.4g}, {x[disagrees].max():.4g}]")
    c = _fit_factor(evidence.hand[:, j][disagrees], true[disagrees], evidence.tolerance[:, j][disagrees])
    if c is not None:
        parts.append("where wrong it has the wrong sign" if abs(c + 1) <= SAME_FACTOR
                     else f"where wrong it is {_number(c)} × the true one")
    return {"kind": "part_of_range", "factor": math.nan if c is None else c, "summary": "; ".join(parts)}


def _missing_term(evidence: Evidence, j: int, worst_point: int) -> dict:
    mask = evidence.usable[worst_point, j]
    difference = (evidence.hand[worst_point, j] - evidence.true[worst_point, j])[mask]
    name = evidence.names[j]
    scale = evidence.column_scale[worst_point, j]
    if np.ptp(difference) <= 1e-6 * max(scale, np.abs(difference).max()):
        return {"kind": "missing_term",
                "summary": f"∂f/∂{name} is off by the same amount ({difference.mean():.4g}) at every "
                           f"observation: a constant term is missing or extra"}
    columns = {other: _correlation(difference, evidence.true[worst_point, l][mask])
               for l, other in enumerate(evidence.names)}
    with_x = {predictor: _correlation(difference, row[mask])
              for predictor, row in zip(evidence.predictor_names, evidence.x_rows)}
    closest = max(columns, key=lambda key: -1 if math.isnan(columns[key]) else abs(columns[key]))
    x_text = ", ".join(f"{key} {_signed(value)}" for key, value in with_x.items())
    summary = (f"a term of ∂f/∂{name} is missing or wrong: the error varies with x (correlation with {x_text}) "
               f"and looks most like ∂f/∂{closest} (correlation {_signed(columns[closest])}) "
               f"at {evidence.labels[worst_point]}")
    return {"kind": "missing_term", "other": closest, "summary": summary,
            "correlation_columns": columns, "correlation_x": with_x}


def _correlation(a: np.ndarray, b: np.ndarray) -> float:
    if a.size < 2 or np.ptp(a) == 0 or np.ptp(b) == 0:
        return math.nan
    return float(np.corrcoef(a, b)[0, 1])


def _number(value: float) -> str:
    """A factor as a short fraction when it is one (2, 1/2, −3/4), else 4 significant digits."""
    fraction = Fraction(value).limit_denominator(12)
    if fraction != 0 and abs(float(fraction) - value) <= SAME_FACTOR * abs(value):
        return str(fraction).replace("-", "−")
    return f"{value:.4g}".replace("-", "−")


def _signed(value: float) -> str:
    return "n/a" if math.isnan(value) else f"{value:+.2f}".replace("-", "−")


def _list(labels) -> str:
    labels = list(labels)
    return ", ".join(labels[:4]) + (f" and {len(labels) - 4} more" if len(labels) > 4 else "")
