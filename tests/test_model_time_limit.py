"""A model that is slow, or never returns, at some parameters: ``[model] time_limit`` is a budget
per chunk of fits; once a chunk has spent it, its runs still fitting are timed out, the chunk
returns, and the rest of the stage carries on and counts them.

Outside references: scipy.optimize.least_squares for every fit that is not timed out.
"""
from __future__ import annotations

import json
import time

import numpy as np
import pytest
from scenario_files import DECAY_DATA, DECAY_PARAMETERS, MODEL_FILE, scenario_toml
from scipy.optimize import least_squares

from audit import InputError
from audit.cli import main
from audit.engine.batch import fit_batch
from audit.engine.outcomes import Outcome
from audit.engine.problem import Problem
from audit.inputs.scenario import load_scenario
from audit.parallel.chunk_cache import ChunkStore
from audit.parallel.plan import ParallelPlan
from audit.sweep import run as sweep_module
from audit.sweep.run import SweepRequest, run_sweep
from audit.uncertainty import bootstrap as bootstrap_module
from audit.uncertainty.bootstrap import run_bootstrap
from audit.uncertainty.refits import chunk_generator
from audit.uncertainty.resampling import build_scheme
from audit.uncertainty.replicates import FATES, classify

TOML = scenario_toml(model={**MODEL_FILE, "time_limit": 1.0},
                     parameters={**DECAY_PARAMETERS, "amplitude": {"start": 4.0, "range": [0.1, 60.0]}})
#: Sleeps far longer than any limit here whenever a run's amplitude is above 59: without the
#: limit a test would wait a minute and then fail on its outcomes.
SLEEPING = """
import time
import numpy as np

def model(t, amplitude, rate):
    if np.any(amplitude > 59):
        time.sleep(60)
    return amplitude * np.exp(-rate * t)
"""
HANGING = """
import numpy as np

def model(t, amplitude, rate):
    while np.any(amplitude > 59):    # never returns for these runs
        pass
    return amplitude * np.exp(-rate * t)
"""


def least_squares_fit(t: np.ndarray, y: np.ndarray, start) -> np.ndarray:
    """scipy.optimize.least_squares of amplitude·exp(−rate·t) to ``y``."""
    return least_squares(lambda p: p[0] * np.exp(-p[1] * t) - y, start, xtol=1e-14, ftol=1e-14).x


def test_a_chunk_out_of_time_times_out_its_runs_still_fitting_and_keeps_those_that_ended():
    # Two runs in one chunk, each on its own data: run 0 converges in a few steps; run 1, with
    # step factor 0.1 towards a rate of 4, creeps past rate 3 after about 25 steps, where this
    # model sleeps. The chunk's deadline interrupts that call: run 1 is timed out, at its start,
    # and run 0 keeps its fit.
    t = np.arange(6.0)
    near, far = 5.0 * np.exp(-0.47 * t), 5.0 * np.exp(-4.0 * t)

    def model(t, amplitude, rate):
        if np.any(rate > 3):
            time.sleep(60)
        return amplitude * np.exp(-rate * t)

    problem = Problem(model=model, x=t, y=near, names=("amplitude", "rate"), time_limit=1.0)
    fits = fit_batch(problem, [[4.0, 0.5], [5.0, 1.0]], np.array([1.0, 0.1]), y=np.stack([near, far]), tol=1e-10,
                     max_iter=200)
    assert list(fits.outcome) == [Outcome.CONVERGED, Outcome.TIMED_OUT]
    np.testing.assert_allclose(fits.params[0], least_squares_fit(t, near, [4.0, 0.5]), rtol=1e-8)
    assert list(fits.params[1]) == [5.0, 1.0] and np.isnan(fits.ssr[1])
    # The next chunk has a budget of its own.
    again = fit_batch(problem, [[4.0, 0.5]], 1.0, tol=1e-10, max_iter=200)
    assert again.outcome[0] == Outcome.CONVERGED


def test_a_call_that_never_returns_ends_at_the_chunk_deadline(write_scenario):
    scenario = load_scenario(write_scenario(TOML, model=HANGING, data=DECAY_DATA))
    fits = fit_batch(scenario.problem, [[4.0, 0.5], [60.0, 0.5]], 1.0, tol=1e-10, max_iter=100)
    # Both runs were in the call that hung: neither had ended.
    assert list(fits.outcome) == [Outcome.TIMED_OUT] * 2
    assert "[model] time_limit" in Outcome.TIMED_OUT.meaning


