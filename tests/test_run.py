"""``fitaudit run`` end to end on the bundled scenario, and on one with a planted Jacobian mistake."""
from __future__ import annotations

import hashlib
import json
import platform
import shutil
from pathlib import Path

import matplotlib.image
import numpy as np
import pytest
import scipy
from scipy import stats
from scipy.optimize import least_squares

import audit
from audit.cli import main
from audit.figures import fit as fit_figure
from audit.figures import residuals as residual_figures
from audit.figures import sweep as sweep_figures
from audit.inputs.scenario import load_scenario
from audit.report.appendix import build_appendix
from audit.report.document import Table
from audit.report.run import run_audit

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"


def weighted_residuals(scenario):
    problem = scenario.problem
    sqrt_w = np.sqrt(problem.weights)
    return lambda p: (problem.y - (p[0] + p[1] * np.exp(-problem.x / p[2]))) * sqrt_w


@pytest.fixture(scope="module")
def reference():
    """scipy.optimize.least_squares from the scenario's start, tight tolerances."""
    scenario = load_scenario(BUNDLED)
    return least_squares(weighted_residuals(scenario), scenario.start, xtol=1e-15, ftol=1e-15, gtol=1e-15)


@pytest.fixture(scope="module")
def quick_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("run")
    out = folder / "out"
    status = main(["run", str(BUNDLED), "--quick", "-o", str(out), "--json"])
    return status, out, json.loads((out / "audit.json").read_text())


def test_quick_run_exit_status_follows_the_verdict(quick_run, capsys):
    status, _, payload = quick_run
    verdict = payload["verdict"]
    assert verdict["overall"] == "pass" and status == 0
    assert {line["status"] for line in verdict["checks"]} == {"pass"}
    assert len(verdict["checks"]) == 12 and payload["not_run"] == {}


def test_json_estimates_match_scipy_least_squares(quick_run, reference):
    _, _, payload = quick_run
    names = ("T_env", "dT", "tau")
    best = [payload["best_fit"]["params"][name] for name in names]
    np.testing.assert_allclose(best, reference.x, rtol=1e-7)  # scipy.optimize.least_squares
    # Every stage audited that same fit
    np.testing.assert_allclose(payload["bootstrap"]["best"], best, rtol=0, atol=0)
    np.testing.assert_allclose([payload["identifiability"]["params"][name] for name in names], best, rtol=0, atol=0)
    assert payload["best_fit"]["ssr"] == pytest.approx(2 * reference.cost, rel=1e-9)
    # Asymptotic standard errors: s²(JᵀWJ)⁻¹ with scipy's Jacobian, numpy.linalg.inv
    m = len(reference.fun)
    covariance = 2 * reference.cost / (m - 3) * np.linalg.inv(reference.jac.T @ reference.jac)
    np.testing.assert_allclose(payload["asymptotic"]["std_errors"], np.sqrt(np.diag(covariance)), rtol=1e-5)


def test_gum_statement_uses_the_student_t_coverage_factor(quick_run, reference):
    _, _, payload = quick_run
    statement = payload["uncertainty_statement"]
    dof = len(reference.fun) - 3
    k = stats.t.ppf(0.975, dof)  # scipy.stats: k = t_{(1+p)/2, ν}, GUM annex G.3
    assert statement["dof"] == dof and statement["coverage_factor"] == pytest.approx(k, rel=1e-12)
    for entry, u in zip(statement["parameters"], payload["asymptotic"]["std_errors"]):
        assert entry["standard_uncertainty"] == pytest.approx(u, rel=1e-12)
        assert entry["expanded"] == pytest.approx(k * u, rel=1e-12)


