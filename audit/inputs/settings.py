"""The optional sections of ``scenario.toml``: solver, sweep, bootstrap, identifiability, derivatives, verdict.

Each section is a frozen dataclass whose fields are the valid keys, with their defaults. Reading
a section checks every key and value and raises an ``InputError`` that names the file, the
section and the key, and for an unknown key the nearest valid one.
"""
from __future__ import annotations

import dataclasses
import difflib
import math
from dataclasses import dataclass, field
from typing import Any

from ..errors import InputError

DEFAULT_SEED = 20261201


@dataclass(frozen=True)
class SolverSettings:
    """[solver]: how a single fit is run."""

    method: str = "gn"
    step_factors: tuple[float, ...] = (1.0, 0.5, 0.25, 0.1)
    tolerance: float = 1e-8
    max_iterations: int = 200

    def fit_options(self) -> dict:
        """The keyword arguments of the engine's best-fit helpers (``single_fit.best_from_start``)."""
        return dict(step_factors=self.step_factors, method=self.method, tol=self.tolerance,
                    max_iter=self.max_iterations)


@dataclass(frozen=True)
class SweepSettings:
    """[sweep]: the multistart design and the basin maps."""

    design: str = "sobol"
    points: int = 4096
    maps: tuple[tuple[str, str], ...] = ()
    resolution: int = 101
    methods: tuple[str, ...] = ("gn",)
    seed: int = DEFAULT_SEED


@dataclass(frozen=True)
class BootstrapSettings:
    """[bootstrap]: resampling scheme and interval level."""

    method: str = "residual"
    samples: int = 2000
    seed: int = DEFAULT_SEED
    confidence: float = 0.95
    wild_weights: str = "rademacher"
    leverage_adjusted: bool = False


@dataclass(frozen=True)
class IdentifiabilitySettings:
    """[identifiability]: profile-likelihood grid and the thresholds for flags.

    profile_points: grid points per parameter profile (the estimate and both sides);
    profile_reach: how far each side reaches, in asymptotic half-widths (clipped to the range);
    collinearity_limit: subsets whose collinearity index reaches it count as not identifiable;
    random_points: points drawn in the ranges for the structural (rank) check, with ``seed``.
    """

    profile_points: int = 41
    confidence: float = 0.95
    strong_correlation: float = 0.95
    profile_reach: float = 4.0
    collinearity_limit: float = 15.0
    random_points: int = 8
    seed: int = DEFAULT_SEED


@dataclass(frozen=True)
class DerivativeSettings:
    """[derivatives]: where hand-derived partial derivatives are checked."""

    points: int = 20
    seed: int = DEFAULT_SEED


def _threshold(default: float, meaning: str) -> float:
    return field(default=default, metadata={"meaning": meaning})


@dataclass(frozen=True)
class VerdictSettings:
    """[verdict]: the thresholds of the verdict's checks, the one table of them (``report.verdict``).

    Each field is a threshold: its default and, in the field's metadata, what it means. Shares
    are fractions of starts or refits (0 to 1); a check warns at its ``*_warn`` value and fails
    at its ``*_fail`` value.
    """

    same_ssr_relative: float = _threshold(
        1e-6, "a fit counts as reaching the best one when its SSR exceeds the best SSR by at most this share")
    basin_share_warn: float = _threshold(
        0.5, "share of sweep starts reaching the best fit at the recommended step factor below which the check warns")
    basin_share_fail: float = _threshold(
        0.1, "share of sweep starts reaching the best fit at the recommended step factor below which it fails")
    oscillation_share_warn: float = _threshold(
        0.05, "share of sweep starts oscillating at the recommended step factor above which the check warns")
    oscillation_share_fail: float = _threshold(
        0.25, "share of sweep starts oscillating at the recommended step factor above which it fails")
    divergence_share_warn: float = _threshold(
        0.05, "share of sweep starts diverging at the recommended step factor above which the check warns")
    divergence_share_fail: float = _threshold(
        0.25, "share of sweep starts diverging at the recommended step factor above which it fails")
    rival_ssr_ratio: float = _threshold(
        1.1, "another optimum (not the best fit's curve) with SSR at most this multiple of the best SSR warns: "
             "the data barely prefer the best fit")
    bootstrap_failure_warn: float = _threshold(
        0.025, "share of bootstrap refits not reaching the best fit's solution above which the check warns "
               "(one tail of a 95 % interval)")
    bootstrap_failure_fail: float = _threshold(
        0.1, "share of bootstrap refits not reaching the best fit's solution above which it fails")
    interval_ratio_warn: float = _threshold(
        1.5, "bootstrap or profile interval wider or narrower than the asymptotic one by more than this factor warns")
    interval_ratio_fail: float = _threshold(
        3.0, "bootstrap or profile interval wider or narrower than the asymptotic one by more than this factor fails")
    condition_warn: float = _threshold(
        30.0, "condition number of the column-scaled Jacobian above which the check warns (Belsley's 'moderate "
              "to strong' collinearity)")
    condition_fail: float = _threshold(
        1000.0, "condition number of the column-scaled Jacobian above which it fails")
    correlation_warn: float = _threshold(
        0.95, "largest |correlation| between two parameter estimates above which the check warns")
    correlation_fail: float = _threshold(
        0.999, "largest |correlation| between two parameter estimates above which it fails")
    residual_warn_level: float = _threshold(
        0.05, "p-value of a residual check below which it warns")
    residual_fail_level: float = _threshold(
        0.001, "p-value of a residual check below which it fails")

    @classmethod
    def table(cls) -> list[tuple[str, float, str]]:
        """(name, default, meaning) of every threshold, in order: the table the README shows."""
        return [(item.name, item.default, item.metadata["meaning"]) for item in dataclasses.fields(cls)]


