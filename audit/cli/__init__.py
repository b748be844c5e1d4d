"""The ``fitaudit`` command line: one sub-command per module, no computation here.

Each command module provides ``register(subparsers)``, which adds its parser and sets
``handler`` to a function ``(args) -> exit status``. Exit status 2 always means bad input.

Only the module of the command being run is imported (with the stages, matplotlib and scipy it
needs); the others appear in ``fitaudit --help`` by their one-line summary alone, so that the
overview and a light command do not wait on imports they never use.
"""
from __future__ import annotations

import argparse
import importlib
import sys

from .. import __version__

#: Command name -> its one-line summary in ``fitaudit --help`` (each module registers the same
#: line; tests/test_cli_imports.py checks that they agree). The module is ``audit.cli.<name>``.
COMMANDS = {
    "run": "the whole audit in one command, with a verdict",
    "list": "list the bundled scenarios",
    "new": "write a ready-to-edit scenario folder",
    "check": "validate a scenario and summarise it",
    "fit": "fit once from the start and show every iteration",
    "strd": "check the solver against the NIST StRD reference problems",
    "sweep": "fits from many starts and step factors: basins, safe start and factor",
    "derivatives": "check hand-derived partial derivatives against numeric ones",
    "bootstrap": "bootstrap intervals beside the asymptotic ones, with failed refits",
    "identify": "check that the data determine every parameter",
}
#: Command modules named otherwise than their command: a submodule called ``list`` would become
#: this package's attribute ``list`` once imported and hide the builtin here.
MODULE_OF = {"list": "listing"}

DESCRIPTION = """\
fitaudit audits a nonlinear least-squares fit before you trust, publish or hand it over:
does it depend on the starting guess or the step factor, are the hand-derived derivatives
right, how uncertain are the parameters, and can the data determine them at all?

A scenario is a folder with scenario.toml, a CSV data file and a model (see README.md);
bundled scenarios can be named instead ('fitaudit list'). Start with the whole audit:
  fitaudit run probe-cooling --quick
or write your own scenario:  fitaudit new my-fit
"""


def build_parser(chosen: str | None = None) -> argparse.ArgumentParser:
    """The parser with the ``chosen`` command registered in full (every command when None is
    given) and the others by their summary only."""
    parser = argparse.ArgumentParser(
        prog="fitaudit", description=DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"fitaudit {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", title="commands")
    for name, summary in COMMANDS.items():
        if chosen is None or name == chosen:
            importlib.import_module(f"{__name__}.{MODULE_OF.get(name, name)}").register(subparsers)
        else:
            subparsers.add_parser(name, help=summary)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``fitaudit`` console script and of ``python -m audit``."""
    argv = sys.argv[1:] if argv is None else list(argv)
    # The command is the first word that is not an option (the top level has no valued options).
    chosen = next((word for word in argv if not word.startswith("-")), "")
    parser = build_parser(chosen)
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help()
        return 2
    from .common import run_handler

    return run_handler(args)


if __name__ == "__main__":
    sys.exit(main())