def test_verdict_numbers_are_the_stage_numbers(quick_run, reference):
    _, _, payload = quick_run
    lines = {line["check"]: line for line in payload["verdict"]["checks"]}
    # Condition number of the column-scaled weighted Jacobian (numpy.linalg.cond on scipy's Jacobian)
    jac = reference.jac / np.linalg.norm(reference.jac, axis=0)
    assert lines["condition number"]["value"] == pytest.approx(np.linalg.cond(jac), rel=1e-4)
    covariance = np.linalg.inv(reference.jac.T @ reference.jac)
    sd = np.sqrt(np.diag(covariance))
    correlation = covariance / np.outer(sd, sd)
    strongest = np.max(np.abs(correlation[np.triu_indices(3, 1)]))
    assert lines["strongest correlation"]["value"] == pytest.approx(strongest, rel=1e-5)
    sweep = payload["sweep"]
    recommended = sweep["recommendation"]
    assert lines["share of starts reaching the best fit"]["value"] == recommended["basin_share"]
    assert lines["bootstrap refits that fail"]["value"] == payload["bootstrap"]["failure_share"]


def test_provenance_records_hashes_versions_and_command(quick_run):
    _, _, payload = quick_run
    provenance = payload["provenance"]
    for kind, name in (("scenario", "scenario.toml"), ("data", "data.csv"), ("model", "model.py")):
        assert provenance["files"][kind]["sha256"] == hashlib.sha256((BUNDLED / name).read_bytes()).hexdigest()
    assert (provenance["numpy"], provenance["scipy"], provenance["python"]) == (
        np.__version__, scipy.__version__, platform.python_version())
    assert provenance["fitaudit"] == audit.__version__ and provenance["quick"] is True
    assert provenance["seeds"]["bootstrap"] == provenance["settings"]["bootstrap"]["seed"]


def test_figures_decode_and_the_sweep_cache_is_reused(quick_run):
    _, out, _ = quick_run
    pngs = sorted((out / "figures").glob("*.png"))
    assert "fit-band.png" in {path.name for path in pngs}
    for path in pngs:
        assert matplotlib.image.imread(path).ndim == 3, path
    again = run_audit(BUNDLED, out=out, quick=True)
    assert again.sweep.chunks["computed"] == 0 and again.sweep.chunks["reused"] == again.sweep.chunks["total"] > 0


def test_figures_found_drawn_are_kept_and_only_enough_to_draw_go_to_workers(quick_run):
    # Starting workers that import matplotlib costs about a second: a rerun whose figures are all
    # drawn must not hand any to the mapper (a cached fitaudit run took 12 s instead of 7 s here
    # when it started workers to find nothing to draw), one stage to draw again is drawn in this
    # process, and three or more go to the mapper (report.result.WORKERS_PAY_FROM).
    _, out, _ = quick_run
    again = run_audit(BUNDLED, out=out, quick=True)
    folder = out / "figures"
    sent = []

    def mapper(function, writers):
        sent.extend(writer.func for writer in writers)
        return map(function, writers)

    paths = again.write_figures(folder, mapper)
    assert sent == [] and len(paths) == len(set(paths)) >= 12 and all(path.is_file() for path in paths)
    (folder / "residuals.png").unlink()
    assert again.write_figures(folder, mapper) == paths and sent == []
    assert (folder / "residuals.png").is_file()
    for name in ("residuals.png", "fit-band.pdf", "sweep-outcomes.png"):
        (folder / name).unlink()
    assert again.write_figures(folder, mapper) == paths
    assert sent == [sweep_figures.write_figures, residual_figures.draw_picture, fit_figure.draw_picture]


def test_a_cached_rerun_draws_no_figure_again(quick_run):
    # Issue 17: figures are drawn once per result. A rerun takes every stage from its cache (the
    # bootstrap's result then counts its chunks as reused, which no figure shows); the fit and
    # residual figures, drawn from the data and the fit beside a stage's result, are unchanged too.
    _, out, _ = quick_run
    folder = out / "figures"
    drawn = {path.name: path.stat().st_mtime_ns for path in folder.iterdir()}
    assert {"fit-band.png", "residuals.png", "bootstrap-histograms.png"} <= set(drawn)
    main(["run", str(BUNDLED), "--quick", "-o", str(out), "--json"])
    assert {path.name: path.stat().st_mtime_ns for path in folder.iterdir()} == drawn


