"""``fitaudit derivatives``: hand-derived partial derivatives against numeric and exact ones."""
from __future__ import annotations

import argparse
import math
from pathlib import Path

from rich.table import Table

from ..derivatives.check import SOURCES, DerivativeAudit, audit_derivatives
from ..derivatives.points import SAMPLE
from ..engine.outcomes import Outcome
from ..errors import InputError
from ..figures.derivatives import write_figures
from .common import (EXIT_FINDING, EXIT_OK, add_command, add_json_option, add_output_option, add_scenario_argument,
                     number, open_scenario, out, print_json, print_table, progress_bar, show_audited_fit, shown,
                     sweep_reference, write_results)

DESCRIPTION = """\
Are the hand-derived partial derivatives (the model file's jacobian function) right?

They are compared, observation by observation, with high-accuracy numeric derivatives
(numdifftools: central differences over shrinking steps with Richardson extrapolation and an
error estimate) and, when [model] formula states the model's formula, with the exact symbolic
ones. The check points are the best known fit (the sweep's in-range reference when
OUT/sweep.json holds a sweep of the same problem, else the best fit from the start), the
scenario's start and --check-points N points drawn inside the parameter ranges (seeded by
[derivatives] seed). A column is called wrong only where the difference is far beyond the
numeric error bound and above a millionth of the column's size.

For each parameter the table shows the largest relative error (largest |difference| divided by
the column's largest |derivative| at that point), where it occurs, the verdict and a diagnosis
in plain words: sign error, constant factor, a factor that changes with the parameters, two
columns swapped or copied, right only in part of the range (a branch or an absolute value),
or a missing term (with the correlation of the error with x and with each true column).
Points where the model is not smooth, so that no numeric derivative can be trusted, are named.

When a column is wrong, the fit from the start is run with the numeric and with the
hand-derived Jacobian, showing the difference in iterations, end point and standard errors.

Without a hand-derived Jacobian there is nothing to check; the command then shows how many
digits the fit's own central differences carry.

Exit status: 0 all derivatives agree (or, without a hand-derived Jacobian, the central
differences are adequate), 1 a mistake was found (or the central differences are poor),
2 bad input."""

