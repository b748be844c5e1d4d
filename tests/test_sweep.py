"""The multistart sweep on a problem whose every outcome is derived by hand (tests/twin_optima.py).

The reference side of each check is that derivation (calculus on the model, stated in
twin_optima.py), the defining property of the start designs (one point per stratum), or
numpy/scipy; never a number the sweep produced before.
"""
from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
import twin_optima as twin
from scenario_files import csv_text, scenario_toml
from scipy.optimize import least_squares

from audit.cli import main
from audit.figures.sweep import write_figures
from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan, local_mapper
from audit.sweep.recommend import histogram_percentile
from audit.sweep.result import CATEGORIES
from audit.sweep.run import SweepRequest, run_sweep
from audit.sweep.starts import make_design, search_space


def sweep(folder, **request):
    scenario = load_scenario(folder)
    return scenario, run_sweep(scenario, SweepRequest.from_scenario(scenario, **request), ParallelPlan(jobs=1))


def expected_counts(scenario, design_kind: str, points: int, step_factor: float) -> dict[str, int]:
    """Counts per category predicted by the derivation for every start of the design."""
    design = make_design(search_space(scenario), design_kind, points, scenario.sweep.seed)
    starts = design.starts(0, design.count)
    assert twin.distance_to_thresholds(starts) > 1e-9  # no start sits on a boundary of the derivation
    labels, counts = np.unique(twin.expected_categories(starts, step_factor), return_counts=True)
    return dict(zip(labels.tolist(), counts.tolist()))


@pytest.fixture
def twin_folder(write_scenario):
    return write_scenario(twin.scenario_toml(), model=twin.MODEL, data=twin.DATA)


def test_grid_sweep_finds_both_optima_with_the_derived_outcome_of_every_start(twin_folder):
    scenario, result = sweep(twin_folder)
    # Optima from calculus on SSR(a) (twin_optima.py): (2, 0) with SSR 0, (-1 - 1/sqrt 2, 0).
    assert len(result.solution_ssr) == 2
    np.testing.assert_allclose(result.solution_params[0], [2.0, 0.0], atol=1e-7)
    np.testing.assert_allclose(result.solution_params[1], [twin.A_OTHER, 0.0], atol=1e-7)
    assert result.solution_ssr[0] < 1e-12
    assert result.solution_ssr[1] == pytest.approx(twin.SSR_OTHER, rel=1e-9)
    # Each start's fate is derived (no tolerance needed): the counts must match exactly.
    for f, factor in enumerate(twin.STEP_FACTORS):
        expected = expected_counts(scenario, "grid", 1024, factor)
        found = {label: int(result.counts[0, f, k]) for k, label in enumerate(CATEGORIES) if result.counts[0, f, k]}
        assert found == expected, f"step factor {factor}"


def test_reference_is_the_best_solution_inside_the_searched_ranges(write_scenario):
    # With a searched only up to 1.5, the optimum at a = 2 (SSR 0) lies outside the ranges the
    # user declared plausible: the reference becomes the other optimum (calculus, twin_optima.py),
    # the lower one is listed as outside and named in a note, and the derived fates swap.
    toml = twin.scenario_toml().replace(f"range = [{twin.A_RANGE[0]}, {twin.A_RANGE[1]}]",
                                        f"range = [{twin.A_RANGE[0]}, 1.5]")
    scenario, result = sweep(write_scenario(toml, model=twin.MODEL, data=twin.DATA))
    np.testing.assert_allclose(result.solution_params[0], [twin.A_OTHER, 0.0], atol=1e-7)
    np.testing.assert_allclose(result.solution_params[1], [2.0, 0.0], atol=1e-7)
    assert list(result.solution_inside) == [True, False]
    assert any("outside the searched ranges" in note for note in result.warnings)
    swap = {"best": "other", "other": "best"}
    for f, factor in enumerate(twin.STEP_FACTORS):
        expected = {swap.get(label, label): count
                    for label, count in expected_counts(scenario, "grid", 1024, factor).items()}
        found = {label: int(result.counts[0, f, k]) for k, label in enumerate(CATEGORIES) if result.counts[0, f, k]}
        assert found == expected, f"step factor {factor}"


