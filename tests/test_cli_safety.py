"""The command line under hostile conditions: an output folder it cannot write, a second run on
the same folder, markup and control characters in user strings, and errors nobody foresaw."""
from __future__ import annotations

import fcntl
import textwrap

import pytest
from scenario_files import DECAY_DATA, DECAY_MODEL, scenario_toml

from audit.cli import main
from audit.cli import sweep as sweep_command


def titled_toml(title: str) -> str:
    """The decay scenario with a small grid sweep; ``title`` goes into the TOML string as written."""
    return scenario_toml(title=title, sweep={"design": "grid", "points": 16, "resolution": 4})


def run(capsys, *argv: str) -> tuple[int, str, str]:
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


@pytest.fixture
def scenario(write_scenario):
    return write_scenario(titled_toml("decay"), model=DECAY_MODEL, data=DECAY_DATA)


@pytest.fixture
def no_sweep(monkeypatch):
    """Fails the test if the sweep starts computing."""
    def refuse(*args, **kwargs):
        raise AssertionError("the sweep computed before the output folder was checked")
    monkeypatch.setattr(sweep_command, "run_sweep", refuse)


def test_an_output_path_that_is_a_file_is_refused_before_computing(capsys, scenario, tmp_path, no_sweep):
    blocker = tmp_path / "taken"
    blocker.write_text("a file, not a folder")
    status, out, err = run(capsys, "sweep", str(scenario), "-o", str(blocker), "--jobs", "1")
    assert status == 2 and out == "" and err.strip().count("\n") == 0
    assert str(blocker) in err and "-o" in err


def test_an_output_folder_inside_a_file_is_refused_before_computing(capsys, scenario, tmp_path, no_sweep):
    blocker = tmp_path / "taken"
    blocker.write_text("a file")
    status, _, err = run(capsys, "sweep", str(scenario), "-o", str(blocker / "out"), "--jobs", "1")
    assert status == 2 and err.strip().count("\n") == 0 and str(blocker) in err


def test_a_second_run_on_a_busy_output_folder_is_refused(capsys, scenario, tmp_path, no_sweep):
    out_folder = tmp_path / "out"
    out_folder.mkdir()
    # Another run holds the folder's lock (an flock on a second open file, as another process would).
    with open(out_folder / ".fitaudit.lock", "w") as other:
        fcntl.flock(other, fcntl.LOCK_EX | fcntl.LOCK_NB)
        status, _, err = run(capsys, "sweep", str(scenario), "-o", str(out_folder), "--jobs", "1")
    assert status == 2 and err.strip().count("\n") == 0 and "another fitaudit run" in err


def test_an_unexpected_error_exits_3_with_one_line_and_a_hint(capsys, scenario, tmp_path, monkeypatch):
    def broken(*args, **kwargs):
        raise ZeroDivisionError("something nobody foresaw")
    monkeypatch.setattr(sweep_command, "run_sweep", broken)
    monkeypatch.delenv("FITAUDIT_TRACEBACK", raising=False)
    status, _, err = run(capsys, "sweep", str(scenario), "-o", str(tmp_path / "out"), "--jobs", "1", "--json")
    # 3, not 1 (a finding) or 2 (bad input): the exit statuses documented in the README.
    assert status == 3 and err.strip().count("\n") == 0
    assert "ZeroDivisionError: something nobody foresaw" in err and "FITAUDIT_TRACEBACK=1" in err
    monkeypatch.setenv("FITAUDIT_TRACEBACK", "1")
    status, _, err = run(capsys, "sweep", str(scenario), "-o", str(tmp_path / "out"), "--jobs", "1")
    assert status == 3 and "Traceback" in err


@pytest.mark.parametrize("title", ["[/]", "[red]alarm[/red]", "[link=http://x]y[/link]", "\\u001b[31mred", ":x: bad"])
def test_a_hostile_title_is_shown_as_written_without_markup_or_control_codes(capsys, write_scenario, title):
    folder = write_scenario(titled_toml(title), model=DECAY_MODEL, data=DECAY_DATA)
    status, out, err = run(capsys, "check", str(folder))
    shown = textwrap.dedent(title).replace("\\u001b", "")
    assert status == 0, err
    assert shown in out and "\x1b" not in out and "\u274c" not in out
