"""Every stage audits the best known fit: the sweep's in-range reference, else the best from the start.

The test problem is a sinusoid y = amp·sin(omega·t + phase) on evenly spaced t, whose scenario
start (amp 1, omega 1, phase 0) settles in a local optimum with an SSR about eighteen times the
in-range optimum's. The data are generated here (seeded); every reference value comes from
scipy.optimize.least_squares or from the sum of squares written out with numpy.
"""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from scenario_files import csv_text, data_columns, scenario_toml, write_scenario_folder
from scipy.optimize import least_squares

from audit.cli import main
from audit.engine.best_fit import FROM_START, FROM_SWEEP, SweepReference, best_known_fit
from audit.inputs.scenario import load_scenario, solutions_fingerprint
from audit.sweep.result import reference_from_json

SCENARIO = scenario_toml(title="sinusoid with a local optimum at the scenario's start", data=data_columns("t", "y"),
                         model={"expression": "amp*sin(omega*t + phase)"},
                         parameters={"amp": {"start": 1.0, "range": [0.1, 5.0]},
                                     "omega": {"start": 1.0, "range": [0.2, 4.0]},
                                     "phase": {"start": 0.0, "range": [-3.0, 3.0]}})
#: Evenly spaced and exact in binary, so the aliases omega + 8π·k give the same SSR to rounding.
TIMES = 0.25 * np.arange(80)
NEAR_OPTIMUM = [2.0, 1.7, 0.4]


def write_sinusoid(folder: Path, omega: float, seed: int) -> Path:
    """A scenario folder with data 2·sin(omega·t + 0.4) plus seeded noise of sd 0.35."""
    y = 2.0 * np.sin(omega * TIMES + 0.4) + np.random.default_rng(seed).normal(0.0, 0.35, TIMES.size)
    # An empty format spec writes each double's shortest round-tripping digits.
    return write_scenario_folder(folder, SCENARIO, data=csv_text("t,y", TIMES, y, formats=""))


def scipy_fit(folder: Path, start) -> tuple[np.ndarray, float]:
    """Reference: scipy.optimize.least_squares (MINPACK LM) on the scenario's data from ``start``."""
    data = np.genfromtxt(folder / "data.csv", delimiter=",", names=True)
    fit = least_squares(lambda a: a[0] * np.sin(a[1] * data["t"] + a[2]) - data["y"], start, method="lm",
                        xtol=1e-14, ftol=1e-14, gtol=1e-14)
    return fit.x, 2.0 * fit.cost


def closed_form_ssr(folder: Path, params) -> float:
    """Reference: the sum of squared residuals of amp·sin(omega·t + phase), written out with numpy."""
    data = np.genfromtxt(folder / "data.csv", delimiter=",", names=True)
    amp, omega, phase = params
    return float(np.sum((data["y"] - amp * np.sin(omega * data["t"] + phase)) ** 2))


def run(capsys, *argv: str) -> tuple[int, str, str]:
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


@pytest.fixture(scope="module")
def swept(tmp_path_factory) -> tuple[Path, Path]:
    """(scenario folder, output folder holding sweep.json written by a small ``fitaudit sweep``)."""
    root = tmp_path_factory.mktemp("sinusoid")
    folder, out = write_sinusoid(root / "scenario", omega=1.7, seed=20261211), root / "out"
    # 32 starts cannot hold a safe region (it needs at least 100 starts), so the sweep exits 1.
    assert main(["sweep", str(folder), "--starts", "32", "--resolution", "3", "--jobs", "1", "-o", str(out),
                 "--json"]) == 1
    return folder, out


def values(named: dict) -> list[float]:
    return [named["amp"], named["omega"], named["phase"]]


def test_the_scenario_start_reaches_a_local_optimum_and_the_sweep_json_carries_the_in_range_one(swept):
    folder, out = swept
    optimum, optimum_ssr = scipy_fit(folder, NEAR_OPTIMUM)
    _, local_ssr = scipy_fit(folder, [1.0, 1.0, 0.0])
    # Reference: scipy.optimize.least_squares from the scenario's start stops at a local optimum.
    assert local_ssr > 10 * optimum_ssr
    payload = json.loads((out / "sweep.json").read_text())
    assert payload["fingerprint"] == solutions_fingerprint(load_scenario(folder))
    # Reference: scipy.optimize.least_squares from a start near the optimum.
    assert values(payload["reference"]["params"]) == pytest.approx(optimum, rel=1e-6)
    assert payload["reference"]["ssr"] == pytest.approx(optimum_ssr, rel=1e-9)


