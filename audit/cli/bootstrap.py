"""``fitaudit bootstrap``: bootstrap refits beside the asymptotic standard errors and t intervals."""
from __future__ import annotations

import argparse
import time
from pathlib import Path

from rich.table import Table

from ..errors import InputError
from ..figures.bootstrap import write_figures
from ..uncertainty.bootstrap import BootstrapResult, bootstrap_scenario, total_refits
from ..uncertainty.replicates import FATE_MEANINGS
from ..uncertainty.resampling import SCHEMES, WILD_MULTIPLIERS
from .common import (EXIT_FINDING, EXIT_OK, add_command, add_json_option, add_output_option, add_parallel_options,
                     add_scenario_argument, add_step_factors_option, number, one_step_factor, open_scenario, out,
                     parallel_plan, print_json, print_table, progress_bar, show_audited_fit, shown, sweep_reference,
                     write_results)

DESCRIPTION = """\
How uncertain are the fitted parameters, and can the linearised standard errors be trusted?

The fit's asymptotic standard errors and t intervals come from a linearisation at the best
known fit: the sweep's reference (the lowest SSR inside the parameter ranges) when OUT/sweep.json
holds a sweep of the same data, model, ranges and solver settings, else the lowest-SSR fit from
the scenario's start over its step factors and one Levenberg-Marquardt run. A warning says when
a lower SSR than the audited one is known. This command draws many replicate data sets, refits
each one from the best fit with the scenario's solver and step factor, and shows the spread of
the refitted parameters beside them:

  residual  fitted values + residuals drawn with replacement (errors alike at every x)
  wild      each observation keeps its own residual, times a random sign or Mammen multiplier
            (errors whose size changes with x)
  pairs     whole observations drawn with replacement (assumes least; needs many observations)

Per parameter: bootstrap mean, bias, standard error, percentile and BCa intervals, the width
ratio against the t interval, and a flag with a plain reason where the two disagree (widths,
asymmetry, a t interval crossing zero for a parameter that stays positive, bias). A refit counts
as the best fit's only where a Levenberg-Marquardt descent from the best fit on the same data
ends at the same point; refits that did not converge, or converged to another solution, are
counted by kind and left out of the intervals. The leave-one-out refits (BCa) are such descents.

Writes OUT/bootstrap.json and OUT/figures/bootstrap-histograms.{png,pdf} and
OUT/figures/bootstrap-pairs.{png,pdf}. Finished chunks of refits are cached under OUT/cache, so an
interrupted bootstrap (Ctrl-C, a killed process) computes only what is missing when run again
with the same settings. Results depend on the scenario's [bootstrap] seed, never on --jobs or the
backend.

Exit status: 0 when bootstrap and asymptotic agree and every refit was used, 1 when something
was flagged, refits were left out or a lower SSR than the audited one is known, 2 bad input."""

