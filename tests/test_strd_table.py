"""The StRD table and JSON as a reader sees them: no digits for a run that never converged (a dash, null),
and a header that names a step factor only where it changes the method."""
from __future__ import annotations

import json
import math
import shutil

from audit.cli import main


def strd(capsys, folder, *options: str) -> tuple[str, dict]:
    main(["strd", str(folder), *options])
    text = capsys.readouterr().out
    main(["strd", str(folder), *options, "--json"])
    return text, json.loads(capsys.readouterr().out)


def rows(text: str) -> list[list[str]]:
    return [[cell.strip() for cell in line.strip("│").split("│")] for line in text.splitlines()
            if line.startswith("│")]


def test_a_diverged_run_shows_a_dash_not_zero_digits(capsys, nist_dir, tmp_path):
    shutil.copy(nist_dir / "BoxBOD.dat", tmp_path)
    text, payload = strd(capsys, tmp_path, "--solver", "gn", "--step-factors", "1")
    first, second = rows(text)
    starts = payload["problems"][0]["starts"]
    # Plain Gauss-Newton from BoxBOD's far Start 1 (b2 = 1 against a certified 0.547) leaves the
    # ranges at the first step (the JSON's outcome); a run that never converged agrees with the
    # certified values in no meaningful number of digits, so the table shows none.
    assert starts[0]["best"]["outcome"] == "diverged"
    assert first[3] == "diverged" and first[6:10] == ["—"] * 4
    # The JSON says the same: no digits (null), not 0.0 digits, for every run that did not converge.
    runs = [run for start in starts for run in start["runs"]]
    assert any(run["outcome"] != "converged" for run in runs)
    for run in runs:
        digits = [run["lre_params"], run["lre_ssr"], run["lre_sd"]]
        assert (digits == [None] * 3) == (run["outcome"] != "converged"), run
    # Start 2 converges: its parameter LRE is the NIST definition, min over parameters of
    # −log10(|fit − certified| / |certified|), capped at the 11 published digits, from the
    # certified values in BoxBOD.dat.
    certified = payload["problems"][0]["certified"]["params"]
    fitted = starts[1]["best"]["params"]
    lre = min(min(11.0, -math.log10(abs(fitted[name] - value) / abs(value)) if fitted[name] != value else 11.0)
              for name, value in certified.items())
    assert second[3] == "converged" and float(second[6]) == round(lre, 1)


def test_the_header_names_a_step_factor_only_where_it_is_not_plain_levenberg_marquardt(capsys, nist_dir, tmp_path):
    shutil.copy(nist_dir / "Misra1a.dat", tmp_path)
    # Common practice: a Levenberg-Marquardt step is taken whole (the damping sets its length);
    # only a Gauss-Newton update is scaled by a step factor α, with α = 1 the plain update.
    text, _ = strd(capsys, tmp_path, "--solver", "lm")
    assert "NIST StRD check: Levenberg-Marquardt, tolerance" in text and "step factor" not in text.splitlines()[0]
    text, _ = strd(capsys, tmp_path, "--solver", "gn", "--step-factors", "0.5")
    assert "NIST StRD check: Gauss-Newton, step factor 0.5, tolerance" in text
