"""`fitaudit list`, `fitaudit new`, bundled scenarios by name, and the package listing that ships them."""
from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
from gallery_audit import SCENARIOS, bundled_names
from scipy.optimize import least_squares

from audit.cli import main
from audit.inputs.scenario import load_scenario

PROJECT = Path(__file__).resolve().parents[1]


def run(capsys, *argv: str) -> tuple[int, str, str]:
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_list_names_every_bundled_folder_with_its_title(capsys):
    status, out, _ = run(capsys, "list")
    lines = out.strip().splitlines()
    folders = sorted(path.name for path in SCENARIOS.iterdir() if (path / "scenario.toml").is_file())
    assert status == 0 and len(folders) >= 8
    assert [line.split()[0] for line in lines] == folders
    for line, folder in zip(lines, folders):
        title = tomllib.loads((SCENARIOS / folder / "scenario.toml").read_text())["title"]
        assert line.split(None, 1)[1] == title
    status, out, _ = run(capsys, "list", "--json")
    assert [entry["name"] for entry in json.loads(out)["scenarios"]] == folders


def test_every_command_takes_a_bundled_scenario_by_name(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    status, out, _ = run(capsys, "check", "probe-cooling", "--json")
    assert status == 0 and json.loads(out)["data"]["observations"] == 76
    # An unknown name is bad input that says which names exist.
    status, _, err = run(capsys, "check", "probe-coolin")
    assert status == 2 and "did you mean 'probe-cooling'" in err and "tracer-washout" in err
    # A folder of the same name in the working directory wins over the bundled scenario.
    (tmp_path / "probe-cooling").mkdir()
    status, _, err = run(capsys, "check", "probe-cooling")
    assert status == 2 and "scenario file not found" in err


@pytest.mark.parametrize("formula", [None, "a * exp(-k * x) + c"])
def test_new_scenario_passes_check_and_fits_like_scipy(capsys, tmp_path, formula):
    folder = tmp_path / "my-fit"
    status, out, _ = run(capsys, "new", str(folder), *(["--formula", formula] if formula else []))
    assert status == 0 and "scenario.toml" in out
    status, out, _ = run(capsys, "check", str(folder), "--json")
    summary = json.loads(out)
    assert status == 0 and summary["warnings"] == []
    expected = ["a", "k", "c"] if formula else ["amplitude", "rate", "offset"]
    assert [p["name"] for p in summary["parameters"]] == expected
    assert (summary["model"]["jacobian"] == "exact (formula)") == bool(formula)
    # The template fits at once: the engine's fit from the start matches scipy's
    # least_squares on the same problem (reference: scipy.optimize.least_squares).
    status, out, _ = run(capsys, "fit", str(folder), "--json")
    report = json.loads(out)
    assert status == 0 and report["outcome"] == "converged"
    problem = load_scenario(folder).problem
    start = [p["start"] for p in summary["parameters"]]
    reference = least_squares(lambda a: problem.predict(a[None])[0] - problem.y, start, method="lm",
                              xtol=1e-14, ftol=1e-14, gtol=1e-14).x
    np.testing.assert_allclose([report["params"][name] for name in expected], reference, rtol=1e-6)


def test_new_scenario_passes_the_quick_audit(capsys, tmp_path):
    folder = tmp_path / "my-fit"
    run(capsys, "new", str(folder))
    status, out, _ = run(capsys, "run", str(folder), "--quick", "--jobs", "1", "-o", str(tmp_path / "out"), "--json")
    payload = json.loads(out)
    # The template's data come from its own model with small noise: every check of the verdict
    # passes and the audited fit is scipy's (reference: scipy.optimize.least_squares).
    assert status == 0 and payload["verdict"]["overall"] == "pass" and payload["not_run"] == {}
    problem = load_scenario(folder).problem
    reference = least_squares(lambda a: problem.predict(a[None])[0] - problem.y,
                              [payload["best_fit"]["params"][name] for name in problem.names], method="lm",
                              xtol=1e-14, ftol=1e-14, gtol=1e-14).x
    assert list(payload["best_fit"]["params"].values()) == pytest.approx(reference, rel=1e-6)


def test_new_refuses_a_non_empty_folder_and_a_formula_without_parameters(capsys, tmp_path):
    (tmp_path / "taken").mkdir()
    (tmp_path / "taken" / "notes.txt").write_text("keep me")
    status, _, err = run(capsys, "new", str(tmp_path / "taken"))
    assert status == 2 and "not empty" in err
    assert sorted(p.name for p in (tmp_path / "taken").iterdir()) == ["notes.txt"]
    status, _, err = run(capsys, "new", str(tmp_path / "empty-formula"), "--formula", "2 * x")
    assert status == 2 and "no parameter" in err and not (tmp_path / "empty-formula").exists()
    status, _, err = run(capsys, "new", str(tmp_path / "bad-formula"), "--formula", "a * x +")
    assert status == 2 and not (tmp_path / "bad-formula").exists()
    (tmp_path / "empty").mkdir()
    status, _, _ = run(capsys, "new", str(tmp_path / "empty"), "--formula", "a * log(x) + b")
    assert status == 0 and (tmp_path / "empty" / "data.csv").is_file()


def test_the_package_listing_ships_every_subpackage_and_the_scenarios():
    # The bundled scenarios need an explicit package list (pyproject.toml says why); a new
    # subpackage of audit/ missing from it would be left out of every installed copy.
    config = tomllib.loads((PROJECT / "pyproject.toml").read_text())["tool"]["setuptools"]
    subpackages = {".".join(path.parent.relative_to(PROJECT).parts)
                   for path in (PROJECT / "audit").rglob("__init__.py")}
    assert subpackages | {"audit.bundled"} == set(config["packages"])
    assert config["package-dir"]["audit.bundled"] == "scenarios"
    shipped = config["package-data"]["audit.bundled"]
    for name in bundled_names():
        for path in (SCENARIOS / name).iterdir():
            if path.is_file():
                assert any(path.match(pattern) for pattern in shipped), f"{path} would not be installed"