def test_exchanged_terms_of_two_decays_are_one_curve_counted_together(write_scenario):
    # a·exp(−b·t) + c·exp(−d·t) is unchanged when its terms swap places (calculus), and both
    # labellings lie inside the ranges: the sweep must call the second a symmetry, not a sign
    # of undetermined parameters. Reference: scipy.optimize.least_squares from the scenario's start.
    t = np.linspace(0, 10, 120)
    signal = 5.0 * np.exp(-1.3 * t) + 2.0 * np.exp(-0.2 * t) + 0.01 * np.cos(11 * t)
    amplitude, rate = {"range": [0.5, 10.0], "scale": "log"}, {"range": [0.05, 3.0], "scale": "log"}
    toml = scenario_toml(title="two decays", model={"expression": "a * exp(-b * t) + c * exp(-d * t)"},
                         parameters={"a": {"start": 4.0, **amplitude}, "b": {"start": 1.0, **rate},
                                     "c": {"start": 1.0, **amplitude}, "d": {"start": 0.1, **rate}},
                         solver={"step_factors": [0.5]}, sweep={"design": "sobol", "points": 256, "maps": []})
    folder = write_scenario(toml, data=csv_text("t,signal", t, signal))
    _, result = sweep(folder)
    reference = least_squares(lambda p: p[0] * np.exp(-p[1] * t) + p[2] * np.exp(-p[3] * t) - signal,
                              [4.0, 1.0, 1.0, 0.1], method="lm", xtol=1e-14).x
    assert len(result.solution_ssr) >= 2
    one, other = (int(np.argmin(np.max(np.abs(result.solution_params - target) / np.abs(target), axis=1)))
                  for target in (reference, reference[[2, 3, 0, 1]]))
    np.testing.assert_allclose(result.solution_params[one], reference, rtol=1e-5)
    np.testing.assert_allclose(result.solution_params[other], reference[[2, 3, 0, 1]], rtol=1e-5)
    assert {one, other} == {0, 1} and list(result.solution_same_curve[:2]) == [False, True]
    assert result.solution_relation[1] == "a↔c, b↔d" and result.solution_equivalence[1] == "exchange"
    assert not any("may not determine" in note for note in result.warnings)
    together = result.solution_shares[0, 0, 0] + result.solution_shares[0, 0, 1]
    assert any(f"{together:.1%} of the starts reach the best fit's curve" in note for note in result.warnings)


def test_grid_shares_match_the_derived_areas(twin_folder):
    _, result = sweep(twin_folder)
    k = 32  # 1024 = 32 × 32 grid points
    # Areas from the derivation: the best basin is a > A_SPLIT; the band is P <= |b| <= Q.
    best_area = (twin.A_RANGE[1] - twin.A_SPLIT) / (twin.A_RANGE[1] - twin.A_RANGE[0])
    band_area = 2 * (twin.Q - twin.P) / (twin.B_RANGE[1] - twin.B_RANGE[0])
    # A grid line of k equally spaced points counts an interval's share to within one point at
    # each of its ends: tolerance 2/k per interval (the band has two intervals: 4/k).
    for factor in (0.6, 0.3):
        assert result.share("best", "gn", factor) == pytest.approx(best_area, abs=2 / k)
        assert result.share("oscillating", "gn", factor) == 0
    assert result.share("oscillating", "gn", 1.0) == pytest.approx(band_area, abs=4 / k)
    assert result.share("best", "gn", 1.0) == pytest.approx(best_area * (1 - band_area), abs=6 / k)


@pytest.mark.parametrize("design", ["sobol", "lhs"])
def test_space_filling_designs_give_the_derived_shares(write_scenario, design):
    folder = write_scenario(twin.scenario_toml(design=design, points=1024), model=twin.MODEL, data=twin.DATA)
    scenario, result = sweep(folder)
    n = result.points
    for f, factor in enumerate(twin.STEP_FACTORS):
        expected = expected_counts(scenario, design, 1024, factor)
        assert {label: int(result.counts[0, f, k]) for k, label in enumerate(CATEGORIES)
                if result.counts[0, f, k]} == expected
    # Both designs put exactly one point in each of the n equal strata of every axis (the Latin
    # hypercube by definition; the first 2^m scrambled Sobol' points form a (0, m, 2)-net, whose
    # one-dimensional projections are stratified the same way), so the share of a one-sided
    # threshold is exact to 1/n and that of the two-interval band to 4/n.
    best_area = (twin.A_RANGE[1] - twin.A_SPLIT) / (twin.A_RANGE[1] - twin.A_RANGE[0])
    band_area = 2 * (twin.Q - twin.P) / (twin.B_RANGE[1] - twin.B_RANGE[0])
    assert result.share("best", "gn", 0.6) == pytest.approx(best_area, abs=1 / n)
    assert result.share("oscillating", "gn", 1.0) == pytest.approx(band_area, abs=4 / n)


