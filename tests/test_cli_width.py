"""Every command's tables at 80 columns: no cell cut short with '…', and the numbers whole.

The demo scenario is rendered through a recording console 80 columns wide, the width of a
default terminal (common practice), and the numbers are read back from the rendered text."""
from __future__ import annotations

import csv
import importlib
import re

import numpy as np
import pytest
from rich.console import Console
from scipy.optimize import least_squares

import audit.cli.common as common
from audit.cli import main
from conftest import PROJECT_ROOT

SCENARIO = PROJECT_ROOT / "scenarios" / "probe-cooling"
COMMANDS = {
    "fit": [],
    "sweep": ["--starts", "64", "--resolution", "5", "--jobs", "1"],
    "bootstrap": ["--samples", "40", "--jobs", "1"],
    "identify": ["--profile-points", "9", "--jobs", "1"],
    "derivatives": ["--check-points", "2"],
}
NUMBER = re.compile(r"[-+]?\d+(?:\.\d+)?(?:e[-+]?\d+)?")


@pytest.fixture(scope="module")
def scipy_fit() -> dict[str, float]:
    """The probe-cooling fit by scipy.optimize.least_squares on the sigma-weighted residuals."""
    with open(SCENARIO / "data.csv") as handle:
        rows = np.array([[float(value) for value in row.values()] for row in csv.DictReader(handle)])
    time, temperature, sd = rows.T

    def residuals(p):
        return (temperature - (p[0] + p[1] * np.exp(-time / p[2]))) / sd

    solution = least_squares(residuals, [20.0, 60.0, 100.0], xtol=1e-14, ftol=1e-14, gtol=1e-14).x
    return dict(zip(("T_env", "dT", "tau"), solution))


def render(monkeypatch, tmp_path, command: str) -> str:
    console = Console(width=80, record=True, highlight=False, emoji=False, force_terminal=False)
    for module in (common, importlib.import_module(f"audit.cli.{command}")):
        monkeypatch.setattr(module, "out", console)
    out = [] if command == "fit" else ["-o", str(tmp_path / "out")]
    status = main([command, str(SCENARIO), *COMMANDS[command], *out])
    assert status in (0, 1)
    return console.export_text()


@pytest.mark.parametrize("command", list(COMMANDS))
def test_tables_fit_80_columns_with_every_number_whole(monkeypatch, tmp_path, scipy_fit, command):
    text = render(monkeypatch, tmp_path, command)
    assert not re.search(r"\S…", text), text
    assert all(len(line) <= 80 for line in text.splitlines() if line.lstrip()[:1] in "┃│┏┡└")
    # In every table whose second column is the estimate, a parameter's row holds it whole (8
    # significant digits of the audited fit): equal to scipy.optimize.least_squares' solution
    # to 1e-6 relative.
    found = {name: [] for name in scipy_fit}
    estimate_table = False
    for line in text.splitlines():
        if line.startswith("┏"):
            estimate_table = False
        elif line.startswith("┃") and "estimate" in line.split("┃")[2]:
            estimate_table = True
        elif estimate_table and line.startswith("│"):
            cells = [cell.strip() for cell in line.split("│")]
            if cells[1] in found and cells[2]:
                found[cells[1]].append(float(cells[2]))
    for name, value in scipy_fit.items():
        if command in ("fit", "bootstrap", "identify"):
            assert found[name], f"no row for {name}"
        assert found[name] == pytest.approx([value] * len(found[name]), rel=1e-6), (name, text)
