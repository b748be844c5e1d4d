"""The ``fitaudit`` command line: one sub-command per module, no computation here.

Each command module provides ``register(subparsers)``, which adds its parser and sets
``handler`` to a function ``(args) -> exit status``. Exit status 2 always means bad input.
"""
from __future__ import annotations

import argparse
import sys

from .. import __version__
from . import bootstrap, check, derivatives, fit, identify, new, run, strd, sweep
from . import list as list_command   # a module named after its command; 'list' would hide the builtin here
from .common import run_handler

COMMANDS = (run, list_command, new, check, fit, strd, sweep, derivatives, bootstrap, identify)

DESCRIPTION = """\
fitaudit audits a nonlinear least-squares fit before you trust, publish or hand it over:
does it depend on the starting guess or the step factor, are the hand-derived derivatives
right, how uncertain are the parameters, and can the data determine them at all?

A scenario is a folder with scenario.toml, a CSV data file and a model (see README.md);
bundled scenarios can be named instead ('fitaudit list'). Start with the whole audit:
  fitaudit run probe-cooling --quick
or write your own scenario:  fitaudit new my-fit
"""


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="fitaudit", description=DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"fitaudit {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", title="commands")
    for command in COMMANDS:
        command.register(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``fitaudit`` console script and of ``python -m audit``."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help()
        return 2
    return run_handler(args)


if __name__ == "__main__":
    sys.exit(main())
