"""User strings reaching the terminal and the figures: rich markup and control characters in the
title, the column names and the -o path, and matplotlib mathtext in a column name, through every
command that prints tables or draws figures."""
from __future__ import annotations

import pytest
from scenario_files import MODEL_FILE, data_columns, scenario_toml, write_scenario_folder

from audit.cli import main

MODEL = """
import numpy as np

def model(t, amplitude, rate):
    return amplitude * np.exp(-rate * t)

def jacobian(t, amplitude, rate):
    decay = np.exp(-rate * t)
    return decay, -amplitude * t * decay
"""
# A column name that is both rich markup ('[/]' closes a tag that was never opened) and
# unbalanced mathtext ('$\frac{a$' makes matplotlib's parser fail).
X_COLUMN = "$\\frac{a$ [/]"
Y_COLUMN = "[red]signal[/red]"
DATA = (f'"{X_COLUMN}",{Y_COLUMN}\n0,5.0\n1,3.1\n2,1.8\n3,1.1\n4,0.7\n5,0.45\n6,0.26\n7,0.17\n')
TOML = scenario_toml(
    title="[/] decay [link=http://x]y[/link] \\u001b[31m",
    # Doubled, the backslash of the mathtext reaches the column name as one (a TOML escape).
    data=data_columns(X_COLUMN.replace("\\", "\\\\"), Y_COLUMN),
    model={**MODEL_FILE, "jacobian": "jacobian"},
    sweep={"design": "grid", "points": 16, "resolution": 4}, bootstrap={"samples": 20},
    identifiability={"profile_points": 7})


@pytest.fixture(scope="module")
def hostile_folder(tmp_path_factory):
    return write_scenario_folder(tmp_path_factory.mktemp("hostile"), TOML, MODEL, DATA)


@pytest.mark.parametrize("command", [["sweep"], ["fit"], ["bootstrap"], ["identify"], ["derivatives"],
                                     ["run", "--quick"]])
def test_markup_and_mathtext_in_user_strings_are_shown_as_written(capsys, hostile_folder, tmp_path, command):
    # Reference: rich's markup grammar (a '[' followed by a letter, '/' or '@' opens or closes a
    # tag; an unmatched '[/]' raises MarkupError) and matplotlib's mathtext (text between two
    # unescaped '$' is parsed as TeX math; '\frac{a' with no closing brace raises ValueError).
    out_folder = tmp_path / "out [/] [bold]x"
    argv = [command[0], str(hostile_folder), *command[1:]]
    if command[0] != "fit":
        argv += ["-o", str(out_folder), *(["--jobs", "1"] if command[0] != "derivatives" else [])]
    status = main(argv)
    captured = capsys.readouterr()
    assert status in (0, 1), captured.err
    printed = captured.out + captured.err
    assert "\x1b" not in printed
    if command[0] != "fit":
        # rich folds long lines; the path must still appear literally once whitespace is removed.
        assert "out[/][bold]x" in "".join(printed.split())
        pngs = sorted(out_folder.glob("figures/*.png"))
        assert pngs, "no figure was written"
