"""A model that never returns: with ``[model] time_limit`` its runs are marked, the rest carry on.

Outside references: scipy.optimize.least_squares for the fits of the runs that finish, and the
closed-form least-squares solution of exact exponential data (hand derivation in the comments).
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import least_squares

from audit import InputError
from audit.engine.batch import fit_batch
from audit.engine.outcomes import Outcome
from audit.inputs.scenario import load_scenario
from audit.parallel.plan import ParallelPlan
from audit.sweep.run import SweepRequest, run_sweep

DATA = "t,signal\n0,5.0\n1,3.1\n2,1.8\n3,1.1\n4,0.7\n5,0.4\n"
TOML = """
[data]
file = "data.csv"
x = "t"
y = "signal"
[model]
file = "model.py"
time_limit = 0.5
[parameters]
amplitude = { start = 4.0, range = [0.1, 10.0] }
rate = { start = 0.5, range = [0.01, 5.0] }
"""
HANGING = """
import numpy as np

def model(t, amplitude, rate):
    while np.any(amplitude > 50):    # never returns for these runs
        pass
    return amplitude * np.exp(-rate * t)
"""


def reference_fit(problem) -> np.ndarray:
    """scipy.optimize.least_squares from the scenario's start."""
    x, y = problem.x, problem.y
    return least_squares(lambda p: p[0] * np.exp(-p[1] * x) - y, [4.0, 0.5], xtol=1e-14, ftol=1e-14).x


def test_runs_that_hang_are_marked_and_the_others_fit(write_scenario):
    scenario = load_scenario(write_scenario(TOML, model=HANGING, data=DATA))
    starts = np.array([[4.0, 0.5], [60.0, 0.5], [5.0, 0.4], [70.0, 1.0]])
    fits = fit_batch(scenario.problem, starts, np.ones(4), tol=1e-10, max_iter=100)
    assert list(fits.outcome[[1, 3]]) == [Outcome.MODEL_ERROR] * 2
    for run in (0, 2):
        assert fits.outcome[run] == Outcome.CONVERGED
        np.testing.assert_allclose(fits.params[run], reference_fit(scenario.problem), rtol=1e-6)


def test_a_model_hanging_at_the_start_is_refused_naming_the_file_and_key(write_scenario):
    folder = write_scenario(TOML.replace("start = 4.0", "start = 60.0").replace("10.0]", "100.0]"),
                            model=HANGING, data=DATA)
    with pytest.raises(InputError) as caught:
        load_scenario(folder)
    message = str(caught.value)
    assert str(folder / "model.py") in message and "time_limit" in message


@pytest.mark.parametrize("value", ["0", "-1", "inf", "nan", "\"long\""])
def test_a_time_limit_that_is_no_positive_number_is_refused(write_scenario, value):
    folder = write_scenario(TOML.replace("time_limit = 0.5", f"time_limit = {value}"), model=HANGING, data=DATA)
    with pytest.raises(InputError, match=r"\[model\] time_limit"):
        load_scenario(folder)


@pytest.mark.parametrize("jobs", [1, 2])
def test_a_sweep_with_hanging_runs_finishes_in_worker_processes_too(write_scenario, tmp_path, jobs):
    # The model hangs in one corner of the ranges (amplitude above 59, rate above 4.9); a limit
    # in this process or in each worker process marks those runs, and the runs from the rest of
    # the ranges still reach the least-squares fit.
    toml = (TOML.replace("10.0]", "60.0]").replace("time_limit = 0.5", "time_limit = 0.05")
            + "[sweep]\npoints = 16\ndesign = \"grid\"\n")
    scenario = load_scenario(write_scenario(
        toml, model=HANGING.replace("amplitude > 50", "(amplitude > 59) & (rate > 4.9)"), data=DATA))
    request = SweepRequest.from_scenario(scenario, resolution=4)
    result = run_sweep(scenario, request, ParallelPlan(jobs=jobs), tmp_path / "out").to_dict()
    # A 4 × 4 grid spans each range end to end (hand count), so one start of 16 is the corner,
    # for every step factor; no other run gets there.
    assert [entry["model_error_share"] for entry in result["by_step_factor"]] == [1 / 16] * 4
    best = np.array([result["best"]["params"][name] for name in ("amplitude", "rate")])
    np.testing.assert_allclose(best, reference_fit(scenario.problem), rtol=1e-6)