def test_best_known_fit_is_the_sweeps_reference_not_the_fit_from_the_start(swept):
    folder, out = swept
    scenario = load_scenario(folder)
    reference = reference_from_json(json.loads((out / "sweep.json").read_text()), scenario.names)
    alone = best_known_fit(scenario.problem, scenario.start, **scenario.solver.fit_options())
    known = best_known_fit(scenario.problem, scenario.start, **scenario.solver.fit_options(), reference=reference)
    _, local_ssr = scipy_fit(folder, [1.0, 1.0, 0.0])
    optimum, optimum_ssr = scipy_fit(folder, NEAR_OPTIMUM)
    # Reference: scipy.optimize.least_squares from the scenario's start, and from near the optimum.
    assert alone.source == FROM_START and alone.ssr == pytest.approx(local_ssr, rel=1e-9)
    assert not alone.lower_ssr_known
    assert known.source == FROM_SWEEP and known.params == pytest.approx(optimum, rel=1e-6)
    assert known.ssr == pytest.approx(optimum_ssr, rel=1e-9)
    # The start's fit (SSR ~18 times higher) is no lower SSR; the exact aliases outside the
    # ranges tie with the reference to rounding, so nothing lower is known.
    assert not known.lower_ssr_known and known.warning is None


def test_a_lower_ssr_outside_the_ranges_is_kept_with_its_parameters(swept):
    folder, _ = swept
    scenario = load_scenario(folder)
    local, local_ssr = scipy_fit(folder, [1.0, 1.0, 0.0])
    optimum, optimum_ssr = scipy_fit(folder, NEAR_OPTIMUM)
    # A sweep over ranges that exclude the optimum (omega up to 1.5): its reference is the local
    # optimum, the optimum is a solution outside them.
    reference = SweepReference(params=local, ssr=local_ssr, lower=np.array([0.1, 0.2, -3.0]),
                               upper=np.array([5.0, 1.5, 3.0]), outside_params=optimum[None, :],
                               outside_ssr=np.array([optimum_ssr]))
    known = best_known_fit(scenario.problem, scenario.start, **scenario.solver.fit_options(), reference=reference)
    # Reference: scipy.optimize.least_squares from the scenario's start and from near the optimum.
    assert known.source == FROM_SWEEP and known.ssr == pytest.approx(local_ssr, rel=1e-9)
    assert known.lower_ssr_known and known.lower_params == pytest.approx(optimum, rel=1e-12)
    assert known.lower_ssr == pytest.approx(optimum_ssr, rel=1e-9)
    assert "outside the parameter ranges" in known.warning and f"omega = {optimum[1]:.8g}" in known.warning


def test_a_lower_fit_from_the_start_inside_the_ranges_replaces_a_coarse_sweeps_reference(swept):
    folder, _ = swept
    scenario = load_scenario(folder)
    local, local_ssr = scipy_fit(folder, [1.0, 1.0, 0.0])
    optimum, optimum_ssr = scipy_fit(folder, NEAR_OPTIMUM)
    # A sweep too coarse to find the optimum: its reference is the local optimum.
    reference = SweepReference(params=local, ssr=local_ssr, lower=np.array([0.1, 0.2, -3.0]),
                               upper=np.array([5.0, 4.0, 3.0]), outside_params=np.empty((0, 3)),
                               outside_ssr=np.empty(0))
    known = best_known_fit(scenario.problem, np.array(NEAR_OPTIMUM), **scenario.solver.fit_options(),
                           reference=reference)
    # Reference: scipy.optimize.least_squares from near the optimum.
    assert known.source == FROM_START and known.params == pytest.approx(optimum, rel=1e-6)
    assert known.ssr == pytest.approx(optimum_ssr, rel=1e-9)
    assert not known.lower_ssr_known and "missed" in known.notes[0]


def test_bootstrap_refits_from_the_sweeps_reference(capsys, swept):
    folder, out = swept
    _, text, _ = run(capsys, "bootstrap", str(folder), "--samples", "20", "--jobs", "1", "-o", str(out), "--json")
    report = json.loads(text)
    optimum, optimum_ssr = scipy_fit(folder, NEAR_OPTIMUM)
    # Reference: scipy.optimize.least_squares from a start near the optimum.
    assert report["best"] == pytest.approx(optimum, rel=1e-6)
    assert report["audited_fit"]["source"] == FROM_SWEEP
    assert report["audited_fit"]["ssr"] == pytest.approx(optimum_ssr, rel=1e-9)
    assert report["asymptotic"]["ssr"] == pytest.approx(optimum_ssr, rel=1e-9)


