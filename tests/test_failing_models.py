"""Models that misbehave: only the runs they fail are marked, and the message names the model file."""
from __future__ import annotations

import numpy as np
import pytest
from scenario_files import DECAY_DATA, scenario_toml
from scipy.optimize import least_squares

from audit import InputError
from audit.engine.batch import fit_batch
from audit.engine.outcomes import Outcome
from audit.inputs.scenario import load_scenario

TOML = scenario_toml()
EXITING = """
import sys
import numpy as np

def model(t, amplitude, rate):
    if np.any(amplitude > 50):
        sys.exit(7)
    return amplitude * np.exp(-rate * t)
"""


def assert_only_the_middle_run_failed(scenario, fits) -> None:
    """Run 1 of three ended in a model error; runs 0 and 2 reached the least-squares fit."""
    assert fits.outcome[1] == Outcome.MODEL_ERROR
    # The other runs reach the least-squares fit (reference: scipy.optimize.least_squares).
    x, y = scenario.problem.x, scenario.problem.y
    expected = least_squares(lambda p: p[0] * np.exp(-p[1] * x) - y, [4.0, 0.5], xtol=1e-14, ftol=1e-14).x
    for run in (0, 2):
        assert fits.outcome[run] == Outcome.CONVERGED
        np.testing.assert_allclose(fits.params[run], expected, rtol=1e-6)


def test_a_model_calling_sys_exit_marks_only_its_runs(write_scenario):
    scenario = load_scenario(write_scenario(TOML, model=EXITING, data=DECAY_DATA))
    starts = np.array([[4.0, 0.5], [60.0, 0.5], [5.0, 0.4]])
    fits = fit_batch(scenario.problem, starts, np.ones(3), tol=1e-10, max_iter=100)
    assert_only_the_middle_run_failed(scenario, fits)


def test_a_model_calling_sys_exit_at_the_start_names_the_model_file(write_scenario):
    folder = write_scenario(TOML.replace("start = 4.0", "start = 60.0").replace("10.0]", "100.0]"),
                            model=EXITING, data=DECAY_DATA)
    with pytest.raises(InputError) as caught:
        load_scenario(folder)
    assert str(folder / "model.py") in str(caught.value) and "SystemExit" in str(caught.value)


@pytest.mark.parametrize("body", ["return 'a string'", "return np.exp", "return t + 1j * amplitude * rate"])
def test_a_model_returning_no_real_numbers_names_the_model_file(write_scenario, body):
    model = f"import numpy as np\n\ndef model(t, amplitude, rate):\n    {body}\n"
    folder = write_scenario(TOML, model=model, data=DECAY_DATA)
    with pytest.raises(InputError) as caught:
        load_scenario(folder)
    assert str(folder / "model.py") in str(caught.value) and "\n" not in str(caught.value)


@pytest.mark.parametrize("body", ["return 'fast'", "return np.array([1.0, 2.0])", "return None"])
def test_a_guess_returning_no_dict_names_the_model_file(write_scenario, body):
    model = ("import numpy as np\n\ndef model(t, amplitude, rate):\n    return amplitude * np.exp(-rate * t)\n\n"
             f"def guess(t, y):\n    {body}\n")
    toml = TOML.replace("[model]\n", "[model]\nguess = \"guess\"\n").replace("start = 4.0, ", "")
    folder = write_scenario(toml, model=model, data=DECAY_DATA)
    with pytest.raises(InputError) as caught:
        load_scenario(folder)
    assert str(folder / "model.py") in str(caught.value) and "guess" in str(caught.value)


def test_a_class_as_the_model_names_the_model_file(write_scenario):
    model = "class model:\n    def __init__(self, t, amplitude, rate):\n        pass\n"
    folder = write_scenario(TOML, model=model, data=DECAY_DATA)
    with pytest.raises(InputError) as caught:
        load_scenario(folder)
    assert str(folder / "model.py") in str(caught.value)


SOMETIMES_WRONG_SHAPE = """
import numpy as np

def model(t, amplitude, rate):
    values = amplitude * np.exp(-rate * t)
    if np.any(amplitude > 50):
        return values[:, 0]                     # (B,) instead of (B, m) at these parameters
    return values

def jacobian(t, amplitude, rate):
    decay = np.exp(-rate * t)
    if np.any(rate > 3):
        return [decay]                          # one entry short at these parameters
    return [decay, -amplitude * t * decay]
"""


@pytest.mark.parametrize("bad_start", [[60.0, 0.5], [4.0, 4.0]])
def test_a_wrong_shape_at_some_parameters_only_marks_those_runs(write_scenario, bad_start):
    toml = TOML.replace("[model]\n", "[model]\njacobian = \"jacobian\"\n")
    scenario = load_scenario(write_scenario(toml, model=SOMETIMES_WRONG_SHAPE, data=DECAY_DATA))
    starts = np.array([[4.0, 0.5], bad_start, [5.0, 0.4]])
    fits = fit_batch(scenario.problem, starts, np.ones(3), tol=1e-10, max_iter=100)
    assert_only_the_middle_run_failed(scenario, fits)


def test_observations_whose_squares_overflow_are_refused_naming_the_column(write_scenario):
    # IEEE 754 double precision ends at 1.8e308 (numpy.finfo(float).max): the sum of squares of
    # observations near 1e200 cannot be formed, so no residual sum of squares could be either.
    data = "t,signal\n" + "".join(f"{t},{5e200 * 0.6 ** t:.6g}\n" for t in range(6))
    with pytest.raises(InputError) as caught:
        load_scenario(write_scenario(TOML, model=EXITING, data=data))
    message = str(caught.value)
    assert "data.csv" in message and "'signal'" in message and "rescale" in message


def test_observations_near_1e150_still_fit(write_scenario):
    # Squares of 5e150 stay below 1.8e308 (numpy.finfo(float).max), so these fit as usual:
    # the exact exponential data give amplitude 5e150 and rate −log(0.6) (hand derivation).
    data = "t,signal\n" + "".join(f"{t},{5e150 * 0.6 ** t!r}\n" for t in range(6))
    toml = TOML.replace("start = 4.0, range = [0.1, 10.0]", "start = 4e150, range = [1e149, 1e152]")
    scenario = load_scenario(write_scenario(toml, model=EXITING.replace("> 50", "> 5e160"), data=data))
    fits = fit_batch(scenario.problem, np.array([[4e150, 0.5]]), np.ones(1), tol=1e-10, max_iter=100)
    assert fits.outcome[0] == Outcome.CONVERGED
    np.testing.assert_allclose(fits.params[0], [5e150, -np.log(0.6)], rtol=1e-8)