def test_appendix_sections_in_order_with_the_json_numbers(quick_run, reference):
    _, out, payload = quick_run
    result = run_audit(BUNDLED, out=out, quick=True)  # the sweep comes from the cache
    document = build_appendix(result, sorted((out / "figures").iterdir()))
    assert [section.anchor for section in document.sections] == [
        "scenario", "model", "fit", "estimates", "verdict", "derivatives", "sweep", "bootstrap", "identifiability",
        "residuals", "recommendations", "provenance", "cautions"]
    sections = {section.anchor: section for section in document.sections}
    assert sections["fit"].blocks[0].png.name == "fit-band.png" and sections["fit"].blocks[0].pdf.is_file()
    table = next(block for block in sections["estimates"].blocks if isinstance(block, Table))
    profiles = payload["identifiability"]["profiles"]["parameters"]
    for row, expected, profile in zip(table.rows, reference.x, profiles):
        # the table's estimate is scipy's to its 8 digits; its profile interval is the JSON's to 6
        assert float(row[1]) == pytest.approx(expected, rel=1e-7)
        low, high = (float(text) for text in row[5].strip("[]").split(","))
        assert (low, high) == (pytest.approx(profile["lower"], rel=1e-5), pytest.approx(profile["upper"], rel=1e-5))
    verdict = next(block for block in sections["verdict"].blocks if isinstance(block, Table))
    assert [row[1] for row in verdict.rows] == [line["status"] for line in payload["verdict"]["checks"]]
    cautions = " ".join(block.text for block in sections["cautions"].blocks)
    assert "does not show that the model" in cautions and "qualified, licensed" in cautions


def test_wrong_hand_jacobian_fails_the_derivative_check_and_the_run_finishes(tmp_path):
    """The planted ∂T/∂τ is −dT·t·e^{−t/τ}/τ², minus the true one (hand derivation): a sign error."""
    folder = tmp_path / "wrong"
    shutil.copytree(BUNDLED, folder)
    model = folder / "model.py"
    right = "dT * time_s * decay / tau**2]"
    assert right in model.read_text()
    model.write_text(model.read_text().replace(right, "-" + right))
    result = run_audit(folder, quick=True)
    payload = result.to_dict()
    tau = payload["derivatives"]["columns"][2]
    assert tau["verdict"] == "wrong" and tau["diagnosis"]["kind"] == "sign_error"
    assert tau["diagnosis"]["factor"] == pytest.approx(-1.0, abs=1e-6)
    line = payload["verdict"]["checks"][0]
    assert line["status"] == "fail" and "sign error" in line["reason"] and "derivative table" in line["reason"]
    assert payload["verdict"]["overall"] == "fail"
    # The rest still reports: the sweep ran, and each stage that could not run says what to do
    assert payload["sweep"]["by_step_factor"]
    for stage in ("bootstrap", "identifiability", "residuals"):
        assert "derivative table" in payload["not_run"][stage], stage
    written = result.write(tmp_path / "out")
    assert json.loads(written[0].read_text())["verdict"]["overall"] == "fail"


def test_verdict_overrides_from_the_scenario_and_escaped_notebook_summary(tmp_path):
    folder = tmp_path / "hostile"
    shutil.copytree(BUNDLED, folder)
    toml = folder / "scenario.toml"
    text = toml.read_text().replace('title = "Cooling of an immersed temperature probe"',
                                    'title = "<script>alert(1)</script> & 50% _x_ \\\\"')
    toml.write_text(text + "\n[verdict]\ncondition_warn = 2.0\n")
    result = run_audit(folder, quick=True)
    line = next(line for line in result.verdict.lines if line.check == "condition number")
    # 2 < cond ≈ 3.3 < 1000: the overridden threshold warns
    assert line.status == "warn" and "warn above 2" in line.reason
    assert result.verdict.overall == "warn"
    shown = result._repr_html_()
    assert "<script>" not in shown and "&lt;script&gt;alert(1)&lt;/script&gt; &amp; 50% _x_ \\" in shown


def test_bad_input_exits_2_with_one_line(tmp_path, capsys):
    assert main(["run", str(tmp_path), "--quick"]) == 2
    assert "scenario file not found" in capsys.readouterr().err
    assert main(["run", str(BUNDLED), "--quick", "--step-factors", "1,1.5", "-o", str(tmp_path)]) == 2
    assert "--step-factors: need distinct values in (0, 1]" in capsys.readouterr().err
