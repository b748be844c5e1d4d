"""``fitaudit run``: the whole audit in one command, a verdict with reasons, the files for the appendix."""
from __future__ import annotations

import argparse
from pathlib import Path

from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from ..parallel.plan import local_mapper
from ..report.result import AUDIT_FILE, FIGURES, AuditResult
from ..report.run import QUICK_POINTS, QUICK_RESOLUTION, QUICK_SAMPLES, STAGES, run_audit
from .common import (EXIT_FINDING, EXIT_OK, add_command, add_json_option, add_output_option, add_parallel_options,
                     add_step_factors_option,
                     add_scenario_argument, err, number, open_scenario, out, parallel_plan, print_json, shown)

DESCRIPTION = f"""\
Can I publish this fit? This command runs every check fitaudit has, in order, and ends with a
verdict: a table of checks, each pass, warn, fail or "not run", with the reason and the number
behind it.

  1. derivative check   hand-derived partial derivatives against exact or numeric ones
  2. sweep              fits from many starting guesses with every step factor
  3. best fit           the lowest SSR inside the parameter ranges; every later stage audits it
  4. bootstrap          refits on resampled data: how far the parameters move
  5. identifiability    correlations, condition number, profile-likelihood intervals
  6. residual checks    runs of one sign, lag-1 correlation, normality, constant spread
  7. uncertainty        each parameter as estimate ± expanded uncertainty (GUM form)

A stage that cannot run says why and what to do, and the others still run. The thresholds of
the verdict are listed in the README; change any of them in scenario.toml under [verdict].

--quick uses small designs for a first look: {QUICK_POINTS} starts, {QUICK_RESOLUTION} x {QUICK_RESOLUTION} basin
maps and {QUICK_SAMPLES} bootstrap replicates (the computing then takes seconds; drawing the
figures takes longer). Without it the scenario's own [sweep] and [bootstrap] settings are used.

Writes OUT/{AUDIT_FILE} (every number) and OUT/{FIGURES}/*.png and *.pdf; the sweep's and the
bootstrap's chunks are cached under OUT/cache, so running again with the same settings (after
Ctrl-C or a killed process, say) reuses every finished chunk. The results do
not depend on --jobs or the backend.

Exit status: 0 when every check passes, 1 when any warns, fails or did not run, 2 bad input."""

EXAMPLES = """\
  fitaudit run scenarios/probe-cooling --quick
  fitaudit run scenarios/probe-cooling -o probe-audit --jobs 2
  fitaudit run scenarios/probe-cooling --step-factors 1,0.5,0.2 --json"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "run", "the whole audit in one command, with a verdict", DESCRIPTION,
                         EXAMPLES, run)
    add_scenario_argument(parser)
    add_output_option(parser, f"{AUDIT_FILE}, the figures and the chunk caches")
    parser.add_argument("--quick", action="store_true",
                        help=f"small designs for a first look ({QUICK_POINTS} starts, {QUICK_SAMPLES} bootstrap "
                             "replicates)")
    add_step_factors_option(parser, "the scenario's [solver] step_factors")
    add_parallel_options(parser)
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    scenario = open_scenario(args)
    plan = parallel_plan(args)
    with Progress(TextColumn("[bold]audit[/]"), TextColumn("{task.description:<16}"), BarColumn(),
                  TextColumn("{task.percentage:>3.0f}%"), TimeElapsedColumn(), console=err,
                  disable=args.json) as progress:
        task = progress.add_task("", total=len(STAGES))

        def advance(stage: str, fraction: float) -> None:
            progress.update(task, description=stage, completed=STAGES.index(stage) + min(fraction, 1.0))

        result = run_audit(scenario, out=args.out, quick=args.quick, plan=plan, on_progress=advance,
                           step_factors=args.step_factors)
        progress.update(task, description="writing files", completed=len(STAGES))
        files = result.write(args.out, local_mapper(plan))
    if args.json:
        payload = result.to_dict()
        print_json({key: payload[key] for key in ("verdict", "best_fit", "uncertainty_statement", "not_run")}
                   | {"files": [str(path) for path in files]})
    else:
        show(result, Path(args.out))
    return EXIT_OK if result.verdict.overall == "pass" else EXIT_FINDING


def show(result: AuditResult, folder: Path) -> None:
    """The verdict table, the uncertainty statement and where the files are."""
    colours = {"pass": "green", "warn": "yellow", "fail": "bold red", "not run": "dim"}
    verdict = result.verdict
    table = Table(title=f"verdict: {shown(result.scenario.title)}", title_justify="left")
    for heading in ("check", "status", "number", "reason"):
        table.add_column(heading, justify="right" if heading == "number" else "left",
                         overflow="fold")
    for line in verdict.lines:
        table.add_row(shown(line.check), f"[{colours[line.status]}]{line.status}[/]", number(line.value, 4),
                      shown(line.reason))
    out.print(table)
    out.print(f"[{colours[verdict.overall]}]{shown(verdict.summary)}[/]", soft_wrap=True)
    if result.statement is not None:
        out.print("uncertainty (GUM form): " + "; ".join(shown(text) for text in result.statement.lines),
                  soft_wrap=True)
    if result.best_fit is not None and result.best_fit.warning:
        out.print(f"[bold red]warning:[/] {shown(result.best_fit.warning)}", soft_wrap=True)
    out.print(f"wrote the appendix {shown(str(folder / 'appendix.html'))} (also .md and .tex), every number in "
              f"{shown(str(folder / AUDIT_FILE))} and the figures in {shown(str(folder / FIGURES))}", soft_wrap=True)
