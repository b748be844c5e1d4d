"""``fitaudit check``: read and validate a scenario, and summarise what was found."""
from __future__ import annotations

import argparse

from rich.table import Table

from ..inputs.scenario import Scenario
from ..jsonable import jsonable
from .common import (EXIT_OK, add_command, add_json_option, add_scenario_argument, number, open_scenario, out,
                     print_json, shown)

DESCRIPTION = """\
Read a scenario (scenario.toml, the data file and the model) and check everything that can be
checked before fitting: files and columns exist, values are numeric and finite, sigma is
positive, the parameter names match the model's arguments, and the model (and its hand-derived
Jacobian, if any) can be evaluated at the starting values with the right shape.

Exit status: 0 when the scenario is usable, 2 with a one-line explanation when it is not."""

EXAMPLES = """\
  fitaudit check scenarios/probe-cooling
  fitaudit check my-scenario/scenario.toml --json"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "check", "validate a scenario and summarise it", DESCRIPTION, EXAMPLES, run)
    add_scenario_argument(parser)
    add_json_option(parser)


def summary(scenario: Scenario) -> dict:
    """Everything the check found, as plain data."""
    problem = scenario.problem
    return jsonable({
        "title": scenario.title,
        "path": scenario.path,
        "data": {"file": scenario.data_path, "observations": problem.n_obs, "x": list(scenario.x_names),
                 "y": scenario.y_name, "sigma": scenario.sigma_name},
        "model": {"file": scenario.model_path, "formula": problem.formula,
                  "jacobian": ("exact (formula)" if scenario.model_path is None
                               else "hand-derived" if problem.has_jacobian else "central differences")},
        "parameters": [{"name": p.name, "start": p.start, "range": [p.lower, p.upper] if p.has_range else None,
                        "scale": p.axis} for p in scenario.parameters],
        "solver": scenario.solver.__dict__,
        "warnings": list(scenario.warnings),
        "fingerprint": scenario.fingerprint,
    })


def run(args: argparse.Namespace) -> int:
    scenario = open_scenario(args)
    if args.json:
        print_json(summary(scenario))
        return EXIT_OK
    problem = scenario.problem
    out.print(f"[bold]{shown(scenario.title)}[/]  ({shown(scenario.path)})")
    predictors = shown(", ".join(scenario.x_names))
    weights = f", sigma from '{shown(scenario.sigma_name)}'" if scenario.sigma_name else ", unweighted"
    out.print(f"data: {shown(scenario.data_path.name)}: {problem.n_obs} observations of '{shown(scenario.y_name)}' "
              f"against {predictors}{weights}")
    source = shown(scenario.model_path.name) if scenario.model_path else "formula"
    if scenario.model_path is None:
        jacobian = "exact Jacobian derived from the formula"
    elif problem.has_jacobian:
        jacobian = "hand-derived Jacobian"
    else:
        jacobian = "numeric (central-difference) Jacobian"
    out.print(f"model: {source}, {problem.n_params} parameters, {jacobian}")
    if problem.formula:
        out.print(f"formula: {shown(problem.formula)}")
    table = Table(title="parameters", title_justify="left")
    for heading in ("name", "start", "range", "scale"):
        table.add_column(heading, justify="right" if heading != "name" else "left")
    for p in scenario.parameters:
        span = f"[{number(p.lower)}, {number(p.upper)}]" if p.has_range else "—"
        table.add_row(p.name, number(p.start), span, p.axis)
    out.print(table)
    solver = scenario.solver
    out.print(f"solver: {solver.method}, step factors {', '.join(map(str, solver.step_factors))}, "
              f"tolerance {solver.tolerance:g}, at most {solver.max_iterations} iterations")
    out.print(f"[green]ok[/]: scenario is usable ({len(scenario.warnings)} warning(s))")
    return EXIT_OK
