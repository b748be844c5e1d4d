"""Scenario loading: what a good scenario gives, and a clear one-line error for each kind of bad input."""
from __future__ import annotations

import numpy as np
import pytest
from scenario_files import LOG_RATE_PARAMETERS, MODEL_FILE, data_columns, scenario_toml

from audit import InputError
from audit.inputs.scenario import load_scenario

MODEL = """
import numpy as np

def model(t, amplitude, rate, offset):
    return amplitude * np.exp(-rate * t) + offset

def jacobian(t, amplitude, rate, offset):
    decay = np.exp(-rate * t)
    return [decay, -amplitude * t * decay, np.ones_like(decay)]
"""

DATA = """
t,signal,sd
0,5.0,0.1
1,3.4,0.1
2,2.4,0.2
3,1.8,0.2
4,1.4,0.2
"""

#: The tests below edit this text (a key renamed, a line added or dropped): one key a line.
TOML = scenario_toml(title="decay", data=data_columns("t", "signal", sigma="sd"),
                     model={**MODEL_FILE, "jacobian": "jacobian"},
                     parameters={**LOG_RATE_PARAMETERS, "offset": 1.0})


def test_good_scenario_builds_a_weighted_problem(write_scenario):
    scenario = load_scenario(write_scenario(TOML, MODEL, DATA))
    problem = scenario.problem
    assert scenario.names == ("amplitude", "rate", "offset")
    np.testing.assert_allclose(problem.weights, 1 / np.array([0.1, 0.1, 0.2, 0.2, 0.2]) ** 2)
    np.testing.assert_allclose(scenario.start, [4.0, 0.5, 1.0])
    assert scenario.parameters[1].axis == "log" and scenario.parameters[2].has_range is False
    assert scenario.solver.step_factors == (1.0, 0.5, 0.25, 0.1)
    assert scenario.warnings == ()
    assert len(scenario.fingerprint) == 64


