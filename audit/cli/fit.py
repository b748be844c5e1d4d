"""``fitaudit fit``: one fit from the scenario's start, with the whole iteration trace."""
from __future__ import annotations

import argparse

import numpy as np
from rich.table import Table

from ..engine.outcomes import Outcome
from ..engine.single_fit import SingleFit, fit_once
from ..errors import InputError
from ..inputs.settings import nearest
from .common import (EXIT_FINDING, EXIT_OK, add_command, add_json_option, add_scenario_argument, add_solver_option,
                     add_step_factors_option, number, one_step_factor, open_scenario, out, print_json, print_table,
                     shown)

DESCRIPTION = """\
Fit the scenario's model once, from its starting values, by iterated linearisation, and show
every iteration: the residual sum of squares, the largest relative parameter change and the
parameters. A converged fit is followed by the estimates with their asymptotic standard errors,
t-based confidence intervals and the correlation matrix.

Gauss-Newton (gn) updates a <- a + step_factor * delta, where delta solves the linearised
least-squares problem; a step factor below 1 damps the update against overshooting.
Levenberg-Marquardt (lm) damps adaptively and never accepts a step that raises the residual
sum of squares.

Exit status: 0 converged, 1 did not converge, 2 bad input."""

EXAMPLES = """\
  fitaudit fit scenarios/probe-cooling
  fitaudit fit scenarios/probe-cooling --step-factors 0.5 --start tau=300
  fitaudit fit scenarios/probe-cooling --solver lm --json"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "fit", "fit once from the start and show every iteration",
                         DESCRIPTION, EXAMPLES, run)
    add_scenario_argument(parser)
    add_step_factors_option(parser, "the first of the scenario's [solver] step_factors", several=False)
    add_solver_option(parser, "the scenario's [solver] method")
    parser.add_argument("--start", nargs="+", action="extend", default=[], metavar="NAME=VALUE",
                        help="override starting values, e.g. --start tau=300 dT=50 (the option may also be repeated)")
    add_json_option(parser)


def starting_values(names: tuple[str, ...], start: np.ndarray, overrides: list[str]) -> np.ndarray:
    """The scenario's start with NAME=VALUE overrides applied."""
    start = start.copy()
    for item in overrides:
        name, separator, text = item.partition("=")
        if not separator:
            raise InputError(f"--start {item}: expected NAME=VALUE")
        if name not in names:
            raise InputError(f"--start {item}: no parameter '{name}'{nearest(name, names)}; "
                             f"parameters: {', '.join(names)}")
        try:
            value = float(text)
        except ValueError:
            raise InputError(f"--start {item}: '{text}' is not a number") from None
        if not np.isfinite(value):
            raise InputError(f"--start {item}: the value must be finite")
        start[names.index(name)] = value
    return start


def run(args: argparse.Namespace) -> int:
    scenario = open_scenario(args)
    solver = scenario.solver
    chosen = one_step_factor(args)
    step_factor = solver.step_factors[0] if chosen is None else chosen
    start = starting_values(scenario.names, scenario.start, args.start)
    fit = fit_once(scenario.problem, start, step_factor=step_factor, method=args.solver or solver.method,
                   tol=solver.tolerance, max_iter=solver.max_iterations,
                   confidence=scenario.bootstrap.confidence)
    if args.json:
        print_json(fit.to_dict())
    else:
        show(fit)
        if fit.outcome == Outcome.TIMED_OUT:
            out.print(f"[dim]next: raise {shown('[model] time_limit')} in scenario.toml, or find what makes the model "
                      "slow along this path[/]", soft_wrap=True)
        elif not fit.converged:
            out.print(f"[dim]next: a smaller --step-factors, --solver lm, or 'fitaudit sweep {shown(args.scenario)}' "
                      "to see which starts and step factors reach the best fit[/]", soft_wrap=True)
    return EXIT_OK if fit.converged else EXIT_FINDING


def show(fit: SingleFit) -> None:
    method = "Gauss-Newton" if fit.method == "gn" else "Levenberg-Marquardt"
    trace = Table(title=f"{method}, step factor {fit.step_factor:g}", title_justify="left")
    trace.add_column("iteration", justify="right")
    trace.add_column("SSR", justify="right")
    trace.add_column("largest rel. change", justify="right")
    for name in fit.names:
        trace.add_column(shown(name), justify="right")
    for k, (point, ssr, change) in enumerate(zip(fit.iterates, fit.ssr, fit.max_rel_change)):
        trace.add_row(str(k), number(ssr, 8), number(change, 3), *(number(v, 8) for v in point))
    print_table(trace)
    colour = "green" if fit.converged else "red"
    out.print(f"outcome: [{colour}]{fit.outcome.label}[/]: {shown(fit.outcome.meaning)}")
    if fit.estimates is None:
        return
    estimates = fit.estimates
    level = f"{estimates.confidence:.0%}"
    table = Table(title=f"estimates (s = {number(estimates.residual_sd)}, {estimates.dof} degrees of freedom)",
                  title_justify="left")
    headings = ("parameter", "estimate", "std. error", "std. error / |estimate|", f"{level} lower", f"{level} upper")
    for heading in headings:
        table.add_column(heading, justify="left" if heading == "parameter" else "right")
    for name, value, error, lower, upper in zip(estimates.names, estimates.params, estimates.std_errors,
                                                estimates.lower, estimates.upper):
        relative = abs(error / value) if value else float("nan")
        share = f"{relative:.2%}" if relative == relative else "—"
        table.add_row(shown(name), number(value, 8), number(error, 4), share, number(lower, 8), number(upper, 8))
    print_table(table)
    correlation = Table(title="correlation", title_justify="left")
    correlation.add_column("")
    for name in estimates.names:
        correlation.add_column(shown(name), justify="right")
    for name, row in zip(estimates.names, estimates.correlation):
        correlation.add_row(shown(name), *(f"{value:+.3f}" if value == value else "—" for value in row))
    print_table(correlation)