CHOICES: dict[tuple[str, str], tuple[str, ...]] = {
    ("solver", "method"): ("gn", "lm"),
    ("sweep", "design"): ("grid", "sobol", "lhs"),
    ("bootstrap", "method"): ("residual", "wild", "pairs"),
    ("bootstrap", "wild_weights"): ("rademacher", "mammen"),
}

SECTIONS: dict[str, type] = {
    "solver": SolverSettings,
    "sweep": SweepSettings,
    "bootstrap": BootstrapSettings,
    "identifiability": IdentifiabilitySettings,
    "derivatives": DerivativeSettings,
    "verdict": VerdictSettings,
}


def nearest(name: str, valid: list[str] | tuple[str, ...]) -> str:
    """' (did you mean 'x'?)' for the closest valid name, or '' when none is close."""
    match = difflib.get_close_matches(name, list(valid), n=1, cutoff=0.5)
    return f" (did you mean '{match[0]}'?)" if match else ""


def reject_unknown(table: dict, valid: list[str] | tuple[str, ...], where: str) -> None:
    """Raise for the first key of ``table`` not in ``valid``, naming the nearest valid key."""
    for key in table:
        if key not in valid:
            raise InputError(f"{where}: unknown key '{key}'{nearest(key, valid)}; valid keys: {', '.join(valid)}")


def read_section(section: str, table: Any, source: str):
    """Build the settings dataclass of ``section`` from its TOML table, checking every value."""
    cls = SECTIONS[section]
    where = f"{source} [{section}]"
    if not isinstance(table, dict):
        raise InputError(f"{where}: must be a table")
    fields = {field.name: field for field in dataclasses.fields(cls)}
    reject_unknown(table, list(fields), where)
    values = {name: _convert(section, name, table[name], fields[name].default, where)
              for name in table}
    settings = cls(**values)
    _check_ranges(section, settings, where)
    return settings


def _convert(section: str, key: str, value: Any, default: Any, where: str) -> Any:
    label = f"{where} {key}"
    if isinstance(default, bool):
        if not isinstance(value, bool):
            raise InputError(f"{label}: must be true or false, got {value!r}")
        return value
    if isinstance(default, int):
        if isinstance(value, bool) or not isinstance(value, int):
            raise InputError(f"{label}: must be a whole number, got {value!r}")
        return value
    if isinstance(default, float):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise InputError(f"{label}: must be a number, got {value!r}")
        return float(value)
    if isinstance(default, str):
        choices = CHOICES.get((section, key))
        if not isinstance(value, str) or (choices and value not in choices):
            hint = nearest(str(value), choices) if choices else ""
            raise InputError(f"{label}: must be one of {', '.join(choices or ('a string',))}, got {value!r}{hint}")
        return value
    if key == "maps":
        if not isinstance(value, list) or not all(
                isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str) for p in pair) for pair in value):
            raise InputError(f'{label}: must be a list of parameter-name pairs, e.g. [["rate", "delay"]]')
        return tuple(tuple(pair) for pair in value)
    if key == "methods":
        if not isinstance(value, list) or not value or any(item not in ("gn", "lm") for item in value):
            raise InputError(f'{label}: must be a non-empty list drawn from "gn" and "lm", got {value!r}')
        return tuple(value)
    if key == "step_factors":
        if not isinstance(value, list) or not value or not all(
                isinstance(item, (int, float)) and not isinstance(item, bool) and 0 < item <= 1 for item in value):
            raise InputError(f"{label}: must be a non-empty list of numbers in (0, 1], got {value!r}")
        if len(set(value)) != len(value):
            raise InputError(f"{label}: each step factor may appear only once, got {value!r}")
        return tuple(float(item) for item in value)
    raise AssertionError(f"no conversion for {section}.{key}")


