"""A scenario: ``scenario.toml`` + a CSV data file + a model (Python module or formula).

``load_scenario`` reads and checks everything up front and returns a ``Scenario`` whose
``problem`` is ready for the engine. Every problem found is an ``InputError`` with a one-line
message naming the file and the key, column or row; a starting value outside its range is only
a warning.
"""
from __future__ import annotations

import hashlib
import math
import tomllib
import unicodedata
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..engine.problem import Problem
from ..engine.time_limit import ModelTimeout, time_limit
from ..errors import InputError
from .bundled import SCENARIO_FILE, resolve_scenario
from .data_file import Measurements, read_measurements
from .formula import check_formula, compile_formula, formula_problem_parts
from .model_file import describe_model_error, load_model_module
from .settings import (SECTIONS, BootstrapSettings, DerivativeSettings, IdentifiabilitySettings, SolverSettings,
                       SweepSettings, VerdictSettings, nearest, read_section, reject_unknown)

TOP_KEYS = ("title", "description", "data", "model", "parameters", *SECTIONS)
DATA_KEYS = ("file", "x", "y", "sigma", "drop_nonfinite", "delimiter")
MODEL_KEYS = ("file", "function", "jacobian", "guess", "expression", "formula", "time_limit")
PARAMETER_KEYS = ("start", "range", "scale")
AXES = ("linear", "log")


@dataclass(frozen=True)
class Parameter:
    """One model parameter as the scenario declares it.

    Attributes:
        name: the model's argument name.
        start: the scenario's starting value.
        lower, upper: the range searched by the sweep (NaN when none is given).
        axis: "linear" or "log": how starts are spread over the range.
    """

    name: str
    start: float
    lower: float = math.nan
    upper: float = math.nan
    axis: str = "linear"

    @property
    def has_range(self) -> bool:
        return math.isfinite(self.lower) and math.isfinite(self.upper)

    @property
    def typical(self) -> float:
        """Typical magnitude: the larger end of the range, else the size of the start, else 1."""
        candidates = [abs(self.lower), abs(self.upper)] if self.has_range else [abs(self.start)]
        return max(candidates) if max(candidates) > 0 else 1.0


@dataclass(frozen=True)
class Scenario:
    """Everything ``fitaudit`` reads from one scenario folder."""

    path: Path
    title: str
    description: str
    problem: Problem
    parameters: tuple[Parameter, ...]
    solver: SolverSettings
    sweep: SweepSettings
    bootstrap: BootstrapSettings
    identifiability: IdentifiabilitySettings
    derivatives: DerivativeSettings
    data_path: Path
    model_path: Path | None
    x_names: tuple[str, ...]
    y_name: str
    sigma_name: str | None
    data_lines: np.ndarray
    fingerprint: str
    model_digest: str = ""
    warnings: tuple[str, ...] = field(default=())
    verdict: VerdictSettings = field(default_factory=VerdictSettings)

    @property
    def names(self) -> tuple[str, ...]:
        return self.problem.names

    @property
    def start(self) -> np.ndarray:
        """(n,) the scenario's starting values."""
        return np.array([parameter.start for parameter in self.parameters])


def scenario_file(path: Path | str) -> Path:
    """The ``scenario.toml`` of a folder, or the given file itself."""
    path = Path(path)
    return path / SCENARIO_FILE if path.is_dir() else path


