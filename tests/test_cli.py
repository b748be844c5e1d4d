"""The check and fit commands: exit statuses, JSON output and one-line errors."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from scipy.optimize import least_squares

from audit.cli import main
from audit.inputs.scenario import load_scenario

BUNDLED = str(Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling")


def run(capsys, *argv: str) -> tuple[int, str, str]:
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_check_accepts_the_bundled_scenario(capsys):
    status, out, _ = run(capsys, "check", BUNDLED)
    assert status == 0 and "76 observations" in out and "ok" in out
    status, out, _ = run(capsys, "check", BUNDLED, "--json")
    summary = json.loads(out)
    assert status == 0 and summary["data"]["observations"] == 76
    assert [p["name"] for p in summary["parameters"]] == ["T_env", "dT", "tau"]


def test_check_bad_input_exits_2_with_one_line(capsys, tmp_path):
    status, out, err = run(capsys, "check", str(tmp_path))
    assert status == 2 and out == ""
    assert err.strip().count("\n") == 0 and "scenario file not found" in err
    (tmp_path / "scenario.toml").write_text("[data]\nfiel = 'x.csv'\n[model]\n[parameters]\n")
    status, _, err = run(capsys, "check", str(tmp_path))
    # Square brackets of section names must survive the terminal's markup.
    assert status == 2 and "[data]: unknown key 'fiel'" in err


def test_fit_json_matches_scipy_and_exits_0(capsys):
    status, out, _ = run(capsys, "fit", BUNDLED, "--json")
    report = json.loads(out)
    assert status == 0 and report["outcome"] == "converged"
    # Reference: scipy.optimize.least_squares on the same weighted problem from the same start.
    problem = load_scenario(BUNDLED).problem
    reference = least_squares(lambda a: problem.sqrt_weights * (problem.predict(a[None])[0] - problem.y),
                              [20.0, 60.0, 100.0], method="lm", xtol=1e-14, ftol=1e-14, gtol=1e-14).x
    for name, value in zip(problem.names, reference):
        assert report["params"][name] == pytest.approx(value, rel=1e-6)
    assert report["iterations"][0]["iteration"] == 0 and report["iterations"][0]["max_rel_change"] is None
    assert len(report["estimates"]["std_errors"]) == 3


def test_fit_table_and_not_converged_exit_1(capsys):
    status, out, _ = run(capsys, "fit", BUNDLED)
    assert status == 0 and "largest rel. change" in out and "estimates" in out and "correlation" in out
    # tau = 500 with a full step overshoots: the run leaves the basin and does not converge.
    status, out, _ = run(capsys, "fit", BUNDLED, "--start", "tau=500", "--step-factors", "1")
    assert status == 1 and "converged" not in out.split("outcome:")[1].split("\n")[0]
    assert "next: a smaller --step-factors" in out


def test_fit_takes_every_start_override_whether_listed_or_repeated(capsys):
    # The fit's first row is the start: both spellings must override both parameters.
    for argv in (["--start", "tau=80", "dT=50"], ["--start", "tau=80", "--start", "dT=50"]):
        status, out, _ = run(capsys, "fit", BUNDLED, "--json", *argv)
        first = json.loads(out)["iterations"][0]["params"]
        assert (first["T_env"], first["dT"], first["tau"]) == (20.0, 50.0, 80.0)


@pytest.mark.parametrize("argv, fragment", [
    (["--start", "tua=3"], "did you mean 'tau'"),
    (["--start", "tau"], "expected NAME=VALUE"),
    (["--start", "tau=abc"], "not a number"),
    (["--step-factors", "2"], "must lie in (0, 1]"),
])
def test_fit_bad_options_exit_2(capsys, argv, fragment):
    status, _, err = run(capsys, "fit", BUNDLED, *argv)
    assert status == 2 and fragment in err


def test_python_dash_m_and_help_texts():
    done = subprocess.run([sys.executable, "-m", "audit", "fit", "--help"], capture_output=True, text=True)
    assert done.returncode == 0 and "step factor" in done.stdout and "examples:" in done.stdout
    done = subprocess.run([sys.executable, "-m", "audit"], capture_output=True, text=True)
    assert done.returncode == 2 and "commands" in done.stdout


def test_version_is_the_packages(capsys):
    # Reference: the version written in pyproject.toml, read with tomllib.
    import tomllib
    declared = tomllib.loads((Path(BUNDLED).parents[1] / "pyproject.toml").read_text())["project"]["version"]
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0 and capsys.readouterr().out.strip() == f"fitaudit {declared}"


def test_dask_backend_needs_a_reachable_scheduler(capsys, tmp_path):
    assert main(["bootstrap", BUNDLED, "--backend", "dask", "-o", str(tmp_path)]) == 2
    assert "needs the address of a running scheduler (--scheduler ADDRESS)" in capsys.readouterr().err
    # Port 9 on the loopback address has no scheduler: the connection is refused until the 10 s timeout.
    assert main(["sweep", BUNDLED, "--backend", "dask", "--scheduler", "tcp://127.0.0.1:9", "--starts", "16",
                 "-o", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "--scheduler tcp://127.0.0.1:9: cannot reach the Dask scheduler" in err