EXAMPLES = """\
  fitaudit derivatives scenarios/probe-cooling
  fitaudit derivatives scenarios/probe-cooling --check-points 50 -o audit-out
  fitaudit derivatives my-scenario --json > derivatives.json"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "derivatives", "check hand-derived partial derivatives against numeric ones",
                         DESCRIPTION, EXAMPLES, run)
    add_scenario_argument(parser)
    parser.add_argument("--check-points", type=int, metavar="N",
                        help="check points drawn inside the parameter ranges, besides the best fit and the start "
                             "(default: the scenario's [derivatives] points)")
    add_output_option(parser, "derivatives.json and the figures; the sweep's sweep.json is read from there")
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    scenario = open_scenario(args)
    if args.check_points is not None and args.check_points < 0:
        raise InputError(f"--check-points {args.check_points}: must be 0 or more")
    reference = sweep_reference(scenario, args.out)
    stages = ["best fit", "numeric derivatives", "comparison", "consequences"]
    with progress_bar("derivative audit", disable=args.json) as bar:
        task = bar.add_task("", total=len(stages), rate="")

        def advance(stage: str) -> None:
            bar.update(task, completed=stages.index(stage), rate=stage)

        result = audit_derivatives(scenario, args.check_points, progress=advance, reference=reference)
        bar.update(task, completed=len(stages), rate="done")
    files = write_results(result, Path(args.out), "derivatives", write_figures)
    if args.json:
        print_json({**result.to_dict(), "files": [str(path) for path in files]})
    else:
        show_audited_fit(result.audited_fit, reference, args.out)
        show(result, files)
    return EXIT_FINDING if result.has_finding else EXIT_OK


def show(result: DerivativeAudit, files: list[Path]) -> None:
    reference = "the exact (symbolic) derivatives of the stated formula" if result.reference == "exact" \
        else "numdifftools (Richardson-extrapolated central differences)"
    out.print(f"Jacobian under audit: {SOURCES[result.jacobian_source]}")
    if result.hand is None:
        _show_central(result, reference)
    else:
        _show_columns(result, reference)
    unreliable = {point for diagnosis in result.diagnoses for point in diagnosis.unreliable_points}
    if unreliable:
        kinks = [shown(label) for k, label in enumerate(result.labels) if not result.smooth[k].all()]
        reason = f"; the model is not smooth at {', '.join(kinks)}" if kinks else ""
        out.print(f"numeric derivative unreliable (left out of the comparison) at {len(unreliable)} point(s){reason}",
                  soft_wrap=True)
    for note in (*result.notes, *(f"left out, model not finite: {label}" for label in result.dropped)):
        out.print(f"[yellow]note:[/] {shown(note)}", soft_wrap=True)
    if result.consequences is not None:
        _show_consequences(result)
    for path in files:
        out.print(f"wrote {shown(path)}", soft_wrap=True)
    _conclusion(result)


def _show_columns(result: DerivativeAudit, reference: str) -> None:
    exact = result.reference == "exact"
    whose = "hand-derived"
    if result.jacobian_source == "formula":
        out.print("[yellow]There is no hand-derived Jacobian, so nothing hand-made to check.[/] The fit uses the "
                  "formula's derivatives from computer algebra; as a cross-check they are compared here with "
                  "numdifftools.", soft_wrap=True)
        whose = "the formula's"
    table = Table(title=f"{whose} partial derivatives at {len(result.labels)} points, judged against {reference}",
                  title_justify="left")
    for heading in ("parameter", "verdict", "largest rel. error", "where (point, obs.)", "diagnosis"):
        table.add_column(heading, justify="right" if heading == "largest rel. error" else "left")
    for j, name in enumerate(result.names):
        verdict = result.verdict[j]
        colour = {"agrees": "green", "wrong": "bold red"}.get(verdict, "yellow")
        k = int(result.worst_point[j])
        where = f"{shown(result.labels[k])}, obs. {int(result.worst_observation[j]) + 1}" \
            if k >= 0 and result.max_relative_error[j] > 0 else "—"
        table.add_row(shown(name), f"[{colour}]{verdict}[/]", number(result.max_relative_error[j], 2), where,
                      shown(result.diagnoses[j].headline))
    print_table(table)
    # The other derivatives against the same reference, apart: at 80 columns one table of all
    # of them left the diagnosis a word per line.
    others = Table(title=f"largest rel. error of the other derivatives against {reference}", title_justify="left")
    others.add_column("parameter")
    if exact:
        others.add_column("numdifftools", justify="right")
    others.add_column("the fit's central differences", justify="right")
    for j, name in enumerate(result.names):
        numeric = (number(result.max_relative_error_numeric[j], 2),) if exact else ()
        others.add_row(shown(name), *numeric, _central(result, j))
    print_table(others)
    out.print("rel. error: the largest |difference| over the column's largest |derivative| at that point",
              soft_wrap=True)
    _show_named_points(result)
    for j in result.wrong_columns:
        out.print(f"[bold]{shown(result.names[j])}[/]: {shown(result.diagnoses[j].summary)}", soft_wrap=True)


def _show_named_points(result: DerivativeAudit) -> None:
    """The parameters of every sampled check point the table names, which otherwise only the JSON holds."""
    named = sorted({int(k) for j, k in enumerate(result.worst_point)
                    if k >= 0 and result.max_relative_error[j] > 0 and result.labels[int(k)].startswith(SAMPLE)})
    for k in named:
        values = ", ".join(f"{shown(name)} = {number(value, 6)}" for name, value in zip(result.names, result.points[k]))
        out.print(f"  {shown(result.labels[k])}: {values}", soft_wrap=True)


def _show_central(result: DerivativeAudit, reference: str) -> None:
    out.print("[yellow]There is no hand-derived Jacobian, so there is nothing to check.[/] The fit differentiates "
              "the model by central differences; here is how many digits they carry.", soft_wrap=True)
    table = Table(title=f"the fit's central differences at {len(result.labels)} points, against {reference}",
                  title_justify="left")
    for heading in ("parameter", "largest rel. error", "digits", "points judged"):
        table.add_column(heading, justify="left" if heading == "parameter" else "right")
    for j, name in enumerate(result.names):
        error = result.max_central_error[j]
        digits = "—" if not error == error else "all" if error == 0 else f"{max(0.0, -math.log10(error)):.1f}"
        judged = int(result.usable[:, j].any(axis=1).sum())
        table.add_row(shown(name), _central(result, j), digits, f"{judged} of {len(result.labels)}")
    print_table(table)


def _central(result: DerivativeAudit, j: int) -> str:
    text = number(result.max_central_error[j], 2)
    return f"[red]{text}[/]" if result.central_poor[j] else text


def _show_consequences(result: DerivativeAudit) -> None:
    found = result.consequences
    table = Table(title=f"what the wrong derivatives do to the fit from the start ({found.method}, step factor "
                        f"{found.step_factor:g})", title_justify="left")
    # One column per Jacobian, one row per quantity: as wide for eight parameters as for two.
    table.add_column("Jacobian:")
    for jacobian in found.jacobians:
        table.add_column(jacobian, justify="right")
    outcomes = [Outcome(int(code)) for code in found.outcome]
    table.add_row("outcome", *(f"[{'green' if outcome == Outcome.CONVERGED else 'red'}]{outcome.label}[/]"
                               for outcome in outcomes))
    table.add_row("iterations", *(str(int(count)) for count in found.iterations))
    table.add_row("SSR", *(number(ssr, 7) for ssr in found.ssr))
    for j, name in enumerate(found.names):
        estimates = (f"{number(found.params[r, j], 7)} ({number(found.std_errors[r, j], 3)})"
                     for r in range(len(found.jacobians)))
        table.add_row(f"{shown(name)} (std. error)", *estimates)
    print_table(table)


def _conclusion(result: DerivativeAudit) -> None:
    if result.jacobian_source == "none":
        if result.has_finding:
            poor = [name for name, bad in zip(map(shown, result.names), result.central_poor) if bad]
            out.print(f"[red]the fit's central differences lose more than 3 digits for {', '.join(poor)}[/]")
        else:
            out.print("[green]no hand-derived Jacobian to check; the fit's central differences are adequate[/]")
        return
    wrong = result.wrong_columns
    if wrong:
        out.print(f"[bold red]{len(wrong)} of {len(result.names)} partial derivative(s) wrong: "
                  f"{', '.join(shown(result.names[j]) for j in wrong)}[/]")
    elif "unchecked" in result.verdict:
        out.print("[yellow]no mistake found, but some columns could not be judged[/]")
    else:
        out.print("[green]every partial derivative agrees with the reference[/]")