def load_scenario(path: Path | str) -> Scenario:
    """Read, check and assemble a scenario from its folder, its TOML file or a bundled scenario's name.

    An existing path always wins over a bundled scenario of the same name.

    Raises:
        InputError: for any problem with the files, with a message naming file and key.
    """
    toml_path = scenario_file(resolve_scenario(path))
    if not toml_path.is_file():
        raise InputError(f"{toml_path}: scenario file not found")
    raw = toml_path.read_bytes()
    try:
        # A byte-order mark, as some editors write, is not part of the TOML.
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        line = raw[:error.start].count(b"\n") + 1
        raise InputError(f"{toml_path} line {line}: not UTF-8 text; save the file as UTF-8") from None
    try:
        config = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise InputError(f"{toml_path}: not valid TOML: {error}") from None
    source = str(toml_path)
    reject_unknown(config, TOP_KEYS, source)
    for required in ("data", "model", "parameters"):
        if not isinstance(config.get(required), dict):
            raise InputError(f"{source}: missing [{required}] table")
    folder = toml_path.parent
    data_table, model_table = config["data"], config["model"]
    reject_unknown(data_table, DATA_KEYS, f"{source} [data]")
    reject_unknown(model_table, MODEL_KEYS, f"{source} [model]")

    data_path = folder / _text(data_table, "file", source, "data", required=True)
    x_names = _columns(data_table.get("x"), source)
    y_name = _text(data_table, "y", source, "data", required=True)
    sigma_name = _text(data_table, "sigma", source, "data")
    drop = data_table.get("drop_nonfinite", False)
    if not isinstance(drop, bool):
        raise InputError(f"{source} [data] drop_nonfinite: must be true or false")
    measurements = read_measurements(data_path, list(x_names), y_name, sigma_name, drop,
                                     _text(data_table, "delimiter", source, "data"))
    warnings = list(measurements.warnings)

    model, jacobian, guess, names, model_path, formula, model_digest = _model(
        model_table, folder, source, x_names, tuple(config["parameters"]))
    table = config["parameters"]
    for name in table:
        if name not in names and unicodedata.normalize("NFKC", name) in names:
            # Python reads identifiers in NFKC form, so the model's argument is not spelled as written.
            raise InputError(f"{source} [parameters] '{name}': Python reads this name as "
                             f"'{unicodedata.normalize('NFKC', name)}' (identifiers are NFKC-normalised); "
                             "write it that way in [parameters]")
        if name not in names:
            raise InputError(f"{source} [parameters] '{name}' is not a parameter of the model"
                             f"{nearest(name, names)}; the model takes: {', '.join(names)}")
    for name in names:
        if name not in table:
            raise InputError(f"{source} [parameters]: the model takes '{name}' but it is not listed")
    for name, entry in table.items():
        if isinstance(entry, dict):
            reject_unknown(entry, PARAMETER_KEYS, f"{source} [parameters] {name}")
    guessed = _guessed_starts(guess, measurements, model_path, names, table, source)
    parameters = tuple(_parameter(name, table[name], guessed.get(name), source, warnings) for name in names)

    weights = None if measurements.sigma is None else 1.0 / measurements.sigma**2
    _check_squares_fit(measurements, data_path, y_name, sigma_name)
    if measurements.y.size < len(names):
        raise InputError(f"{data_path}: {measurements.y.size} usable observations for {len(names)} parameters; "
                         "at least as many observations as parameters are needed")
    if measurements.y.size == len(names):
        warnings.append(f"{data_path}: as many observations as parameters: no degrees of freedom for uncertainties")
    problem = Problem(model=model, x=measurements.x, y=measurements.y, names=names, jacobian=jacobian,
                      weights=weights, typical=np.array([p.typical for p in parameters]), formula=formula,
                      time_limit=_time_limit(model_table, source))
    _check_model_at_start(problem, np.array([p.start for p in parameters]), model_path or toml_path)

    sections = {name: read_section(name, config.get(name, {}), source) for name in SECTIONS}
    for pair in sections["sweep"].maps:
        for name in pair:
            if name not in names:
                raise InputError(f"{source} [sweep] maps: '{name}' is not a parameter{nearest(name, names)}")
    files = [raw, data_path.read_bytes(), model_digest.encode()]
    return Scenario(
        path=folder, title=str(config.get("title", folder.name)), description=str(config.get("description", "")),
        problem=problem, parameters=parameters, data_path=data_path, model_path=model_path,
        x_names=x_names, y_name=y_name, sigma_name=sigma_name, data_lines=measurements.lines,
        fingerprint=hashlib.sha256(b"\0".join(files)).hexdigest(), model_digest=model_digest,
        warnings=tuple(warnings), **sections,
    )


def _text(table: dict, key: str, source: str, section: str, required: bool = False) -> str | None:
    value = table.get(key)
    if value is None and required:
        raise InputError(f"{source} [{section}]: missing key '{key}'")
    if value is not None and not isinstance(value, str):
        raise InputError(f"{source} [{section}] {key}: must be a string, got {value!r}")
    return value


def _columns(value, source: str) -> tuple[str, ...]:
    if isinstance(value, str):
        return (value,)
    if isinstance(value, list) and value and all(isinstance(item, str) for item in value):
        return tuple(value)
    raise InputError(f"{source} [data] x: must be a column name or a list of column names")