def test_oscillations_only_in_the_band_at_step_factor_one_on_the_map(twin_folder):
    _, result = sweep(twin_folder)
    basin_map = result.maps[0]
    assert (basin_map.x_name, basin_map.y_name) == ("a", "b")
    a, b = np.meshgrid(basin_map.x_values, basin_map.y_values)
    starts = np.column_stack([a.ravel(), b.ravel()])
    assert twin.distance_to_thresholds(starts) > 1e-9
    for f, factor in enumerate(twin.STEP_FACTORS):
        expected = twin.expected_categories(starts, factor).reshape(a.shape)
        found = np.array(CATEGORIES)[basin_map.category[0, f]]
        assert np.array_equal(found, expected), f"step factor {factor}"


def test_oscillation_cases_keep_their_two_cycle(twin_folder):
    _, result = sweep(twin_folder)
    cases = [case for case in result.cases if case.kind == "oscillating"]
    assert cases and all(case.step_factor == 1.0 for case in cases)
    for case in cases:
        b = case.path[:, 1]
        # Derived: in the band a full step maps b to -b.
        np.testing.assert_allclose(b[1:], -b[:-1], rtol=1e-9)
        assert twin.P <= abs(case.start[1]) <= twin.Q
        np.testing.assert_array_equal(case.path[0], case.start)
        assert len(case.path) == case.iterations + 1
    assert not [case for case in result.cases if case.kind != "oscillating"]


def test_recommendation_and_safe_region(twin_folder):
    scenario, result = sweep(twin_folder)
    # Step factors 0.6 and 0.3 reach the best from the same starts (derivation); 0.6 contracts
    # faster (b by |1 - 2α| and 1 - α per step), so it needs fewer iterations and is chosen.
    method, factor = result.recommended
    assert result.methods[method] == "gn" and result.step_factors[factor] == 0.6
    # Per step, α = 0.6 shrinks the distance to the optimum by (1 - α) + α·ρ < 0.7 + 0.3·ρ (ρ < 1,
    # twin_optima.py): fewer iterations than α = 0.3 from every start of the map.
    iterations = result.maps[0].iterations[0]
    assert np.all(iterations[1] < iterations[2])
    # With α = 0.6 every start with a > A_SPLIT reaches the best, every other does not. A whole
    # grid column of failing starts would take the region's share far below 99%, so the safe
    # range of a starts at the first grid value above A_SPLIT.
    grid_a = np.linspace(*twin.A_RANGE, 32)
    first_safe = grid_a[grid_a > twin.A_SPLIT][0]
    assert result.region_lower[method, factor, 0] == pytest.approx(first_safe, rel=1e-12)
    assert result.region_upper[method, factor, 0] == pytest.approx(twin.A_RANGE[1])
    assert result.region_share[method, factor] >= 0.99
    assert result.region_starts[method, factor] >= 100
    # The scenario's start (1, 0.5) lies inside both safe ranges.
    assert result.start_inside[method, factor]
    assert np.all(result.start_inside_parameter[method, factor])
    np.testing.assert_array_equal(result.start, scenario.start)


def test_iteration_percentiles_follow_numpy():
    rng = np.random.default_rng(4)
    values = rng.integers(0, 50, size=301)
    histogram = np.bincount(values, minlength=60)
    for q in (50, 90):
        # Reference: numpy.percentile with the inverted-CDF definition the sweep documents.
        assert histogram_percentile(histogram, q) == np.percentile(values, q, method="inverted_cdf")


def dictionary(result) -> str:
    payload = result.to_dict()
    payload.pop("cache")
    payload.pop("chunks")
    return json.dumps(payload, sort_keys=True)


