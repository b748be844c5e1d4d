"""A ready-to-edit scenario for ``fitaudit new``: a commented scenario.toml, a model and a small CSV.

Without a formula the model is a Python file (an exponential decay with its hand-derived
Jacobian, to be replaced by the user's model); with a formula, the formula is the model and its
names other than the predictor become the parameters. Either way the CSV is made from the
model itself with a little noise from a fixed seed, so that the new scenario fits at once.
"""
from __future__ import annotations

import ast
from pathlib import Path

import numpy as np

from ..errors import InputError
from .formula import compile_formula
from .formula_syntax import CONSTANTS, FUNCTIONS

#: The Python template's model as a formula (its example data are made from it) and the values used.
PYTHON_FORMULA = "amplitude * exp(-rate * x) + offset"
PYTHON_PARAMETERS = {"amplitude": 10.0, "rate": 0.5, "offset": 1.0}
#: A formula's parameters all start at 1, searched over [0.1, 3] (edit the ranges of parameters that
#: may be negative or larger; a generic symmetric range lets exp(-k * x) overflow from most starts).
FORMULA_START, FORMULA_RANGE = 1.0, (0.1, 3.0)
#: The example data: 21 predictor values from 0.5 to 12.5, six time constants of the Python template's decay
#: (so its rate and offset are told apart; positive, so log and sqrt of x stay finite).
EXAMPLE_X = np.linspace(0.5, 12.5, 21)
#: Noise of the example data relative to the curve's spread; a fixed seed gives the same files everywhere.
NOISE_SHARE, NOISE_SEED = 0.01, 20261210

PYTHON_MODEL = '''"""The model of this scenario. Replace the example (an exponential decay) by your own.

fitaudit calls model() with x of shape (m,) (or (k, m) for k predictors: x[0], x[1], ...) and
every parameter as a column of shape (B, 1), so plain numpy broadcasting fits B runs at once.
"""
import numpy as np


def model(x, amplitude, rate, offset):
    return amplitude * np.exp(-rate * x) + offset


def jacobian(x, amplitude, rate, offset):
    """Optional: the partial derivatives, one array per parameter in the model's order.

    Delete this function (and the 'jacobian' line of scenario.toml) to use central differences;
    keep it and 'fitaudit derivatives' checks it against numeric derivatives.
    """
    decay = np.exp(-rate * x)
    return [decay, -amplitude * x * decay, np.ones_like(decay)]
'''

TOML_HEAD = '''title = "{title}"
description = """
What was measured, how, and why the fit matters (one paragraph)."""

[data]
file = "data.csv"          # CSV with a header row
x = "x"                    # the predictor column, or a list of columns: x = ["T_K", "conc"]
y = "y"                    # the measured column
# sigma = "sd_y"           # per-row standard deviation: weights 1/sigma²
# drop_nonfinite = true    # drop rows with empty or non-finite cells (each is named in a warning)

[model]
'''

TOML_PYTHON_MODEL = '''file = "model.py"
function = "model"
jacobian = "jacobian"      # optional: hand-derived partial derivatives (checked by 'fitaudit derivatives')
'''

TOML_FORMULA_MODEL = '''expression = "{formula}"   # exact derivatives by computer algebra
'''

TOML_TAIL = '''
[parameters]               # every parameter of the model: a start, and a range for the sweep
{parameters}

[solver]
method = "gn"              # gn: Gauss-Newton with a step factor; lm: Levenberg-Marquardt
step_factors = [1.0, 0.5, 0.25]

[sweep]
points = 1024              # starting guesses spread over the ranges

[bootstrap]
method = "residual"        # residual | wild (errors that change size) | pairs
samples = 1000
'''


def formula_parameters(formula: str, predictor: str) -> tuple[str, ...]:
    """The names in ``formula`` other than ``predictor``, functions and constants, in order of appearance.

    Raises:
        InputError: for a formula that cannot be parsed or uses what formulas may not.
    """
    try:
        tree = ast.parse(formula, mode="eval")
    except SyntaxError:
        compile_formula(formula, (), (predictor,), where="--formula")   # raises the marked syntax error
        raise
    names = [node.id for node in sorted((node for node in ast.walk(tree) if isinstance(node, ast.Name)),
                                        key=lambda node: node.col_offset)]
    reserved = {predictor, *FUNCTIONS, *CONSTANTS}
    return tuple(dict.fromkeys(name for name in names if name not in reserved))


