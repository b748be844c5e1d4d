"""What `fitaudit sweep` prints and how it exits, on the problem whose every start's fate is
derived by hand (tests/twin_optima.py)."""
from __future__ import annotations

import json

import numpy as np
import pytest

import twin_optima as twin
from audit.cli import main
from audit.inputs.scenario import load_scenario
from audit.sweep.result import CATEGORIES
from audit.sweep.run import search_space
from audit.sweep.starts import make_design


@pytest.fixture
def twin_folder(write_scenario):
    return write_scenario(twin.scenario_toml(), model=twin.MODEL, data=twin.DATA)


def derived_shares(folder, design_kind: str, points: int, step_factor: float) -> dict[str, float]:
    """Share of the design's starts in each category, from the derivation in twin_optima.py."""
    scenario = load_scenario(folder)
    design = make_design(search_space(scenario), design_kind, points, scenario.sweep.seed)
    starts = design.starts(0, design.count)
    assert twin.distance_to_thresholds(starts) > 1e-9  # no start on a boundary of the derivation
    labels = twin.expected_categories(starts, step_factor)
    return {label: float(np.mean(labels == label)) for label in CATEGORIES}


def table_rows(text: str) -> list[list[str]]:
    """Body rows of the per-step-factor table, as cells."""
    rows = [line for line in text.splitlines() if line.startswith("│ gn") or line.startswith("│ lm")]
    return [[cell.strip() for cell in row.strip("│").split("│")] for row in rows]


def share(cell: str) -> float:
    return 0.0 if cell == "—" else float(cell.rstrip("%")) / 100


def test_the_table_prints_the_derived_shares_for_both_solvers(twin_folder, tmp_path, capsys):
    argv = ["sweep", str(twin_folder), "--starts", "256", "--step-factors", "1,0.6", "--solver", "gn,lm",
            "--jobs", "1", "--resolution", "5", "-o", str(tmp_path)]
    assert main(argv) == 0
    text = capsys.readouterr().out
    assert main([*argv, "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert "256 starts (grid design) × 2 step factor(s)" in text
    rows = table_rows(text)
    headings = [cell.strip() for cell in next(line for line in text.splitlines()
                                              if line.startswith("┃") and "method" in line).strip("┃").split("┃")]
    assert [(row[0], row[1].rstrip(" *")) for row in rows] == [("gn", "1"), ("gn", "0.6"), ("lm", "1"), ("lm", "0.6")]
    by_setting = {(row["method"], row["step_factor"]): row for row in payload["by_step_factor"]}
    for row in rows:
        method, factor = row[0], float(row[1].rstrip(" *"))
        # A kind no run ended in has no column; its share reads as 0.
        printed = {label: share(row[headings.index(label.replace("_", " "))])
                   if label.replace("_", " ") in headings else 0.0 for label in CATEGORIES}
        stored = {label: by_setting[method, factor][f"{label}_share"] for label in CATEGORIES}
        # The table shows the JSON's shares to 0.1 %.
        assert printed == pytest.approx(stored, abs=5e-4)
        if method == "gn":
            # Reference: the hand derivation of every Gauss-Newton start (twin_optima.py).
            assert stored == pytest.approx(derived_shares(twin_folder, "grid", 256, factor), abs=1e-12)
    # The undamped step makes the band of b oscillate (derivation): 37.5 % of this grid.
    assert by_setting["gn", 1.0]["oscillating_share"] == pytest.approx(0.375)
    marked = [row for row in rows if row[1].endswith("*")]
    assert len(marked) == 1 and (marked[0][0], float(marked[0][1].rstrip(" *"))) == (
        payload["recommendation"]["method"], payload["recommendation"]["step_factor"])


@pytest.mark.parametrize("design", ["sobol", "lhs"])
def test_the_design_option_changes_the_starts(twin_folder, tmp_path, capsys, design):
    status = main(["sweep", str(twin_folder), "--design", design, "--starts", "200", "--step-factors", "1,0.6",
                   "--jobs", "1", "--resolution", "3", "-o", str(tmp_path), "--json"])
    payload = json.loads(capsys.readouterr().out)
    # Scattered starts leave no box of 100 starts around the best fit all reaching it: exit 1.
    assert status == 1 and payload["recommendation"]["safe_region"]["radius"] is None
    assert payload["design"]["kind"] == design and payload["design"]["points"] == 200
    for row in payload["by_step_factor"]:
        stored = {label: row[f"{label}_share"] for label in CATEGORIES}
        # Reference: the derivation applied to this design's own starts (grid shares differ).
        expected = derived_shares(twin_folder, design, 200, row["step_factor"])
        assert stored == pytest.approx(expected, abs=1e-12)
        assert expected != pytest.approx(derived_shares(twin_folder, "grid", 200, row["step_factor"]), abs=1e-3)


def test_exit_statuses(twin_folder, tmp_path, capsys):
    common = ["--step-factors", "1,0.6", "--jobs", "1", "--resolution", "3", "-o", str(tmp_path), "--json"]
    # 256 starts: the scenario's start (1, 0.5) lies in the safe region of the recommended setting.
    assert main(["sweep", str(twin_folder), "--starts", "256", *common]) == 0
    assert json.loads(capsys.readouterr().out)["recommendation"]["start"]["inside"] is True
    # 32 starts are too few for any safe region (at least 100 needed): exit 1.
    assert main(["sweep", str(twin_folder), "--starts", "32", *common]) == 1
    capsys.readouterr()
    assert main(["sweep", str(twin_folder), "--starts", "0", *common]) == 2
    assert "--starts: must be at least 1" in capsys.readouterr().err
