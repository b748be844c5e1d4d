"""NIST StRD nonlinear regression files: reading the original ``.dat`` text.

Each file holds a description, the model written in NIST's notation, two starting points
("Start 1" far, "Start 2" near), certified parameter values and standard deviations, the
certified residual sum of squares, residual standard deviation and degrees of freedom, and the
data with the response in the first column.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError

_PARAMETER_ROW = re.compile(r"^\s*(b\d+)\s*=\s*(\S+)\s+(\S+)\s+(\S+)\s+(\S+)\s*$")
_CERTIFIED = {
    "ssr": "Residual Sum of Squares:",
    "residual_sd": "Residual Standard Deviation:",
    "dof": "Degrees of Freedom:",
    "observations": "Number of Observations:",
}


@dataclass(frozen=True)
class ReferenceProblem:
    """One StRD problem as published.

    Attributes:
        name: dataset name, e.g. "Misra1a".
        difficulty: "Lower", "Average" or "Higher".
        model_lines: the model as printed, one string per line (NIST notation).
        names: parameter names b1..bn.
        start1, start2: (n,) the two published starting points.
        certified: (n,) certified parameter values.
        certified_sd: (n,) certified standard deviations.
        ssr: certified residual sum of squares.
        residual_sd: certified residual standard deviation.
        dof: degrees of freedom.
        response: name of the response column ("y").
        predictors: names of the predictor columns ("x", or "x1", "x2").
        y: (m,) responses.
        x: (m,) or (k, m) predictors.
        data_text: (m, 1 + k) the data cells as written (exact decimals).
    """

    name: str
    difficulty: str
    model_lines: tuple[str, ...]
    names: tuple[str, ...]
    start1: np.ndarray
    start2: np.ndarray
    certified: np.ndarray
    certified_sd: np.ndarray
    ssr: float
    residual_sd: float
    dof: int
    response: str
    predictors: tuple[str, ...]
    y: np.ndarray
    x: np.ndarray
    data_text: tuple[tuple[str, ...], ...]

    @property
    def starts(self) -> np.ndarray:
        """(2, n): Start 1 and Start 2."""
        return np.vstack([self.start1, self.start2])


def read_reference(path: Path | str) -> ReferenceProblem:
    """Read one StRD ``.dat`` file.

    Raises:
        InputError: when the file is missing or a required block cannot be found.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: file not found")
    lines = path.read_text(encoding="latin-1").replace("\r\n", "\n").replace("\r", "\n").split("\n")

    def fail(what: str) -> InputError:
        return InputError(f"{path}: not a NIST StRD nonlinear regression file ({what} not found)")

    name_line = next((line for line in lines if line.startswith("Dataset Name:")), None)
    if name_line is None:
        raise fail("'Dataset Name:'")
    name = name_line.split(":", 1)[1].split()[0]
    difficulty = next((line.split()[0] for line in lines if "Level of Difficulty" in line), "")
    rows = [match.groups() for match in map(_PARAMETER_ROW.match, lines) if match]
    if not rows:
        raise fail("the table of starting and certified values")
    certified = {}
    for key, label in _CERTIFIED.items():
        line = next((line for line in lines if line.strip().startswith(label)), None)
        if line is None:
            raise fail(f"'{label}'")
        certified[key] = float(line.split(":", 1)[1])
    model_lines = _model_lines(lines) or ()
    if not model_lines:
        raise fail("the model")
    header_index = max((i for i, line in enumerate(lines) if line.startswith("Data:")), default=None)
    if header_index is None:
        raise fail("the data block")
    columns = lines[header_index].split(":", 1)[1].split()
    cells = tuple(tuple(line.split()) for line in lines[header_index + 1:] if line.strip())
    if not cells or any(len(row) != len(columns) for row in cells):
        raise InputError(f"{path}: data rows do not match the header columns {columns}")
    data = np.array([[float(cell) for cell in row] for row in cells])
    if len(data) != int(certified["observations"]):
        raise InputError(f"{path}: {len(data)} data rows, but the file announces {int(certified['observations'])}")
    predictors = tuple(columns[1:])
    return ReferenceProblem(
        name=name, difficulty=difficulty, model_lines=tuple(model_lines),
        names=tuple(row[0] for row in rows),
        start1=np.array([float(row[1]) for row in rows]), start2=np.array([float(row[2]) for row in rows]),
        certified=np.array([float(row[3]) for row in rows]), certified_sd=np.array([float(row[4]) for row in rows]),
        ssr=certified["ssr"], residual_sd=certified["residual_sd"], dof=int(certified["dof"]),
        response=columns[0], predictors=predictors, y=data[:, 0],
        x=data[:, 1] if len(predictors) == 1 else data[:, 1:].T.copy(), data_text=cells,
    )


