"""The optional sections of ``scenario.toml``: solver, sweep, bootstrap, identifiability, derivatives.

Each section is a frozen dataclass whose fields are the valid keys, with their defaults. Reading
a section checks every key and value and raises an ``InputError`` that names the file, the
section and the key, and for an unknown key the nearest valid one.
"""
from __future__ import annotations

import dataclasses
import difflib
import math
from dataclasses import dataclass
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
}


def _check_ranges(section: str, settings: Any, where: str) -> None:
    for (limited_section, key), (test, message) in LIMITS.items():
        if limited_section == section and not test(getattr(settings, key)):
            raise InputError(f"{where} {key}: {message}, got {getattr(settings, key)!r}")
