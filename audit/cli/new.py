"""``fitaudit new``: write a ready-to-edit scenario folder."""
from __future__ import annotations

import argparse
from pathlib import Path

from rich.markup import escape

from ..inputs.template import write_new_scenario
from .common import EXIT_OK, add_command, out

DESCRIPTION = """\
Write a new scenario folder to start from: a commented scenario.toml, a model and a small
data.csv made from that model, so that 'fitaudit check FOLDER' passes at once. Without
--formula the model is model.py, an exponential decay with its hand-derived Jacobian, to be
replaced by your own; with --formula the formula is the model (the predictor is called x) and
every other name in it becomes a parameter starting at 1.

Then put your measurements into data.csv (or point [data] at your file), adjust the parameter
starts and ranges, and run the audit. An existing non-empty folder is never overwritten."""

EXAMPLES = """\
  fitaudit new my-fit
  fitaudit new decay --formula "a * exp(-k * x) + c"
  fitaudit check my-fit"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "new", "write a ready-to-edit scenario folder", DESCRIPTION, EXAMPLES, run)
    parser.add_argument("folder", metavar="FOLDER", help="the folder to create (must not exist, or be empty)")
    parser.add_argument("--formula", metavar="TEXT",
                        help="the model as a formula in x, e.g. \"a * exp(-k * x) + c\" (default: a Python model file)")


def run(args: argparse.Namespace) -> int:
    folder = Path(args.folder)
    written = write_new_scenario(folder, args.formula)
    out.print(f"wrote {', '.join(escape(str(path)) for path in written)}", soft_wrap=True)
    out.print(f"next: edit {escape(str(folder / 'scenario.toml'))}, then run 'fitaudit check {escape(str(folder))}'",
              soft_wrap=True)
    return EXIT_OK
