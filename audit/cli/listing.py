"""``fitaudit list``: the scenarios that ship with fitaudit, one line each."""
from __future__ import annotations

import argparse

from rich.markup import escape

from ..inputs.bundled import bundled_folder, bundled_scenarios
from .common import EXIT_OK, add_command, add_json_option, out, print_json

DESCRIPTION = """\
List the bundled scenarios: each shows one kind of trouble an audit finds (see the README's
"Bundled scenarios"). Every command takes a bundled scenario by its name as well as by its
folder; a folder of that name in the current directory wins."""

EXAMPLES = """\
  fitaudit list
  fitaudit check probe-cooling
  fitaudit sweep beam-ringdown -o ringdown-audit"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "list", "list the bundled scenarios", DESCRIPTION, EXAMPLES, run)
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    scenarios = bundled_scenarios()
    if args.json:
        print_json({"folder": str(bundled_folder()) if scenarios else None,
                    "scenarios": [{"name": s.name, "title": s.title, "path": str(s.path)} for s in scenarios]})
        return EXIT_OK
    if not scenarios:
        out.print("this copy of fitaudit has no bundled scenarios")
        return EXIT_OK
    width = max(len(scenario.name) for scenario in scenarios)
    for scenario in scenarios:
        out.print(f"{escape(scenario.name):<{width}}  {escape(scenario.title)}", soft_wrap=True)
    return EXIT_OK
