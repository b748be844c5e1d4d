"""How one parameter set maps onto another: exchanged values, changed signs, shifts by a period.

A solution that gives the best fit's curve with other parameters is named by how its values
arise from the best fit's. Each of its parameters is explained, in this order of preference,
as the best fit's value of the same parameter, as the value of another parameter (an exchange,
"a↔c"), either of them with the sign changed (a mirror, "w → −w"), or as its own best value
shifted by a whole number of periods ("phase + 74×6.28319"). The period is found, not assumed:
a period P is a shift that can be repeated, so the solution moved one more P along that
parameter (its other values kept) must still give the same curve. Of the fractions P = shift/q
(q up to ``MAX_TURNS``) the smallest that passes is the period: a phase run out by 74 turns is
named by its turn of 2π, a phase moved by π together with a sign change of the amplitude by π,
and a difference that only happens to give the curve once (a phase that had to follow a
frequency's change of sign) by none. A parameter that none of this explains leaves the relation
unnamed.
"""
from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

#: Most periods a shift is split into when looking for the period (one model call of this many
#: parameter sets per shifted parameter); a longer shift is named as a multiple of a longer period.
MAX_TURNS = 1024

#: ``same(params (k, n)) -> (k,) bool``: True where a parameter set gives the curve compared with.
SameCurveTest = Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class Relation:
    """How one solution's parameters map onto the best fit's.

    Attributes:
        text: e.g. "a↔c, b↔d", "w → −w" ("x → y" reads: x now holds the best fit's value of y),
            "phase + 1×6.28319"; "" when some parameter is not explained.
        exchange, mirror, shift: which kinds of mapping occur in ``text``.
    """

    text: str = ""
    exchange: bool = False
    mirror: bool = False
    shift: bool = False


def relations(names: tuple[str, ...], best: np.ndarray, others: np.ndarray, parameter_relative: float,
              floor: np.ndarray, same: SameCurveTest) -> list[Relation]:
    """How each of ``others`` (k, n) arises from ``best`` (n,).

    Args:
        names: the n parameter names.
        parameter_relative, floor: when two values are the same (as for clustering): within
            ``parameter_relative`` of the best fit's magnitude, or of ``floor`` (n,) near zero.
        same: the curve test a shorter shift must pass (at the samples, or also between them).
    """
    others = np.asarray(others, dtype=float).reshape(-1, len(best))
    tolerance = parameter_relative * np.maximum(np.abs(best), floor)
    found = []
    for other in others:
        match = _matched_values(best, other, tolerance)
        periods = {j: _period(best, other, j, same) for j in range(len(best)) if j not in match}
        found.append(_relation(names, best, other, match, periods))
    return found


def _period(best: np.ndarray, other: np.ndarray, j: int, same: SameCurveTest) -> tuple[int, float] | None:
    """(turns, period) with other[j] = best[j] + turns·period: the shortest fraction of the shift
    that, added once more to other[j], still passes ``same``; None when not even the whole
    shift repeats."""
    shift = other[j] - best[j]
    turns = np.arange(1, MAX_TURNS + 1)
    candidates = np.repeat(other[None, :], MAX_TURNS, axis=0)
    candidates[:, j] = other[j] + shift / turns
    passed = np.flatnonzero(same(candidates))
    if not passed.size:
        return None
    count = int(turns[passed[-1]])
    return (count if shift > 0 else -count), abs(shift) / count


def _matched_values(best: np.ndarray, other: np.ndarray, tolerance: np.ndarray) -> dict[int, tuple[int, str]]:
    """{j: (k, sign)} for each parameter j of ``other`` that equals ±best[k] (each k used once,
    the parameter's own value preferred)."""
    source: dict[int, tuple[int, str]] = {}
    for j, value in enumerate(other):
        taken = {k for k, _ in source.values()}
        options = [(int(k), "") for k in np.flatnonzero(np.abs(value - best) <= tolerance) if k not in taken]
        options += [(int(k), "−") for k in np.flatnonzero(np.abs(value + best) <= tolerance) if k not in taken]
        if options:
            source[j] = next((option for option in options if option[0] == j), options[0])
    return source


def _relation(names: tuple[str, ...], best: np.ndarray, other: np.ndarray, match: dict[int, tuple[int, str]],
              periods: dict[int, tuple[int, float] | None]) -> Relation:
    parts, exchange, mirror, shift = [], False, False, False
    for j in range(len(best)):
        if j in periods:
            if periods[j] is None:
                return Relation()
            turns, period = periods[j]
            parts.append(f"{names[j]} {'+' if turns > 0 else '−'} {abs(turns)}×{period:.6g}")
            shift = True
            continue
        k, sign = match[j]
        mirror |= sign == "−"
        exchange |= k != j
        if (k, sign) == (j, ""):
            continue
        if not sign and match.get(k) == (j, ""):
            if j < k:
                parts.append(f"{names[j]}↔{names[k]}")
            continue
        parts.append(f"{names[j]} → {sign}{names[k]}")
    return Relation(text=", ".join(parts), exchange=exchange, mirror=mirror, shift=shift)