def _model(table: dict, folder: Path, source: str, x_names: tuple[str, ...], parameter_names: tuple[str, ...]):
    """(model, jacobian, guess, names, model_path, formula, model_digest) from the [model] table.

    A formula model (``expression``) takes its parameters in the order of the [parameters]
    table and names each predictor by its [data] x column; its derivatives are exact. A Python
    model may state its formula as text (``formula``), checked here and compiled later by the
    derivative check.
    """
    expression = _text(table, "expression", source, "model")
    file = _text(table, "file", source, "model")
    if (expression is None) == (file is None):
        raise InputError(f"{source} [model]: give either 'file' (a Python module) or 'expression' (a formula)")
    if expression is not None:
        extra = [key for key in ("function", "jacobian", "guess", "formula") if key in table]
        if extra:
            raise InputError(f"{source} [model] {extra[0]}: only for a model file; with 'expression' the "
                             "formula is the model and its derivatives are derived exactly")
        compiled = compile_formula(expression, parameter_names, x_names, where=f"{source} [model] expression")
        parts = formula_problem_parts(compiled)
        return parts["model"], parts["jacobian"], None, compiled.parameter_names, None, parts["formula"], ""
    module = load_model_module(folder / file, _text(table, "function", source, "model") or "model",
                               _text(table, "jacobian", source, "model"), _text(table, "guess", source, "model"))
    formula = _text(table, "formula", source, "model")
    if formula is not None:
        check_formula(formula, module.parameter_names, x_names, where=f"{source} [model] formula")
    return (module.model, module.jacobian, module.guess, module.parameter_names, module.path, formula,
            module.digest)


def _time_limit(table: dict, source: str) -> float | None:
    """[model] time_limit: seconds one batched model call may take (absent: no limit)."""
    seconds = table.get("time_limit")
    if seconds is None:
        return None
    if isinstance(seconds, bool) or not isinstance(seconds, (int, float)) or not 0 < seconds < math.inf:
        raise InputError(f"{source} [model] time_limit: must be a positive number of seconds, got {seconds!r}")
    return float(seconds)


def _guessed_starts(guess, measurements, model_path, names, table, source) -> dict[str, float]:
    missing = [name for name in names if not _has_start(table[name])]
    if not missing:
        return {}
    if guess is None:
        raise InputError(f"{source} [parameters] {missing[0]}: no start given and the model has no guess function")
    try:
        values = guess(measurements.x, measurements.y)
    except (Exception, SystemExit) as error:
        raise InputError(describe_model_error(error, model_path, "while guessing starting values")) from None
    if not isinstance(values, dict) or any(name not in values for name in missing):
        raise InputError(f"{model_path}: the guess function must return a dict with a value for "
                         f"{', '.join(missing)}")
    return {name: float(values[name]) for name in missing}


def _has_start(entry) -> bool:
    return not isinstance(entry, dict) or "start" in entry


def _parameter(name: str, entry, guessed: float | None, source: str, warnings: list[str]) -> Parameter:
    where = f"{source} [parameters] {name}"
    if not isinstance(entry, dict):
        entry = {"start": entry}
    start = entry.get("start", guessed)
    if isinstance(start, bool) or not isinstance(start, (int, float)) or not math.isfinite(start):
        raise InputError(f"{where} start: must be a finite number, got {start!r}")
    axis = entry.get("scale", "linear")
    if axis not in AXES:
        raise InputError(f"{where} scale: must be 'linear' or 'log', got {axis!r}{nearest(str(axis), AXES)}")
    lower = upper = math.nan
    if "range" in entry:
        bounds = entry["range"]
        if (not isinstance(bounds, list) or len(bounds) != 2
                or not all(isinstance(b, (int, float)) and not isinstance(b, bool) and math.isfinite(b) for b in bounds)
                or not bounds[0] < bounds[1]):
            raise InputError(f"{where} range: must be [lower, upper] with finite lower < upper, got {bounds!r}")
        lower, upper = float(bounds[0]), float(bounds[1])
        if axis == "log" and lower <= 0:
            raise InputError(f"{where} range: a log scale needs a positive lower end, got {lower}")
        if not lower <= start <= upper:
            warnings.append(f"{where}: start {start} lies outside its range [{lower}, {upper}]")
    elif axis == "log" and start <= 0:
        raise InputError(f"{where}: a log scale needs a positive start, got {start}")
    return Parameter(name=name, start=float(start), lower=lower, upper=upper, axis=axis)