#: Largest accepted sizes. Each bounds memory or time that grows with it (a (runs, iterations)
#: history, an r × r map, samples × observations replicates); each is far above what an audit
#: needs, so reaching one is a typo (1e9 for 1e3), refused before anything is allocated.
MOST_ITERATIONS = 10_000
MOST_SWEEP_POINTS = 100_000_000
MOST_RESOLUTION = 1001
MOST_SAMPLES = 1_000_000
MOST_PROFILE_POINTS = 1001
MOST_RANDOM_POINTS = 10_000
MOST_DERIVATIVE_POINTS = 10_000


def _between(low: int, high: int) -> tuple[Any, str]:
    return (lambda v: low <= v <= high, f"must be between {low} and {high}")


_SEED = (lambda v: v >= 0, "must be a whole number ≥ 0")

#: Value checks beyond the type: (section, key) -> (test, what the value must be).
LIMITS: dict[tuple[str, str], tuple[Any, str]] = {
    # inf or NaN would make every first step "converge"; 1 or more accepts any step.
    ("solver", "tolerance"): (lambda v: 0 < v < 1, "must be a positive number below 1"),
    ("solver", "max_iterations"): _between(1, MOST_ITERATIONS),
    ("sweep", "points"): _between(1, MOST_SWEEP_POINTS),
    ("sweep", "resolution"): _between(2, MOST_RESOLUTION),
    ("sweep", "seed"): _SEED,
    ("bootstrap", "samples"): _between(2, MOST_SAMPLES),
    ("bootstrap", "confidence"): (lambda v: 0 < v < 1, "must lie between 0 and 1"),
    ("bootstrap", "seed"): _SEED,
    ("identifiability", "profile_points"): _between(5, MOST_PROFILE_POINTS),
    ("identifiability", "confidence"): (lambda v: 0 < v < 1, "must lie between 0 and 1"),
    ("identifiability", "strong_correlation"): (lambda v: 0 < v < 1, "must lie between 0 and 1"),
    ("identifiability", "profile_reach"): (lambda v: 1 < v < math.inf,
                                              "must be a finite number above 1 (asymptotic half-widths)"),
    ("identifiability", "collinearity_limit"): (lambda v: 1 < v < math.inf, "must be a finite number above 1"),
    ("identifiability", "random_points"): _between(1, MOST_RANDOM_POINTS),
    ("identifiability", "seed"): _SEED,
    ("derivatives", "points"): _between(1, MOST_DERIVATIVE_POINTS),
    ("derivatives", "seed"): _SEED,
    **{("verdict", item.name): ((lambda v: 0 <= v <= 1), "must lie between 0 and 1")
       for item in dataclasses.fields(VerdictSettings) if "share" in item.name or "correlation" in item.name
       or item.name.startswith("residual_")},
    **{("verdict", item.name): ((lambda v: v >= 1), "must be at least 1")
       for item in dataclasses.fields(VerdictSettings) if "ratio" in item.name or "condition" in item.name},
    ("verdict", "same_ssr_relative"): (lambda v: 0 <= v < 1, "must lie in [0, 1)"),
}
#: Verdict thresholds that come in pairs: (warn, fail, True when fail lies above warn).
VERDICT_PAIRS = (("basin_share", False), ("oscillation_share", True), ("divergence_share", True),
                 ("bootstrap_failure", True), ("interval_ratio", True), ("condition", True),
                 ("correlation", True), ("residual", False))


def _check_ranges(section: str, settings: Any, where: str) -> None:
    for (limited_section, key), (test, message) in LIMITS.items():
        if limited_section == section and not test(getattr(settings, key)):
            raise InputError(f"{where} {key}: {message}, got {getattr(settings, key)!r}")
    if section == "verdict":
        for stem, rising in VERDICT_PAIRS:
            suffix = "_level" if stem == "residual" else ""
            warn, fail = f"{stem}_warn{suffix}", f"{stem}_fail{suffix}"
            low, high = (warn, fail) if rising else (fail, warn)
            if getattr(settings, low) > getattr(settings, high):
                raise InputError(f"{where} {fail}: must not be {'below' if rising else 'above'} {warn} "
                                 f"({getattr(settings, fail)!r} vs {getattr(settings, warn)!r})")