def _model_lines(lines: list[str]) -> list[str]:
    """The lines of the model formula: after 'N Parameters (...)', up to the values table."""
    start = next((i for i, line in enumerate(lines) if line.startswith("Model:")), None)
    if start is None:
        return []
    body = []
    for line in lines[start + 1:]:
        if re.search(r"starting values", line, re.IGNORECASE):
            break
        body.append(line.strip())
    after_count = next((i for i, line in enumerate(body) if re.search(r"\d+\s+Parameters", line)), -1)
    return [line for line in body[after_count + 1:] if line]


@dataclass(frozen=True)
class NistFormula:
    """A StRD model rewritten in fitaudit's formula syntax.

    Attributes:
        response: the left-hand side, e.g. "y", or "log(y)" when the response is transformed.
        model: the right-hand side without the error term, e.g. "b1*(1-exp(-b2*x))", with
            constants defined on their own lines written in as their decimals.
        constants: name -> decimal text of each definition line (e.g. pi).
    """

    response: str
    model: str
    constants: dict[str, str]

    @property
    def transformed(self) -> bool:
        """True when the response is fitted through a function, e.g. log(y)."""
        return self.response.strip() != self.response_name

    @property
    def response_name(self) -> str:
        return _NAME.findall(self.response)[-1]


_DEFINITION = re.compile(r"^\s*([A-Za-z_]\w*)\s*=\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*$")
_ERROR_TERM = re.compile(r"\+\s*e\s*$")
_NAME = re.compile(r"[A-Za-z_]\w*")


def nist_formula(model_lines: tuple[str, ...] | list[str]) -> NistFormula:
    """Rewrite the model lines of a StRD file (NIST notation) as a formula.

    NIST writes function arguments in square brackets (``exp[-b1*x]``), powers as ``**``,
    may define a constant on a line of its own (``pi = 3.14159...``), continues long models on
    further lines (starting with ``+`` or after a trailing ``/``), ends with the error term
    ``+ e``, and may fit a function of the response (``log[y] = ...``).

    Raises:
        InputError: when no line of the form ``response = model`` is found.
    """
    constants: dict[str, str] = {}
    body: list[str] = []
    for line in model_lines:
        definition = _DEFINITION.match(line)
        if definition and not body:
            constants[definition.group(1)] = definition.group(2)
        else:
            body.append(line.strip())
    text = " ".join(body).replace("[", "(").replace("]", ")")
    response, equals, model = text.partition("=")
    if not equals or not response.strip() or not model.strip():
        raise InputError(f"model lines {list(model_lines)}: expected 'response = model + e'")
    model = _ERROR_TERM.sub("", model).strip()
    for name, value in constants.items():
        model = re.sub(rf"\b{name}\b", f"({value})", model)
    return NistFormula(response=" ".join(response.split()), model=" ".join(model.split()), constants=constants)


def log_relative_error(estimate: np.ndarray | float, certified: np.ndarray | float) -> np.ndarray:
    """LRE = −log10(|estimate − certified| / |certified|), clipped to [0, 11].

    The number of agreeing significant digits; 11 when they agree to all 11 published digits
    (or exactly), 0 for no agreement or a missing (non-finite) estimate.
    """
    estimate = np.asarray(estimate, dtype=float)
    certified = np.asarray(certified, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        relative = np.abs(estimate - certified) / np.abs(certified)
        value = -np.log10(relative)
    value = np.where(np.isfinite(estimate), value, 0.0)
    return np.clip(np.nan_to_num(value, nan=0.0, posinf=11.0), 0.0, 11.0)