def test_identify_analyses_the_sweeps_reference(capsys, swept):
    folder, out = swept
    _, text, _ = run(capsys, "identify", str(folder), "--profile-points", "9", "--jobs", "1", "-o", str(out), "--json")
    report = json.loads(text)
    optimum, optimum_ssr = scipy_fit(folder, NEAR_OPTIMUM)
    # Reference: scipy.optimize.least_squares from a start near the optimum.
    assert values(report["params"]) == pytest.approx(optimum, rel=1e-6)
    assert report["profiles"]["ssr_min"] == pytest.approx(optimum_ssr, rel=1e-9)
    assert report["audited_fit"]["source"] == FROM_SWEEP and not report["audited_fit"]["lower_ssr_known"]
    assert not report["profiles"]["found_lower_ssr"]


def test_the_derivative_checks_best_fit_point_is_the_sweeps_reference(capsys, swept):
    folder, out = swept
    _, text, _ = run(capsys, "derivatives", str(folder), "--check-points", "0", "-o", str(out), "--json")
    report = json.loads(text)
    optimum, _ = scipy_fit(folder, NEAR_OPTIMUM)
    best = next(point for point in report["points"] if point["label"] == "best fit")
    # Reference: scipy.optimize.least_squares from a start near the optimum.
    assert values(best["params"]) == pytest.approx(optimum, rel=1e-6)
    assert report["audited_fit"]["source"] == FROM_SWEEP


def test_without_a_sweep_identify_warns_with_the_profile_refit_below_the_audited_fit(capsys, swept, tmp_path):
    folder, _ = swept
    status, text, _ = run(capsys, "identify", str(folder), "--profile-points", "9", "--jobs", "1", "-o", str(tmp_path))
    report = json.loads((tmp_path / "identifiability.json").read_text())
    audited = report["audited_fit"]
    _, local_ssr = scipy_fit(folder, [1.0, 1.0, 0.0])
    # Reference: scipy.optimize.least_squares from the scenario's start (the local optimum).
    assert audited["source"] == FROM_START and audited["ssr"] == pytest.approx(local_ssr, rel=1e-9)
    lower = audited["lower"]
    # Reference: the SSR written out with numpy at the reported parameters of the profile refit.
    recomputed = closed_form_ssr(folder, values(lower["params"]))
    assert audited["lower_ssr_known"] and lower["ssr"] == pytest.approx(recomputed, rel=1e-9)
    assert lower["ssr"] < local_ssr and lower["source"] == "a profile refit"
    assert status == 1 and "warning:" in text and f"amp = {lower['params']['amp']:.8g}" in text
    assert "no sweep of this scenario" in text


def test_without_a_sweep_bootstrap_audits_the_start_fit_and_warns_of_nothing_unknown(capsys, swept, tmp_path):
    folder, _ = swept
    _, text, _ = run(capsys, "bootstrap", str(folder), "--samples", "20", "--jobs", "1", "-o", str(tmp_path),
                     "--json")
    report = json.loads(text)
    local, local_ssr = scipy_fit(folder, [1.0, 1.0, 0.0])
    # Reference: scipy.optimize.least_squares from the scenario's start.
    assert report["best"] == pytest.approx(local, rel=1e-6)
    assert report["audited_fit"]["ssr"] == pytest.approx(local_ssr, rel=1e-9)
    assert report["audited_fit"]["source"] == FROM_START and not report["audited_fit"]["lower_ssr_known"]


def test_a_sweep_of_another_data_file_is_ignored(capsys, swept, tmp_path):
    _, out = swept
    other = write_sinusoid(tmp_path / "other", omega=1.1, seed=5)
    stale = tmp_path / "out"
    stale.mkdir()
    shutil.copy(out / "sweep.json", stale / "sweep.json")
    _, text, err = run(capsys, "bootstrap", str(other), "--samples", "20", "--jobs", "1", "-o", str(stale), "--json")
    report = json.loads(text)
    expected, expected_ssr = scipy_fit(other, [1.0, 1.0, 0.0])
    # Reference: scipy.optimize.least_squares on the other data from the scenario's start.
    assert report["audited_fit"]["source"] == FROM_START
    assert report["best"] == pytest.approx(expected, rel=1e-6)
    assert report["audited_fit"]["ssr"] == pytest.approx(expected_ssr, rel=1e-9)
    assert "is not used" in err and "other data" in err
