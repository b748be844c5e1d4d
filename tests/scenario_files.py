"""Scenario folders for the tests: the text of a scenario.toml from its sections, a CSV from columns,
and the folder written from them. The defaults are the small decay most tests fit:
amplitude·exp(−rate·t) through six rounded observations.

Test scenarios differ only in what their sections hold (columns, model keys, parameter tables,
sweep or bootstrap settings), so one writer of the layout serves them all and each test states
just its own values.
"""
from __future__ import annotations

import textwrap
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

DECAY_MODEL = """
import numpy as np

def model(t, amplitude, rate):
    return amplitude * np.exp(-rate * t)
"""
#: amplitude·exp(−rate·t) near amplitude 5, rate 0.5, rounded to one decimal; only builds problems.
DECAY_DATA = "t,signal\n0,5.0\n1,3.1\n2,1.8\n3,1.1\n4,0.7\n5,0.4\n"
MODEL_FILE = {"file": "model.py"}
DECAY_PARAMETERS = {"amplitude": {"start": 4.0, "range": [0.1, 10.0]},
                    "rate": {"start": 0.5, "range": [0.01, 5.0]}}
#: The same with the rate swept on a log axis.
LOG_RATE_PARAMETERS = {**DECAY_PARAMETERS, "rate": {**DECAY_PARAMETERS["rate"], "scale": "log"}}


def data_columns(x: str, y: str, **more: object) -> dict[str, object]:
    """The [data] table of a data.csv with predictor ``x`` and observations ``y`` (and ``more`` keys)."""
    return {"file": "data.csv", "x": x, "y": y, **more}


DECAY_COLUMNS = data_columns("t", "signal")


def toml_value(value: object) -> str:
    """``value`` (a Python string, number, bool, list or dict) as TOML. Strings go between double
    quotes as written, so a TOML escape in them (``\\u001b``) is read as the character it stands
    for, which the tests of hostile titles need; numbers are written by ``repr``."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{key} = {toml_value(entry)}" for key, entry in value.items()) + " }"
    if isinstance(value, Sequence):
        return "[" + ", ".join(toml_value(entry) for entry in value) + "]"
    return repr(value)


def scenario_toml(*, title: str | None = None, data: Mapping[str, object] = DECAY_COLUMNS,
                  model: Mapping[str, object] = MODEL_FILE, parameters: Mapping[str, object] = DECAY_PARAMETERS,
                  **sections: Mapping[str, object]) -> str:
    """The text of a scenario.toml: the title, then [data], [model], [parameters] and ``sections``
    (e.g. ``sweep={"points": 64}``) in that order, one ``key = value`` line per entry."""
    lines = [] if title is None else [f"title = {toml_value(title)}"]
    for name, table in {"data": data, "model": model, "parameters": parameters, **sections}.items():
        lines += [f"[{name}]", *(f"{key} = {toml_value(value)}" for key, value in table.items())]
    return "\n".join(lines) + "\n"


def csv_text(header: str, *columns: Iterable[object], formats: str | Sequence[str] = ".17g") -> str:
    """A CSV of ``columns`` under ``header``, each number written with its format spec (one for
    all columns or one per column; ".17g" keeps every bit of a double)."""
    specs = [formats] * len(columns) if isinstance(formats, str) else list(formats)
    return header + "\n" + "".join(",".join(map(format, row, specs)) + "\n" for row in zip(*columns))


def write_scenario_folder(folder: Path, toml: str, model: str | None = None, data: str | None = None) -> Path:
    """Write scenario.toml and, where given, model.py and data.csv into ``folder`` (created if
    missing); texts are dedented (the data also loses its leading blank lines), so they may be
    indented in a test."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "scenario.toml").write_text(textwrap.dedent(toml))
    if model is not None:
        (folder / "model.py").write_text(textwrap.dedent(model))
    if data is not None:
        (folder / "data.csv").write_text(textwrap.dedent(data).lstrip())
    return folder