def scenario_texts(title: str, formula: str | None = None) -> dict[str, str]:
    """File name -> text of a new scenario (see the module docstring).

    Raises:
        InputError: for a formula that cannot be compiled, has no parameter, or is not finite
            at the example data with every parameter at its start.
    """
    if formula is None:
        names, values = tuple(PYTHON_PARAMETERS), tuple(PYTHON_PARAMETERS.values())
        curve = _example_curve(PYTHON_FORMULA, names, values)
        model_part, files = TOML_PYTHON_MODEL, {"model.py": PYTHON_MODEL}
        starts = {name: 0.8 * value for name, value in zip(names, values)}
        ranges = {name: (0.1 * value, 3.0 * value) for name, value in zip(names, values)}
    else:
        names = formula_parameters(formula, "x")
        if not names:
            raise InputError(f"--formula {formula!r}: no parameter found; the predictor is called x")
        curve = _example_curve(formula, names, (FORMULA_START,) * len(names))
        if not np.all(np.isfinite(curve)):
            raise InputError(f"--formula {formula!r}: not finite at x from {EXAMPLE_X[0]:g} to {EXAMPLE_X[-1]:g} "
                             f"with every parameter {FORMULA_START:g}; write data.csv and the starts yourself")
        model_part, files = TOML_FORMULA_MODEL.format(formula=formula.replace('"', "'")), {}
        starts = {name: FORMULA_START for name in names}
        ranges = {name: FORMULA_RANGE for name in names}
    width = max(len(name) for name in starts)
    parameters = "\n".join(f"{name:<{width}} = {{ start = {starts[name]:g}, range = [{ranges[name][0]:g}, "
                           f"{ranges[name][1]:g}] }}" for name in starts)
    files["scenario.toml"] = (TOML_HEAD.format(title=title) + model_part + TOML_TAIL.format(parameters=parameters))
    files["data.csv"] = _example_data(curve)
    return files


def _example_curve(formula: str, names: tuple[str, ...], values: tuple[float, ...]) -> np.ndarray:
    """(m,) the formula at EXAMPLE_X with the given parameter values (NaN where not finite)."""
    compiled = compile_formula(formula, names, ("x",), where="--formula")
    columns = [np.full((1, 1), value) for value in values]
    with np.errstate(all="ignore"):
        return np.broadcast_to(compiled.model(EXAMPLE_X, *columns), (1, EXAMPLE_X.size))[0].astype(float)


def _example_data(curve: np.ndarray) -> str:
    spread = float(np.ptp(curve)) or max(float(np.max(np.abs(curve))), 1.0)
    noise = np.random.default_rng(NOISE_SEED).normal(0.0, NOISE_SHARE * spread, curve.size)
    rows = [f"{x:.4g},{y:.6g}" for x, y in zip(EXAMPLE_X, curve + noise)]
    return "x,y\n" + "\n".join(rows) + "\n"


def write_new_scenario(folder: Path, formula: str | None = None) -> list[Path]:
    """Write a new scenario into ``folder`` (created if needed) and return the files written.

    Raises:
        InputError: when ``folder`` exists and is not an empty folder (nothing is overwritten),
            or for a formula ``scenario_texts`` refuses.
    """
    folder = Path(folder)
    if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
        raise InputError(f"{folder}: already exists and is not empty; 'fitaudit new' never overwrites, "
                         "choose a new folder")
    texts = scenario_texts(folder.resolve().name.replace('"', "'"), formula)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        written = []
        for name, text in texts.items():
            (folder / name).write_text(text, encoding="utf-8")
            written.append(folder / name)
    except OSError as error:
        raise InputError(f"{folder}: cannot write the scenario there: {error.strerror}") from None
    return written