def test_a_single_fit_that_times_out_says_so_naming_the_key(write_scenario, capsys):
    # Plain Gauss-Newton with step factor 0.1 from rate 1 towards data decaying at rate 4 creeps
    # past rate 3, where the model sleeps (as in the first test of this file).
    data = "t,signal\n" + "".join(f"{t},{5.0 * np.exp(-4.0 * t):.6g}\n" for t in range(6))
    toml = (TOML.replace("start = 4.0", "start = 5.0").replace("start = 0.5", "start = 1.0")
            + "[solver]\nstep_factors = [0.1]\n")
    folder = write_scenario(toml, model=SLEEPING.replace("amplitude > 59", "rate > 3"), data=data)
    assert main(["fit", str(folder)]) == 1
    text = " ".join(capsys.readouterr().out.split())
    assert "outcome: timed_out" in text and "raise [model] time_limit" in text


def test_outside_a_chunk_a_call_that_never_returns_marks_only_its_runs(write_scenario):
    # A model call that is not part of a fit (a basin test, a band) gets the limit for itself,
    # and the runs that hang are found by splitting the batch.
    scenario = load_scenario(write_scenario(TOML.replace("time_limit = 1.0", "time_limit = 0.2"),
                                            model=HANGING, data=DECAY_DATA))
    values = scenario.problem.predict(np.array([[4.0, 0.5], [60.0, 0.5], [5.0, 0.4]]))
    assert np.isnan(values[1]).all() and np.isfinite(values[[0, 2]]).all()
    np.testing.assert_allclose(values[0], 4.0 * np.exp(-0.5 * scenario.problem.x), rtol=1e-15)


def test_a_model_hanging_at_the_start_is_refused_naming_the_file_and_key(write_scenario):
    folder = write_scenario(TOML.replace("start = 4.0", "start = 60.0").replace("60.0]", "100.0]"),
                            model=HANGING, data=DECAY_DATA)
    with pytest.raises(InputError) as caught:
        load_scenario(folder)
    message = str(caught.value)
    assert str(folder / "model.py") in message and "[model] time_limit" in message


@pytest.mark.parametrize("value", ["0", "-1", "inf", "nan", "\"long\""])
def test_a_time_limit_that_is_no_positive_number_is_refused(write_scenario, value):
    folder = write_scenario(TOML.replace("time_limit = 1.0", f"time_limit = {value}"), model=HANGING, data=DECAY_DATA)
    with pytest.raises(InputError, match=r"\[model\] time_limit"):
        load_scenario(folder)


SWEEP = TOML + """
[solver]
step_factors = [1.0]
[sweep]
design = "grid"
points = 1024
resolution = 4
"""


@pytest.mark.parametrize("jobs", [1, 2])
def test_a_sweep_times_out_the_chunk_that_sleeps_and_the_others_fit(write_scenario, tmp_path, monkeypatch, jobs):
    # A 32 × 32 grid in chunks of 256 starts: amplitude is the slow axis of the grid, so the last
    # chunk holds the rows 24-31 and with them the one row at amplitude 60, where the model
    # sleeps. No run from the other rows goes past amplitude 59 (the amplitude of this decay is
    # about 5). The maps' one chunk spans amplitude to 60 as well.
    monkeypatch.setattr(sweep_module, "CHUNK_RUNS", 256)
    scenario = load_scenario(write_scenario(SWEEP, model=SLEEPING, data=DECAY_DATA))
    request = SweepRequest.from_scenario(scenario)
    result = run_sweep(scenario, request, ParallelPlan(jobs=jobs), tmp_path / "out")
    payload = result.to_dict()
    assert [row["timed_out_share"] for row in payload["by_step_factor"]] == [256 / 1024]
    assert payload["maps"][0]["shares"][0][0][-1] == 1.0         # the map's timed-out share
    assert any("[model] time_limit = 1 s" in note for note in payload["warnings"])
    store = ChunkStore(result.cache, "design")
    reference = least_squares_fit(scenario.problem.x, scenario.problem.y, [4.0, 0.5])
    for index in range(4):
        chunk = store.load(index)
        timed_out = chunk["outcome"] == Outcome.TIMED_OUT
        assert timed_out.all() if index == 3 else not timed_out.any()
        # Every run that converged, in any chunk, reached the least-squares fit.
        ends = chunk["converged_params"]
        np.testing.assert_allclose(ends, np.broadcast_to(reference, ends.shape), rtol=1e-6)
    best = np.array([payload["best"]["params"][name] for name in ("amplitude", "rate")])
    np.testing.assert_allclose(best, reference, rtol=1e-6)
    # The chunks that did not sleep are exactly those of a model that never sleeps.
    quick = load_scenario(write_scenario(SWEEP.replace("time_limit = 1.0\n", ""), model=SLEEPING.replace(
        "time.sleep(60)", "pass"), data=DECAY_DATA))
    unlimited = run_sweep(quick, request, ParallelPlan(jobs=1), tmp_path / "unlimited")
    for index in range(3):
        ours, theirs = store.load(index), ChunkStore(unlimited.cache, "design").load(index)
        assert json.dumps({k: v.tolist() for k, v in ours.items()}) == json.dumps(
            {k: v.tolist() for k, v in theirs.items()})


