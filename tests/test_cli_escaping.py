"""User strings reaching the terminal and the figures: rich markup and control characters in the
title, the column names and the -o path, and matplotlib mathtext in a column name, through every
command that prints tables or draws figures."""
from __future__ import annotations

import pytest

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
TOML = """
title = "[/] decay [link=http://x]y[/link] \\u001b[31m"
[data]
file = "data.csv"
x = '{x}'
y = '{y}'
[model]
file = "model.py"
jacobian = "jacobian"
[parameters]
amplitude = {{ start = 4.0, range = [0.1, 10.0] }}
rate = {{ start = 0.5, range = [0.01, 5.0] }}
[sweep]
design = "grid"
points = 16
resolution = 4
[bootstrap]
samples = 20
[identifiability]
profile_points = 7
"""


@pytest.fixture(scope="module")
def hostile_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("hostile")
    (folder / "model.py").write_text(MODEL)
    (folder / "data.csv").write_text(DATA)
    (folder / "scenario.toml").write_text(TOML.format(x=X_COLUMN, y=Y_COLUMN))
    return folder


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