EXAMPLES = """\
  fitaudit bootstrap scenarios/probe-cooling
  fitaudit bootstrap scenarios/probe-cooling --resampling wild --wild-weights mammen --samples 5000
  fitaudit bootstrap scenarios/probe-cooling --resampling pairs --jobs 2 -o audit-out --json
  fitaudit bootstrap scenarios/probe-cooling --backend dask --scheduler tcp://10.0.0.5:8786"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "bootstrap", "bootstrap intervals beside the asymptotic ones, with failed refits",
                         DESCRIPTION, EXAMPLES, run)
    add_scenario_argument(parser)
    parser.add_argument("--resampling", choices=SCHEMES,
                        help="resampling scheme (default: the scenario's [bootstrap] method)")
    parser.add_argument("--samples", type=int, metavar="N",
                        help="number of bootstrap replicates (default: the scenario's [bootstrap] samples)")
    parser.add_argument("--wild-weights", choices=WILD_MULTIPLIERS,
                        help="multipliers of the wild bootstrap: random signs or Mammen's two-point law "
                             "(default: the scenario's [bootstrap] wild_weights)")
    parser.add_argument("--leverage-adjusted", action=argparse.BooleanOptionalAction, default=None,
                        help="divide residuals by sqrt(1 - leverage) before resampling (residual and wild; "
                             "default: the scenario's [bootstrap] leverage_adjusted)")
    add_step_factors_option(parser, "the first of the scenario's [solver] step_factors", several=False)
    add_parallel_options(parser)
    add_output_option(parser, "bootstrap.json, the figures and the chunk cache")
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    scenario = open_scenario(args)
    if args.samples is not None and args.samples < 2:
        raise InputError(f"--samples {args.samples}: must be at least 2")
    step_factor = one_step_factor(args)
    plan = parallel_plan(args)
    samples = scenario.bootstrap.samples if args.samples is None else args.samples
    reference = sweep_reference(scenario, args.out)
    started = time.perf_counter()
    with progress_bar("refits", disable=args.json) as bar:
        task = bar.add_task("", total=total_refits(scenario.problem, samples), rate="")

        def advance(count: int) -> None:
            done = bar.tasks[0].completed + count
            bar.update(task, advance=count, rate=f"{done / max(time.perf_counter() - started, 1e-9):,.0f}/s")

        result = bootstrap_scenario(scenario, method=args.resampling, samples=samples, step_factor=step_factor,
                                    wild_multipliers=args.wild_weights, leverage_adjusted=args.leverage_adjusted,
                                    reference=reference, plan=plan, progress=advance, folder=Path(args.out))
    folder = Path(args.out)
    files = write_results(result, folder, "bootstrap", write_figures)
    if args.json:
        print_json({**result.to_dict(), "files": [str(path) for path in files]})
    else:
        show_audited_fit(result.audited_fit, reference, args.out)
        show(result, files)
    clean = not result.flags and result.replicates.failure_share == 0 and not result.audited_fit.lower_ssr_known
    return EXIT_OK if clean else EXIT_FINDING


def show(result: BootstrapResult, files: list[Path]) -> None:
    level = f"{result.confidence:.0%}"
    weights = f", {result.wild_multipliers} multipliers" if result.wild_multipliers else ""
    adjusted = ", leverage-adjusted" if result.leverage_adjusted else ""
    table = Table(title=f"{result.method} bootstrap{weights}{adjusted}: {result.used} of {result.samples} refits "
                        f"used, step factor {result.refit.step_factor:g}", title_justify="left")
    for heading in ("parameter", "estimate", "std. error (t)", "std. error (bootstrap)",
                    "bias (bootstrap mean − estimate)"):
        table.add_column(heading, justify="left" if heading == "parameter" else "right")
    asymptotic = result.asymptotic
    for j, name in enumerate(result.names):
        table.add_row(shown(name), number(result.best[j], 8), number(asymptotic.std_errors[j], 4),
                      number(result.std_error[j], 4), number(result.bias[j], 3))
    print_table(table)
    print_table(_intervals_table(result, level))
    fates = Table(title="how the refits ended", title_justify="left")
    for heading in ("kind", "bootstrap refits", "share of them", "leave-one-out refits (for BCa)", "meaning"):
        fates.add_column(heading, justify="left" if heading in ("kind", "meaning") else "right")
    shares, jackknife = result.replicates.shares(), result.jackknife.counts()
    reasons = result.replicates.other_reasons()
    for label, count in result.replicates.counts().items():
        if count or jackknife[label]:
            meaning = FATE_MEANINGS[label]
            if label == "other":
                meaning += (f" ({reasons['another_solution']} another solution, "
                            f"{reasons['descent_failed']} descent did not converge)")
            fates.add_row(label.replace("_", " "), str(count), f"{shares[label]:.1%}", str(jackknife[label]),
                          shown(meaning))
    print_table(fates)
    if result.flags:
        out.print("[bold]where bootstrap and linearisation disagree:[/]")
        for flag in result.flags:
            out.print(f"  {shown(flag.parameter)} ({flag.kind}): {shown(flag.reason)}", soft_wrap=True)
    else:
        out.print("bootstrap and linearised intervals agree for every parameter")
    for note in result.notes:
        out.print(f"[yellow]note:[/] {shown(note)}", soft_wrap=True)
    out.print("wrote " + ", ".join(shown(path) for path in files), soft_wrap=True)


def _intervals_table(result: BootstrapResult, level: str) -> Table:
    """One row per parameter and interval, so that the ends stay whole at 80 columns; the width
    ratio sits on the row of the bootstrap interval it was computed from."""
    table = Table(title=f"{level} intervals: t (linearised), bootstrap percentile and BCa", title_justify="left")
    for heading in ("parameter", "interval", "lower", "upper", "width ÷ t interval's width"):
        table.add_column(heading, justify="left" if heading in ("parameter", "interval") else "right")
    asymptotic, comparison = result.asymptotic, result.comparison
    for j, name in enumerate(result.names):
        ends = {"t": (asymptotic.lower[j], asymptotic.upper[j]),
                "percentile": (result.percentile_lower[j], result.percentile_upper[j]),
                "BCa": (result.bca.lower[j], result.bca.upper[j])}
        for kind, (lower, upper) in ends.items():
            ratio = number(comparison.width_ratio[j], 3) if kind.lower() == comparison.compared[j] else ""
            table.add_row(shown(name) if kind == "t" else "", kind, number(lower, 8), number(upper, 8), ratio)
    return table