def test_a_bootstrap_times_out_the_chunk_that_sleeps_and_the_other_refits_match_least_squares(monkeypatch):
    # 50 residual-bootstrap replicates in chunks of 10. The model sleeps above an amplitude that
    # only one replicate's least-squares fit reaches (halfway between the largest and the next
    # largest of all replicates' and leave-one-out fits, 1.3 % apart for this seed): that
    # replicate's chunk is timed out, every other refit ends at its replicate's least-squares fit.
    monkeypatch.setattr(bootstrap_module, "MAX_CHUNK", 10)
    t = np.linspace(0.0, 5.0, 20)
    y = 5.0 * np.exp(-0.47 * t) + np.random.default_rng(5).normal(0.0, 0.15, t.size)
    ceiling = [np.inf]

    def model(t, amplitude, rate):
        if np.any(amplitude > ceiling[0]):
            time.sleep(60)
        return amplitude * np.exp(-rate * t)

    best = least_squares_fit(t, y, [4.0, 0.5])
    problem = Problem(model=model, x=t, y=y, names=("amplitude", "rate"), time_limit=1.0)
    samples, seed, size = 50, 2, 10
    scheme = build_scheme("residual", problem, best)
    replicates = np.concatenate([scheme.draw(chunk_generator(seed, k), size).y for k in range(samples // size)])
    expected = np.array([least_squares_fit(t, replicate, best) for replicate in replicates])
    left_out = np.array([least_squares(lambda p, i=i: np.delete(p[0] * np.exp(-p[1] * t) - y, i), best,
                                       xtol=1e-14, ftol=1e-14).x for i in range(t.size)])
    highest = np.sort(np.concatenate([expected[:, 0], left_out[:, 0]]))[-2:]
    assert highest[1] - highest[0] > 0.01 * highest[1]          # a clear gap for the ceiling
    ceiling[0] = highest.mean()
    sleeper = int(np.argmax(expected[:, 0]))
    result = run_bootstrap(problem, best, samples=samples, seed=seed)
    in_chunk = np.arange(samples) // size == sleeper // size
    fates = np.array(result.to_dict()["replicates"]["fate"])
    assert set(fates[in_chunk]) == {"timed_out"} and "timed_out" not in set(fates[~in_chunk])
    assert result.replicates.counts()["timed_out"] == size and result.jackknife.counts()["timed_out"] == 0
    assert any("[model] time_limit" in note for note in result.notes)
    used = result.replicates.used
    assert list(np.flatnonzero(~used)) == list(np.flatnonzero(in_chunk))
    np.testing.assert_allclose(result.replicates.params[used], expected[used], rtol=1e-6)


def test_a_converged_refit_whose_descent_ran_out_of_time_is_counted_timed_out_not_another_solution():
    # The fate rule of uncertainty.replicates (its module docstring): a converged refit is "best"
    # when the descent from the best fit on the same data confirms it, "other" when the descent
    # ends elsewhere or fails, and "timed_out" when the time limit cut the descent short.
    converged, timed_out = int(Outcome.CONVERGED), int(Outcome.TIMED_OUT)
    outcome = np.array([converged, converged, converged, timed_out], dtype=np.int8)
    descent_outcome = np.array([converged, timed_out, int(Outcome.STALLED), timed_out], dtype=np.int8)
    same = np.array([True, False, False, False])
    fits = classify(np.zeros((4, 2)), np.zeros(4), outcome, np.zeros(4, dtype=np.int64), np.zeros((4, 2)),
                    descent_outcome, same)
    assert [FATES[k] for k in fits.fate] == ["best", "timed_out", "other", "timed_out"]
