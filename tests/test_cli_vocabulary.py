"""One vocabulary across commands: a concept has one option name, spelling and default everywhere."""
from __future__ import annotations

import argparse
import json
from pathlib import Path

import pytest
from scipy.optimize import least_squares

from audit.cli import build_parser, main
from audit.inputs.scenario import load_scenario

BUNDLED = str(Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling")

#: Spellings that named one concept in one command and another elsewhere, or a concept twice.
REMOVED = ("--method", "--methods", "--points", "--step-factor")
#: Each shared concept's one spelling (README, "One vocabulary across commands").
CONCEPTS = {"solver": "--solver", "step factors": "--step-factors", "jobs": "--jobs", "output": "--out"}


def command_parsers() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    subparsers = next(action for action in parser._actions if isinstance(action, argparse._SubParsersAction))
    return dict(subparsers.choices)


def options(parser: argparse.ArgumentParser) -> dict[str, argparse.Action]:
    return {flag: action for action in parser._actions for flag in action.option_strings}


def test_no_command_keeps_a_removed_spelling():
    for name, parser in command_parsers().items():
        found = set(REMOVED) & set(options(parser))
        assert not found, f"fitaudit {name} still has {sorted(found)}"


def test_shared_options_have_one_default_everywhere():
    jobs_defaults, out_defaults = set(), set()
    for parser in command_parsers().values():
        flags = options(parser)
        if "--jobs" in flags:
            jobs_defaults.add(flags["--jobs"].default)
        if "--out" in flags:
            out_defaults.add(flags["--out"].default)
            assert "-o" in flags and flags["-o"] is flags["--out"]
    # One rule (README): every core by default; -1 is joblib's count for "every core".
    assert jobs_defaults == {-1}
    assert out_defaults == {"fitaudit-output"}
    parsers = command_parsers()
    # Every command that writes results writes them to -o, the later stages read the sweep from it.
    # (At least these: a command added later, such as one running every stage, joins them.)
    assert {name for name, parser in parsers.items() if "--out" in options(parser)} >= {
        "sweep", "derivatives", "bootstrap", "identify"}
    assert {name for name, parser in parsers.items() if "--solver" in options(parser)} >= {"fit", "strd", "sweep"}


@pytest.mark.parametrize("argv", [["fit", BUNDLED, "--step-factor", "0.5"],
                                  ["bootstrap", BUNDLED, "--resampl", "wild"],
                                  ["sweep", BUNDLED, "--start", "100"]])
def test_a_prefix_of_an_option_is_not_accepted(argv, capsys):
    # argparse's prefix matching would let a removed spelling live on as an abbreviation.
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2 and "unrecognized arguments" in capsys.readouterr().err


def test_fit_solver_option_decides_whether_a_far_start_converges(capsys):
    # tau = 300 with a full Gauss-Newton step overshoots into a flat region where the Jacobian
    # loses rank (README walkthrough); Levenberg-Marquardt's trust region reaches the minimum.
    far = ["fit", BUNDLED, "--start", "tau=300", "--step-factors", "1", "--json"]
    assert main([*far, "--solver", "gn"]) == 1
    gauss_newton = json.loads(capsys.readouterr().out)
    assert gauss_newton["method"] == "gn" and gauss_newton["outcome"] != "converged"
    assert main([*far, "--solver", "lm"]) == 0
    levenberg = json.loads(capsys.readouterr().out)
    assert levenberg["method"] == "lm" and levenberg["outcome"] == "converged"
    problem = load_scenario(BUNDLED).problem
    # Reference: scipy.optimize.least_squares (method "lm") from the scenario's start, near the minimum.
    reference = least_squares(lambda a: problem.sqrt_weights * (problem.predict(a[None])[0] - problem.y),
                              [20.0, 60.0, 100.0], method="lm", xtol=1e-14, ftol=1e-14, gtol=1e-14).x
    assert [levenberg["params"][name] for name in problem.names] == pytest.approx(reference, rel=1e-6)


def test_fit_takes_one_step_factor(capsys):
    assert main(["fit", BUNDLED, "--step-factors", "1,0.5"]) == 2
    assert "one value" in capsys.readouterr().err
