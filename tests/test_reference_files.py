"""A missing NIST StRD folder fails the run under CI and is reported, not silently skipped, elsewhere."""
from __future__ import annotations

import os
import subprocess
import sys

from conftest import NIST_ENVIRONMENT, PROJECT_ROOT

#: One test of each way the reference files are reached: the `nist` and `nist_dir` fixtures.
NIST_TESTS = ["tests/test_strd.py::test_cli_json_has_every_run",
              "tests/test_formula.py::test_symbolic_jacobian_of_every_nist_formula_matches_numdifftools"]


def run_without_the_files(tmp_path, ci: str | None) -> subprocess.CompletedProcess:
    environment = {key: value for key, value in os.environ.items() if key != "CI"}
    environment[NIST_ENVIRONMENT] = str(tmp_path)  # an empty folder: no .dat files
    if ci is not None:
        environment["CI"] = ci
    return subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", *NIST_TESTS],
                          cwd=PROJECT_ROOT, env=environment, capture_output=True, text=True)


def test_under_ci_the_nist_tests_fail_and_say_where_the_files_go(tmp_path):
    done = run_without_the_files(tmp_path, "true")
    # pytest's exit status 1: tests failed (a fixture that fails counts as an error of its test).
    assert done.returncode == 1, done.stdout
    assert "2 errors" in done.stdout and "skipped" not in done.stdout
    assert "NIST StRD files not found" in done.stdout and "nist-strd" in done.stdout


def test_outside_ci_they_skip_with_a_one_line_reason_in_the_summary(tmp_path):
    done = run_without_the_files(tmp_path, None)
    assert done.returncode == 0, done.stdout
    assert "2 skipped" in done.stdout
    summary = [line for line in done.stdout.splitlines() if line.startswith("2 NIST StRD test(s) skipped:")]
    assert len(summary) == 1 and "put the nonlinear regression .dat files" in summary[0]
