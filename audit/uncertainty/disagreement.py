"""Where the bootstrap and the linearised (asymptotic) uncertainty disagree, and why it matters.

Each parameter's bootstrap interval (BCa where it is defined, else percentile) is compared with
its t interval. A flag is raised, with a plain reason, when

- width: the bootstrap interval is more than WIDTH_RATIO_LIMIT times as wide as the t interval,
  or less than 1/WIDTH_RATIO_LIMIT as wide;
- asymmetry: it reaches more than ASYMMETRY_LIMIT times as far on one side of the estimate as on
  the other (a t interval is symmetric by construction), or does not contain the estimate;
- bound: the t interval crosses zero while the estimate and every used replicate keep one sign
  (a positive rate, time constant or amplitude);
- bias: the bootstrap bias exceeds BIAS_LIMIT bootstrap standard errors.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..jsonable import jsonable

#: Widths within a factor 1.5 of each other are taken as agreeing: at B = 2000 the Monte Carlo
#: error of a 95% percentile interval's width is a few percent, and the t interval is wider
#: than a normal one by up to 20% for small degrees of freedom (common practice).
WIDTH_RATIO_LIMIT = 1.5
#: One arm 1.5 times the other is well beyond the Monte Carlo error of the interval ends at
#: B = 2000 (a few percent of an arm) and visible on a plot.
ASYMMETRY_LIMIT = 1.5
#: A bias below a quarter of the standard error can be ignored (Efron & Tibshirani 1993,
#: ch. 10; value from memory).
BIAS_LIMIT = 0.25

FLAG_KINDS = ("width", "asymmetry", "bound", "bias")


@dataclass(frozen=True)
class Flag:
    """One disagreement: the parameter, its kind (one of FLAG_KINDS) and a plain reason."""

    parameter: str
    kind: str
    reason: str

    def to_dict(self) -> dict:
        return {"parameter": self.parameter, "kind": self.kind, "reason": self.reason}


@dataclass
class IntervalComparison:
    """Bootstrap against asymptotic, per parameter.

    Attributes:
        compared: (n,) which bootstrap interval was compared: "bca" or "percentile".
        lower, upper: (n,) ends of that interval.
        width_ratio: (n,) its width over the t interval's width.
        arm_ratio: (n,) (upper − estimate) / (estimate − lower): 1 symmetric, > 1 longer above;
            NaN where the interval does not contain the estimate.
        bias_ratio: (n,) bootstrap bias over bootstrap standard error.
        flags: every disagreement found, in parameter order.
    """

    compared: tuple[str, ...]
    lower: np.ndarray
    upper: np.ndarray
    width_ratio: np.ndarray
    arm_ratio: np.ndarray
    bias_ratio: np.ndarray
    flags: list[Flag] = field(default_factory=list)

    def to_dict(self) -> dict:
        return jsonable({"compared": list(self.compared), "lower": self.lower, "upper": self.upper,
                         "width_ratio": self.width_ratio, "arm_ratio": self.arm_ratio,
                         "bias_ratio": self.bias_ratio, "flags": [flag.to_dict() for flag in self.flags]})


def compare_intervals(names: tuple[str, ...], estimate: np.ndarray, t_lower: np.ndarray, t_upper: np.ndarray,
                      percentile: tuple[np.ndarray, np.ndarray], bca: tuple[np.ndarray, np.ndarray],
                      std_error: np.ndarray, bias: np.ndarray, replicates: np.ndarray) -> IntervalComparison:
    """Compare each parameter's bootstrap interval with its t interval and flag disagreements.

    Args:
        names: parameter names (n).
        estimate: (n,) best fit.
        t_lower, t_upper: (n,) asymptotic t interval.
        percentile, bca: (lower, upper) of each bootstrap interval, (n,) each; BCa may be NaN.
        std_error, bias: (n,) bootstrap standard error and bias.
        replicates: (B, n) the replicates the intervals were built from.
    """
    use_bca = np.isfinite(bca[0]) & np.isfinite(bca[1])
    lower = np.where(use_bca, bca[0], percentile[0])
    upper = np.where(use_bca, bca[1], percentile[1])
    compared = tuple("bca" if flag else "percentile" for flag in use_bca)
    with np.errstate(divide="ignore", invalid="ignore"):
        width_ratio = (upper - lower) / (t_upper - t_lower)
        contains = (lower < estimate) & (estimate < upper)
        arm_ratio = np.where(contains, (upper - estimate) / (estimate - lower), np.nan)
        bias_ratio = bias / std_error
    comparison = IntervalComparison(compared=compared, lower=lower, upper=upper, width_ratio=width_ratio,
                                    arm_ratio=arm_ratio, bias_ratio=bias_ratio)
    positive = np.all(replicates > 0, axis=0) & (estimate > 0)
    negative = np.all(replicates < 0, axis=0) & (estimate < 0)
    count = replicates.shape[0]
    for j, name in enumerate(names):
        label = "BCa" if use_bca[j] else "percentile"
        comparison.flags.extend(_flags_of_one(name, label, j, comparison, estimate, t_lower, t_upper,
                                              positive[j], negative[j], count))
    return comparison


def _flags_of_one(name, label, j, comparison, estimate, t_lower, t_upper, positive, negative, count) -> list[Flag]:
    if not (np.isfinite(comparison.lower[j]) and np.isfinite(comparison.upper[j])):
        return []
    flags = []
    ratio = comparison.width_ratio[j]
    if np.isfinite(ratio) and not 1 / WIDTH_RATIO_LIMIT <= ratio <= WIDTH_RATIO_LIMIT:
        verdict = "understates" if ratio > 1 else "overstates"
        flags.append(Flag(name, "width", f"the {label} interval is {ratio:.2f} times as wide as the t interval: "
                                         f"the linearised standard error {verdict} the spread of the refits"))
    arms = comparison.arm_ratio[j]
    if not np.isfinite(arms):
        flags.append(Flag(name, "asymmetry", f"the {label} interval [{comparison.lower[j]:.4g}, "
                                             f"{comparison.upper[j]:.4g}] does not contain the estimate "
                                             f"{estimate[j]:.4g}: the refits are strongly biased"))
    elif not 1 / ASYMMETRY_LIMIT <= arms <= ASYMMETRY_LIMIT:
        longer, shorter = ("above", "below") if arms > 1 else ("below", "above")
        factor = max(arms, 1 / arms)
        flags.append(Flag(name, "asymmetry", f"the {label} interval reaches {factor:.2f} times as far {longer} the "
                                             f"estimate as {shorter} it, while the t interval is symmetric by "
                                             "construction: the estimate's distribution is skewed"))
    if positive and t_lower[j] < 0:
        flags.append(Flag(name, "bound", f"the t interval reaches {t_lower[j]:.4g}, below zero, while the estimate "
                                         f"and all {count} used replicates are positive: the linearised interval "
                                         "crosses a bound the parameter respects"))
    if negative and t_upper[j] > 0:
        flags.append(Flag(name, "bound", f"the t interval reaches {t_upper[j]:.4g}, above zero, while the estimate "
                                         f"and all {count} used replicates are negative: the linearised interval "
                                         "crosses a bound the parameter respects"))
    bias = comparison.bias_ratio[j]
    if np.isfinite(bias) and abs(bias) > BIAS_LIMIT:
        flags.append(Flag(name, "bias", f"the bootstrap bias is {abs(bias):.2f} standard errors "
                                        f"({'above' if bias > 0 else 'below'} the estimate); above {BIAS_LIMIT} "
                                        "it is not negligible"))
    return flags