def test_bundled_scenario_loads_with_its_guess_and_formula():
    from pathlib import Path
    scenario = load_scenario(Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling")
    assert scenario.problem.n_obs == 76 and scenario.problem.has_jacobian
    assert scenario.problem.formula == "T_env + dT * exp(-time_s / tau)"


def test_several_predictor_columns_give_x_of_shape_k_by_m(write_scenario):
    model = "def model(x, a, b):\n    return a * x[0] + b * x[1]\n"
    data = "u,v,w\n1,2,5\n2,1,4\n3,3,9\n4,1,6\n"
    toml = TOML.replace('x = "t"', 'x = ["u", "v"]').replace('y = "signal"', 'y = "w"') \
        .replace('sigma = "sd"\n', "").replace('jacobian = "jacobian"\n', "")
    toml = toml.split("[parameters]")[0] + "[parameters]\na = 1.0\nb = 1.0\n"
    scenario = load_scenario(write_scenario(toml, model, data))
    assert scenario.problem.x.shape == (2, 4)


def error_of(write_scenario, toml=TOML, model=MODEL, data=DATA) -> str:
    with pytest.raises(InputError) as caught:
        load_scenario(write_scenario(toml, model, data))
    message = str(caught.value)
    assert "\n" not in message
    return message


def test_missing_scenario_file(tmp_path):
    with pytest.raises(InputError, match="scenario file not found"):
        load_scenario(tmp_path / "nowhere")


def test_missing_data_file(write_scenario):
    message = error_of(write_scenario, TOML.replace('"data.csv"', '"missing.csv"'))
    assert "missing.csv" in message and "not found" in message


def test_unknown_key_names_the_nearest_valid_key(write_scenario):
    message = error_of(write_scenario, TOML + "[solver]\nstep_factor = [0.5]\n")
    assert "[solver]" in message and "'step_factor'" in message and "did you mean 'step_factors'" in message
    message = error_of(write_scenario, TOML.replace("[data]", "[dta]\n[data]"))
    assert "'dta'" in message and "did you mean 'data'" in message


def test_missing_column_is_named(write_scenario):
    message = error_of(write_scenario, TOML.replace('y = "signal"', 'y = "signl"'))
    assert "data.csv" in message and "'signl'" in message and "did you mean 'signal'" in message


def test_non_numeric_and_non_finite_values_list_the_lines(write_scenario):
    data = DATA.replace("2,2.4,0.2", "2,n/a,0.2").replace("4,1.4,0.2", "4,inf,0.2")
    message = error_of(write_scenario, data=data)
    assert "'signal'" in message and "lines 4, 6" in message and "drop_nonfinite" in message


def test_drop_nonfinite_drops_rows_with_a_warning(write_scenario):
    data = DATA.replace("2,2.4,0.2", "2,,0.2")
    toml = TOML.replace('sigma = "sd"', 'sigma = "sd"\ndrop_nonfinite = true')
    scenario = load_scenario(write_scenario(toml, MODEL, data))
    assert scenario.problem.n_obs == 4
    assert list(scenario.data_lines) == [2, 3, 5, 6]
    assert any("dropped 1 rows" in warning and "line 4" in warning for warning in scenario.warnings)


def test_sigma_must_be_positive(write_scenario):
    message = error_of(write_scenario, data=DATA.replace("3,1.8,0.2", "3,1.8,0"))
    assert "'sd'" in message and "positive" in message and "line 5" in message


def test_fewer_observations_than_parameters(write_scenario):
    message = error_of(write_scenario, data="t,signal,sd\n0,5.0,0.1\n1,3.4,0.1\n")
    assert "2 usable observations for 3 parameters" in message


def test_parameter_not_taken_by_the_model_and_the_reverse(write_scenario):
    message = error_of(write_scenario, TOML.replace("offset = 1.0", "offset = 1.0\noffst = 2.0"))
    assert "'offst' is not a parameter of the model" in message and "did you mean 'offset'" in message
    message = error_of(write_scenario, TOML.replace("offset = 1.0", ""))
    assert "takes 'offset' but it is not listed" in message


def test_model_that_raises_shows_its_own_message_and_line(write_scenario):
    model = MODEL.replace("return amplitude * np.exp(-rate * t) + offset",
                          "raise RuntimeError('calibration table missing')")
    message = error_of(write_scenario, model=model)
    assert "model.py line 5 in model()" in message and "calibration table missing" in message


def test_model_with_the_wrong_shape_says_what_was_expected(write_scenario):
    model = MODEL.replace("return amplitude * np.exp(-rate * t) + offset", "return np.ones(3)")
    message = error_of(write_scenario, model=model)
    assert "shape (3,)" in message and "expected (1, 5)" in message


def test_jacobian_with_too_few_entries(write_scenario):
    model = MODEL.replace("return [decay, -amplitude * t * decay, np.ones_like(decay)]", "return [decay, decay]")
    message = error_of(write_scenario, model=model)
    assert "jacobian returned 2 arrays for 3 parameters" in message


def test_syntax_error_in_the_model_file(write_scenario):
    message = error_of(write_scenario, model=MODEL.replace("def model(", "def model(("))
    assert "model.py line" in message and "SyntaxError" in message


def test_start_outside_its_range_is_only_a_warning(write_scenario):
    scenario = load_scenario(write_scenario(TOML.replace("start = 4.0", "start = 40.0"), MODEL, DATA))
    assert any("start 40.0 lies outside its range [0.1, 10.0]" in warning for warning in scenario.warnings)


@pytest.mark.parametrize("entry, fragment", [
    ("{ start = 1.0, range = [5.0, 1.0] }", "lower < upper"),
    ("{ start = 1.0, scale = \"logg\" }", "did you mean 'log'"),
    ("{ start = 1.0, range = [0.0, 5.0], scale = \"log\" }", "positive lower end"),
    ("{ strat = 1.0 }", "did you mean 'start'"),
    ("\"one\"", "finite number"),
])
def test_bad_parameter_entries(write_scenario, entry, fragment):
    message = error_of(write_scenario, TOML.replace("offset = 1.0", f"offset = {entry}"))
    assert "[parameters] offset" in message and fragment in message


def test_bad_solver_values(write_scenario):
    assert "(0, 1]" in error_of(write_scenario, TOML + "[solver]\nstep_factors = [1.5]\n")
    assert "did you mean 'lm'" in error_of(write_scenario, TOML + "[solver]\nmethod = \"lmm\"\n")