def _check_squares_fit(measurements: Measurements, data_path: Path, y_column: str, sigma_column: str | None) -> None:
    """Refuse observations whose sum of squares overflows double precision (about 1.8e308).

    A fit near such data would have a residual sum of squares of the same size, which cannot be
    formed; every run would end as a model error for what is only a matter of units.
    """
    weighted = measurements.y if measurements.sigma is None else measurements.y / measurements.sigma
    with np.errstate(over="ignore"):
        total = np.sum(weighted**2)
    if not np.isfinite(total):
        what = f"'{y_column}'" if sigma_column is None else f"'{y_column}' divided by '{sigma_column}'"
        raise InputError(f"{data_path}: column {what} reaches {np.max(np.abs(weighted)):.3g}; its sum of squares "
                         "overflows double precision, so no fit can be judged; rescale the column (other units)")


def _check_model_at_start(problem: Problem, start: np.ndarray, path: Path) -> None:
    """Evaluate the model (and hand-derived Jacobian) once at the start and explain failures."""
    point = start[None, :]
    columns = [point[:, j : j + 1] for j in range(problem.n_params)]
    expected = (1, problem.n_obs)
    for role, function in (("model", problem.model), ("jacobian", problem.jacobian)):
        if function is None:
            continue
        try:
            with np.errstate(all="ignore"), time_limit(problem.time_limit):
                output = function(problem.x, *columns)
        except ModelTimeout:
            raise InputError(f"{path}: {function.__name__}() did not return within [model] time_limit = "
                             f"{problem.time_limit:g} s at the starting values") from None
        except (Exception, SystemExit) as error:
            raise InputError(describe_model_error(error, path, "evaluating at the starting values")) from None
        parts = list(output.values()) if isinstance(output, dict) else (
            [output] if role == "model" else list(output) if isinstance(output, (list, tuple)) else [output])
        if role == "jacobian" and len(parts) != problem.n_params:
            raise InputError(f"{path}: jacobian returned {len(parts)} arrays for {problem.n_params} parameters "
                             f"at the starting values ({function.__name__}()); expected one per parameter")
        for part in parts:
            array = np.asarray(part)
            if array.dtype.kind not in "biuf":
                # Complex values would lose their imaginary part silently; strings and objects fail later.
                raise InputError(f"{path}: {function.__name__}() returned {type(part).__name__} of dtype "
                                 f"{array.dtype} at the starting values; expected real numbers")
            try:
                if array.ndim == 1 and array.shape[0] != problem.n_obs:
                    raise ValueError("one value per run, not per observation")
                np.broadcast_to(array, expected)
            except ValueError:
                raise InputError(
                    f"{path}: {function.__name__}() returned shape {array.shape} at the starting values; expected "
                    f"{expected} (runs, observations), i.e. one value per observation for each run") from None
    values = problem.predict(point)[0]
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        raise InputError(f"{path}: the model gives non-finite values at the starting values for "
                         f"{bad.size} of {problem.n_obs} observations (first at observation {bad[0] + 1})")
    if problem.jacobian is not None:
        derivatives = problem.derivatives(point)[0]
        broken = [name for name, row in zip(problem.names, derivatives) if not np.all(np.isfinite(row))]
        if broken:
            raise InputError(f"{path}: the jacobian gives non-finite values at the starting values "
                             f"for {', '.join(broken)}")


def solutions_fingerprint(scenario: Scenario) -> str:
    """A digest of what decides a scenario's solutions: data, model, parameter ranges, solver.

    Unlike ``Scenario.fingerprint`` (every byte of the TOML), settings of other stages (the
    bootstrap's seed, the sweep's number of points) do not change it, so a sweep stays the
    reference for the other stages until the problem itself changes.
    """
    problem = scenario.problem
    digest = hashlib.sha256()
    for array in (problem.x, problem.y, problem.weights):
        digest.update(b"-" if array is None else np.ascontiguousarray(array, dtype=float).tobytes())
        digest.update(b"\0")
    parts = [scenario.model_digest.encode(), getattr(problem.model, "__name__", "").encode(),
             (problem.formula or "").encode(),
             repr([(p.name, p.lower, p.upper, p.axis) for p in scenario.parameters]).encode(),
             repr(sorted(vars(scenario.solver).items())).encode()]
    for part in parts:
        digest.update(part)
        digest.update(b"\0")
    return digest.hexdigest()
