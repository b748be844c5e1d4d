"""Hostile input, tried on purpose: every bad scenario, data file or formula is one InputError line
naming the file and the key, column or row; the command line turns it into exit status 2.

The fixed cases are the ones a first campaign found accepted-but-wrong or crashing; the
hypothesis tests fuzz around them with a small, bounded number of examples.
"""
from __future__ import annotations

import io
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
# Under their old names: hypothesis seeds the derandomised examples of a test from its source text.
from scenario_files import DECAY_DATA as DATA
from scenario_files import DECAY_MODEL as MODEL
from scenario_files import LOG_RATE_PARAMETERS, scenario_toml

from audit import InputError
from audit.inputs.scenario import load_scenario

#: The text the fuzz below cuts at positions drawn from its length: it starts with a blank line so
#: that those positions, and with them the derandomised examples, stay what they have been.
TOML = "\n" + scenario_toml(title="decay", parameters=LOG_RATE_PARAMETERS)

FUZZ = settings(max_examples=25, deadline=2000, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


def failure(folder) -> str:
    """The message of the InputError that loading ``folder`` raises (fails the test otherwise)."""
    with pytest.raises(InputError) as caught:
        load_scenario(folder)
    message = str(caught.value)
    assert "\n" not in message and "\r" not in message, message
    return message


# ---- the data file ------------------------------------------------------------------------------


@pytest.mark.parametrize("content, line", [
    (DATA.encode().replace(b"1.8", b"1.8\xe9"), 4),        # a latin-1 é on line 4
    (DATA.encode().replace(b"3.1", b"\xff\xfe\x00\x01"), 3),  # binary bytes on line 3
])
def test_a_data_file_that_is_not_utf8_names_the_file_and_line(write_scenario, content, line):
    folder = write_scenario(TOML, model=MODEL)
    (folder / "data.csv").write_bytes(content)
    message = failure(folder)
    # The line counted by hand in the bytes above (header = line 1).
    assert str(folder / "data.csv") in message and f"line {line}" in message and "UTF-8" in message


def test_a_data_file_with_nul_bytes_is_refused(write_scenario):
    folder = write_scenario(TOML, model=MODEL)
    (folder / "data.csv").write_bytes(DATA.encode().replace(b"1.1", b"1\x001"))
    message = failure(folder)
    assert str(folder / "data.csv") in message and "line 5" in message


def test_byte_order_marks_and_windows_line_ends_are_read_as_plain_utf8(write_scenario):
    folder = write_scenario(TOML, model=MODEL)
    (folder / "data.csv").write_bytes(b"\xef\xbb\xbf" + DATA.replace("\n", "\r\n").encode())
    (folder / "scenario.toml").write_bytes(b"\xef\xbb\xbf" + TOML.replace("\n", "\r\n").encode())
    scenario = load_scenario(folder)
    # Reference: numpy.loadtxt on the plain file.
    expected = np.loadtxt(io.StringIO(DATA), delimiter=",", skiprows=1)
    np.testing.assert_array_equal(scenario.problem.x, expected[:, 0])
    np.testing.assert_array_equal(scenario.problem.y, expected[:, 1])


def test_a_duplicated_column_name_is_refused(write_scenario):
    folder = write_scenario(TOML, model=MODEL)
    (folder / "data.csv").write_text("t,signal,signal\n" + "".join(f"{r},{r}\n" for r in DATA.splitlines()[1:]))
    message = failure(folder)
    assert str(folder / "data.csv") in message and "'signal'" in message and "twice" in message


@pytest.mark.parametrize("cell", ["1_0", "\uff11", "\u0663"])
def test_numbers_python_would_read_but_a_csv_reader_must_not(write_scenario, cell):
    # Python's float() reads these as 10, 1 and 3; numpy.loadtxt, the reference CSV number
    # reader, refuses each of them, and so must we: a typo is not a number.
    with pytest.raises(ValueError):
        np.loadtxt(io.StringIO(cell + "\n"))
    folder = write_scenario(TOML, model=MODEL, data=DATA.replace("3,1.1", f"3,{cell}"))
    message = failure(folder)
    assert str(folder / "data.csv") in message and "'signal'" in message and "line 5" in message


@pytest.mark.parametrize("delimiter", ["", ";;"])
def test_a_delimiter_of_the_wrong_length_names_the_file(write_scenario, delimiter):
    folder = write_scenario(TOML.replace('y = "signal"', f'y = "signal"\ndelimiter = "{delimiter}"'),
                            model=MODEL, data=DATA)
    message = failure(folder)
    assert str(folder / "data.csv") in message and "delimiter" in message


# ---- the scenario file --------------------------------------------------------------------------

#: [section] key = value -> what the message must name. Limits: README "When the input is wrong".
BAD_SETTINGS = [
    ("solver", "tolerance", "inf"),
    ("solver", "tolerance", "nan"),
    ("solver", "tolerance", "-1e-8"),
    ("solver", "tolerance", "0.0"),
    ("solver", "max_iterations", "1_000_000_000"),
    ("solver", "step_factors", "[0.5, 0.5]"),
    ("solver", "step_factors", "[0.0]"),
    ("solver", "step_factors", "[1.5]"),
    ("sweep", "points", "1_000_000_000_000"),
    ("sweep", "resolution", "100000"),
    ("sweep", "seed", "-1"),
    ("bootstrap", "samples", "1_000_000_000"),
    ("bootstrap", "seed", "-5"),
    ("identifiability", "profile_points", "1_000_000_000"),
    ("identifiability", "random_points", "1_000_000_000"),
    ("identifiability", "seed", "-2"),
    ("derivatives", "points", "1_000_000_000"),
    ("derivatives", "seed", "-3"),
    ("identifiability", "profile_reach", "inf"),
    ("identifiability", "collinearity_limit", "nan"),
]


@pytest.mark.parametrize("section, key, value", BAD_SETTINGS)
def test_absurd_or_wrong_settings_name_the_scenario_key(write_scenario, section, key, value):
    folder = write_scenario(TOML + f"\n[{section}]\n{key} = {value}\n", model=MODEL, data=DATA)
    message = failure(folder)
    assert str(folder / "scenario.toml") in message and f"[{section}] {key}" in message
    assert "--" not in message  # the scenario key, not a command-line option


@pytest.mark.parametrize("value, expected", [("1e-12", 1e-12), ("0.5", 0.5)])
def test_sane_tolerances_pass(write_scenario, value, expected):
    folder = write_scenario(TOML + f"\n[solver]\ntolerance = {value}\n", model=MODEL, data=DATA)
    assert load_scenario(folder).solver.tolerance == expected


# ---- fuzzed --------------------------------------------------------------------------------------

HOSTILE_VALUES = st.one_of(
    st.integers(min_value=-10**15, max_value=10**15).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(lambda v: "nan" if math.isnan(v) else
                                                       ("inf" if v == math.inf else "-inf" if v == -math.inf
                                                        else repr(v))),
    st.sampled_from(['"grid"', '"x"', '""', "true", "[]", "[0.5, 0.5]", "[[\"a\", \"a\"]]", "{}", "[1, \"a\"]",
                     '"[/]"', '"\\u001b[31m"', "[-1.0, 2.0]", "[0.0]", "[2.0]"]),
)
SETTING_KEYS = st.sampled_from([
    ("solver", "tolerance"), ("solver", "max_iterations"), ("solver", "step_factors"), ("solver", "method"),
    ("sweep", "points"), ("sweep", "resolution"), ("sweep", "seed"), ("sweep", "design"), ("sweep", "maps"),
    ("bootstrap", "samples"), ("bootstrap", "confidence"), ("bootstrap", "seed"),
    ("identifiability", "profile_points"), ("identifiability", "random_points"), ("derivatives", "points"),
])


@FUZZ
@given(key=SETTING_KEYS, value=HOSTILE_VALUES)
def test_fuzzed_settings_load_or_name_the_key(write_scenario, key, value):
    section, name = key
    folder = write_scenario(TOML + f"\n[{section}]\n{name} = {value}\n", model=MODEL, data=DATA)
    try:
        load_scenario(folder)
    except InputError as error:
        message = str(error)
        assert "\n" not in message and str(folder / "scenario.toml") in message
        assert f"[{section}] {name}" in message or "not valid TOML" in message


@FUZZ
@given(cut=st.integers(min_value=0, max_value=len(TOML)))
def test_truncated_scenario_files_load_or_name_the_file(write_scenario, cut):
    folder = write_scenario(TOML[:cut], model=MODEL, data=DATA)
    try:
        load_scenario(folder)
    except InputError as error:
        assert "\n" not in str(error) and str(folder / "scenario.toml") in str(error)


CELLS = st.one_of(st.text(max_size=6), st.sampled_from(["nan", "inf", "-inf", "1e309", "1_0", "", " ", "\x00",
                                                        "1,2", '"', "\r", "\u00e9", "1e-320"]))


@FUZZ
@given(row=st.integers(min_value=0, max_value=6), column=st.integers(min_value=0, max_value=1), cell=CELLS)
def test_fuzzed_data_cells_load_or_name_the_file(write_scenario, row, column, cell):
    lines = [line.split(",") for line in DATA.splitlines()]
    lines[row][column] = cell
    folder = write_scenario(TOML, model=MODEL)
    (folder / "data.csv").write_bytes("\n".join(",".join(line) for line in lines).encode("utf-8", "surrogatepass"))
    try:
        scenario = load_scenario(folder)
    except InputError as error:
        assert "\n" not in str(error) and str(folder / "data.csv") in str(error)
    else:
        # Whatever was accepted is finite and what numpy.loadtxt reads from the same cells.
        assert np.all(np.isfinite(scenario.problem.y)) and np.all(np.isfinite(scenario.problem.x))
