"""Shared fixtures: where the NIST StRD reference files are, and small scenario builders."""
from __future__ import annotations

import itertools
import os
from pathlib import Path

import pytest
from scenario_files import write_scenario_folder

from audit.validation.reference import ReferenceProblem, read_reference

PROJECT_ROOT = Path(__file__).resolve().parents[1]
#: Environment variable that points at a folder of NIST StRD nonlinear regression .dat files.
NIST_ENVIRONMENT = "FITAUDIT_NIST_DIR"
#: Where the reference files sit beside the project on the team's machines and in CI.
NIST_DEFAULT = PROJECT_ROOT.parent / "shared" / "reference" / "nist-strd"


def nist_folder() -> Path | None:
    """The folder of NIST StRD files, or None when it is not on this machine."""
    folder = Path(os.environ.get(NIST_ENVIRONMENT, NIST_DEFAULT))
    return folder if folder.is_dir() and any(folder.glob("*.dat")) else None


NIST_MISSING = (f"NIST StRD files not found: put the nonlinear regression .dat files from "
                f"https://www.itl.nist.gov/div898/strd/ in {NIST_DEFAULT} or set {NIST_ENVIRONMENT}")


def running_in_ci() -> bool:
    """CI sets CI=true; there a missing reference folder must fail the run, not thin it out."""
    return os.environ.get("CI", "").strip().lower() == "true"


def nist_missing() -> None:
    """Fail under CI, else skip, saying where the files go."""
    if running_in_ci():
        pytest.fail(f"{NIST_MISSING} (CI=true: the checks against NIST must run)", pytrace=False)
    pytest.skip(NIST_MISSING)


def pytest_terminal_summary(terminalreporter) -> None:
    """One line under the default output saying how many NIST tests were skipped and why."""
    skipped = [report for report in terminalreporter.stats.get("skipped", []) if NIST_MISSING in str(report.longrepr)]
    if skipped:
        terminalreporter.write_line(f"{len(skipped)} NIST StRD test(s) skipped: {NIST_MISSING}", yellow=True)


@pytest.fixture
def nist():
    """``nist("Misra1a")`` -> the published problem (fails under CI, else skips, when the files are absent)."""
    folder = nist_folder()
    if folder is None:
        nist_missing()

    def load(name: str) -> ReferenceProblem:
        return read_reference(folder / f"{name}.dat")

    return load


@pytest.fixture
def nist_dir() -> Path:
    """The folder of NIST StRD files (fails under CI, else skips, when absent)."""
    folder = nist_folder()
    if folder is None:
        nist_missing()
    return folder


@pytest.fixture
def write_scenario(tmp_path):
    """Write a scenario folder from TOML, model and CSV text; returns the folder.

    ``write_scenario(toml, model=..., data=..., name="s")``; texts are dedented (``tests/scenario_files.py``
    builds them). Every call gets a fresh folder, so one test can write several scenarios.
    """
    written = itertools.count()

    def write(toml: str, model: str | None = None, data: str | None = None, name: str = "scenario") -> Path:
        return write_scenario_folder(tmp_path / f"{name}-{next(written)}", toml, model, data)

    return write