@pytest.mark.slow
def test_same_result_with_one_or_two_jobs_and_on_a_dask_cluster(write_scenario, tmp_path):
    distributed = pytest.importorskip("distributed")
    folder = write_scenario(twin.scenario_toml(design="sobol", points=2048, resolution=16), model=twin.MODEL,
                            data=twin.DATA)
    scenario = load_scenario(folder)
    request = SweepRequest.from_scenario(scenario)
    one = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path / "one")
    two = run_sweep(scenario, request, ParallelPlan(jobs=2), tmp_path / "two")
    # A light cluster inside this process: one worker with two threads.
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster:
        plan = ParallelPlan(backend="dask", scheduler=cluster.scheduler_address)
        remote = run_sweep(scenario, request, plan, tmp_path / "dask")
    for result in (one, two, remote):
        assert result.chunks["computed"] == result.chunks["total"] > 2
    assert dictionary(one) == dictionary(two) == dictionary(remote)


def test_figures_are_drawn_once_per_result_and_as_pdf_only_when_asked(twin_folder, tmp_path):
    _, result = sweep(twin_folder)
    paths = write_figures(result, tmp_path / "figures")
    stems = ("sweep-outcomes", "sweep-basins-a-b", "sweep-iterations-a-b", "sweep-cases", "sweep-cases-map-a-b")
    assert sorted(path.name for path in paths) == sorted(f"{stem}.png" for stem in stems)
    assert all(path.stat().st_size > 1000 for path in paths)
    drawn = [path.stat().st_mtime_ns for path in paths]
    # A cached rerun's result differs only in its bookkeeping (chunks reused), which no figure shows.
    rerun = dataclasses.replace(result, chunks={**result.chunks, "reused": result.chunks["total"], "computed": 0})
    assert write_figures(result, tmp_path / "figures") == write_figures(rerun, tmp_path / "figures") == paths
    assert [path.stat().st_mtime_ns for path in paths] == drawn   # not drawn again
    with_pdf = write_figures(result, tmp_path / "figures", formats=("png", "pdf"))
    assert sorted(path.name for path in with_pdf) == sorted(f"{stem}.{kind}" for stem in stems
                                                            for kind in ("png", "pdf"))


def test_figures_drawn_by_worker_processes_equal_those_drawn_here(twin_folder, tmp_path):
    # Reference: the same figures drawn one after another in this process (the builtin map); a
    # figure drawn in a worker must be the same file, byte for byte, in the same order.
    _, result = sweep(twin_folder)
    here = write_figures(result, tmp_path / "here")
    there = write_figures(result, tmp_path / "workers", mapper=local_mapper(ParallelPlan(jobs=2)))
    assert [path.name for path in there] == [path.name for path in here]
    assert [path.read_bytes() for path in there] == [path.read_bytes() for path in here]


def test_command_writes_json_and_figures(twin_folder, tmp_path, capsys):
    out = tmp_path / "out"
    status = main(["sweep", str(twin_folder), "-o", str(out), "--starts", "256", "--step-factors", "1,0.6",
                   "--jobs", "1", "--resolution", "11", "--json"])
    assert status == 0  # the scenario's start lies inside the safe region (derivation above)
    payload = json.loads(capsys.readouterr().out)
    assert payload["design"]["points"] == 256
    assert [row["step_factor"] for row in payload["by_step_factor"]] == [1.0, 0.6]
    for row in payload["by_step_factor"]:
        assert sum(row[f"{label}_share"] for label in CATEGORIES) == pytest.approx(1.0)
    assert payload["recommendation"]["step_factor"] == 0.6
    assert json.loads((out / "sweep.json").read_text())["best"] == payload["best"]
    assert (out / "figures" / "sweep-basins-a-b.png").is_file()


def test_command_rejects_a_parameter_without_range(write_scenario, capsys):
    toml = twin.scenario_toml().replace("b = { start = 0.5, range = [-1.5, 2.0] }", "b = { start = 0.5 }")
    folder = write_scenario(toml, model=twin.MODEL, data=twin.DATA)
    assert main(["sweep", str(folder), "--jobs", "1"]) == 2
    message = capsys.readouterr().err
    assert "scenario.toml" in message and "b: the sweep needs a range" in message


@pytest.mark.parametrize("option", [["--step-factors", "1,1.5"], ["--starts", "0"], ["--solver", "gm"],
                                    ["--resolution", "1"]])
def test_command_rejects_bad_options(twin_folder, capsys, option):
    assert main(["sweep", str(twin_folder), "--jobs", "1", *option]) == 2
    assert option[0] in capsys.readouterr().err
