"""The uncertainty of each parameter stated as metrologists do (JCGM 100:2008, the GUM).

For each parameter: the estimate, its standard uncertainty u (here the asymptotic standard
error), the degrees of freedom nu = m − n, the coverage factor k = t_{(1+p)/2, nu} for the
coverage probability p (GUM annex G.3), the expanded uncertainty U = k·u and the interval
estimate ± U. The written result follows GUM 7.2.6: U rounded to two significant digits (to
the nearest, not up; GUM 7.2.6 leaves rounding up to judgement), the estimate rounded to the
same decimal place, e.g. ``12.346 ± 0.038 (k = 2.01, p = 95 %, nu = 48)``.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

from audit.errors import InputError
from audit.jsonable import jsonable

#: Outside 10^-4 ≤ magnitude < 10^5 the estimate and U share a written power of ten, so that a
#: result never runs to a dozen zeros.
SMALLEST_PLAIN_EXPONENT = -4
LARGEST_PLAIN_EXPONENT = 4


@dataclass
class UncertaintyStatement:
    """Per-parameter uncertainty in the GUM's terms.

    Attributes:
        names: parameter names (n).
        estimates: (n,) parameter values.
        standard_uncertainty: (n,) u, the asymptotic standard errors; inf or NaN when the data
            do not identify the parameter.
        dof: degrees of freedom nu = m − n (may be inf).
        coverage: coverage probability p, e.g. 0.95.
        coverage_factor: k = t_{(1+p)/2, nu}; NaN when nu = 0.
        expanded: (n,) U = k·u.
        lower, upper: (n,) the interval estimate, estimates ∓ U.
        results: (n,) each result written as the GUM recommends, or the reason there is none.
        lines: (n,) ``name = result``.
    """

    names: tuple[str, ...]
    estimates: np.ndarray
    standard_uncertainty: np.ndarray
    dof: float
    coverage: float
    coverage_factor: float
    expanded: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    results: tuple[str, ...]

    @property
    def lines(self) -> tuple[str, ...]:
        return tuple(f"{name} = {result}" for name, result in zip(self.names, self.results))

    def to_dict(self) -> dict:
        return jsonable({
            "dof": self.dof,
            "coverage": self.coverage,
            "coverage_factor": self.coverage_factor,
            "parameters": [
                {"name": name, "estimate": self.estimates[j], "standard_uncertainty": self.standard_uncertainty[j],
                 "expanded": self.expanded[j], "lower": self.lower[j], "upper": self.upper[j],
                 "result": self.results[j]}
                for j, name in enumerate(self.names)
            ],
        })


def uncertainty_statement(names: Sequence[str], estimates, std_errors, dof: float,
                          coverage: float = 0.95) -> UncertaintyStatement:
    """State each parameter's uncertainty in the GUM's form.

    Args:
        names: n parameter names.
        estimates: (n,) finite parameter values.
        std_errors: (n,) standard uncertainties u ≥ 0; inf or NaN marks a parameter the data
            do not identify (it gets a sentence, no interval).
        dof: degrees of freedom m − n, a whole number ≥ 0, or inf.
        coverage: coverage probability p, strictly between 0 and 1.

    Raises:
        InputError: lengths disagree, an estimate is not finite, u is negative, dof is not a
            whole number ≥ 0, or coverage is not a probability.
    """
    names = tuple(str(name) for name in names)
    estimates = np.asarray(estimates, dtype=float)
    std_errors = np.asarray(std_errors, dtype=float)
    if estimates.shape != (len(names),) or std_errors.shape != (len(names),):
        raise InputError(f"names ({len(names)}), estimates {estimates.shape} and standard uncertainties "
                         f"{std_errors.shape} must all have one entry per parameter")
    if not np.all(np.isfinite(estimates)):
        raise InputError("estimates must be finite numbers")
    if np.any(std_errors < 0):
        raise InputError("standard uncertainties must not be negative")
    dof = float(dof)
    if not (dof >= 0 and (math.isinf(dof) or dof.is_integer())):
        raise InputError(f"dof must be a whole number ≥ 0 or inf, not {dof:g}")
    if not 0 < coverage < 1:
        raise InputError(f"coverage must be a probability strictly between 0 and 1, not {coverage:g}")

    coverage_factor = float(stats.t.ppf((1 + coverage) / 2, dof)) if dof > 0 else math.nan
    expanded = coverage_factor * std_errors
    tail = f"(k = {coverage_factor:.2f}, p = {100 * coverage:g} %, nu = {_dof_text(dof)})"
    results = tuple(_result(estimate, u, big_u, dof, tail)
                    for estimate, u, big_u in zip(estimates, std_errors, expanded))
    return UncertaintyStatement(names=names, estimates=estimates, standard_uncertainty=std_errors, dof=dof,
                                coverage=float(coverage), coverage_factor=coverage_factor, expanded=expanded,
                                lower=estimates - expanded, upper=estimates + expanded, results=results)


def round_to_uncertainty(estimate: float, expanded: float) -> tuple[str, str]:
    """The estimate and U written as GUM 7.2.6 asks, without a power of ten.

    U keeps two significant digits (rounded to the nearest), the estimate is rounded to the
    same decimal place: (10.05762, 0.027) -> ("10.058", "0.027"); (3.14159, 0.0996) ->
    ("3.14", "0.10").

    Args:
        estimate: the value.
        expanded: U, finite and > 0.

    Raises:
        InputError: U is not finite and positive.
    """
    if not (math.isfinite(expanded) and expanded > 0):
        raise InputError(f"expanded uncertainty must be finite and positive to round to, not {expanded:g}")
    decimals = _decimals_of_two_digits(expanded)
    return _fixed(estimate, decimals), _fixed(expanded, decimals)


def _decimals_of_two_digits(value: float) -> int:
    """Decimal places that keep two significant digits of ``value`` > 0 (negative: tens, ...).

    The exponent is read after rounding (``.1e`` formatting), so a carry such as
    0.0996 -> 0.10 moves the last kept place.
    """
    exponent = int(f"{value:.1e}".split("e")[1])
    return 1 - exponent


def _fixed(value: float, decimals: int) -> str:
    rounded = round(value, decimals) + 0.0  # + 0.0 turns a rounded -0.0 into 0.0
    return f"{rounded:.{max(decimals, 0)}f}"


def _result(estimate: float, u: float, expanded: float, dof: float, tail: str) -> str:
    plain = f"{estimate:.6g}"
    if not np.isfinite(u):
        return (f"{plain} (standard uncertainty not finite: the parameter is not identified by the data, "
                f"so no interval can be stated)")
    if dof == 0:
        return f"{plain} (no degrees of freedom left: as many parameters as data, no uncertainty can be stated)"
    if u == 0:
        return f"{plain} (standard uncertainty zero: the model passes through every point)"
    exponent = int(f"{max(abs(estimate), expanded):e}".split("e")[1])
    if SMALLEST_PLAIN_EXPONENT <= exponent <= LARGEST_PLAIN_EXPONENT:
        value_text, expanded_text = round_to_uncertainty(estimate, expanded)
        return f"{value_text} ± {expanded_text} {tail}"
    scale = 10.0**exponent
    value_text, expanded_text = round_to_uncertainty(estimate / scale, expanded / scale)
    return f"({value_text} ± {expanded_text}) × 10^{exponent} {tail}"


def _dof_text(dof: float) -> str:
    return "inf" if math.isinf(dof) else f"{dof:.0f}"
