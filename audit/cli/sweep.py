"""``fitaudit sweep``: fits from many starts × step factors; basins, safe step factor and start."""
from __future__ import annotations

import argparse
import functools
import time
from pathlib import Path

import numpy as np
from rich.table import Table

from ..figures.sweep import write_figures
from ..parallel.plan import local_mapper
from ..sweep.result import BEST, CATEGORIES, SweepResult
from ..sweep.run import SweepRequest, run_sweep
from ..sweep.starts import DESIGNS
from .common import (EXIT_FINDING, EXIT_OK, add_command, add_json_option, add_output_option, add_parallel_options,
                     add_scenario_argument, add_solver_option, add_step_factors_option, err, number, open_scenario, out,
                     parallel_plan, print_json, print_table, progress_bar, shown, write_results)

DESCRIPTION = """\
Does the fit depend on where it starts, or on the step factor? This command fits the model from
many starting guesses spread over the parameters' ranges (scenario.toml [parameters] range),
each with every step factor, and sorts every run by how it ended:

  best         converged to the best solution found: the lowest residual sum of squares with
               every parameter inside its range (lower ones outside are listed and noted)
  other        converged, but to another solution (a different local optimum)
  diverged     parameters or the residual sum of squares ran away
  oscillating  successive steps kept reversing without the fit improving
  stalled      the iteration limit came first
  singular     the Jacobian lost rank
  model error  the model gave no finite values

When some solution gives the best fit's curve with other parameters (an alias of a frequency at
the sample points, exchanged terms, a mirror image), a "best curve" column counts the starts
reaching that curve either way. When no run reached the best, the next step is named (the
derivative check for a hand-written Jacobian that disagrees with central differences,
identifiability when the Jacobian lost rank).

For each step factor it reports the share of starts in each kind ("basin share" = best), the
median and 90th-percentile iterations, and a safe starting region: the largest box around the
best fit (in the axes' own linear or log units) inside which at least 99% of the starts
reached the best solution. It recommends a step factor together with the region it is safe
from: among the settings that have a safe region, the highest basin share (then the fewest
iterations); the reason says why, and which setting with more successes had no safe region.
It says whether the scenario's own start lies inside that region.

Basin maps are 2-D slices through the best fit ([sweep] maps, default the first two
parameters). Every finished chunk is cached under OUT/cache, so an interrupted sweep (Ctrl-C,
a crash) continues where it stopped when run again with the same settings. Results depend on
the scenario's [sweep] seed, never on --jobs or the backend.

On a Dask cluster: run `dask scheduler` on one machine and `dask worker tcp://HOST:8786` on
each machine that should compute (each needs fitaudit installed), then pass
--backend dask --scheduler tcp://HOST:8786.

Writes OUT/sweep.json and OUT/figures/sweep-*.{png,pdf}.

Exit status: 0 when the scenario's start lies inside the safe region of the recommended step
factor, 1 when it does not (or no safe region was found), 2 bad input."""

EXAMPLES = """\
  fitaudit sweep scenarios/probe-cooling
  fitaudit sweep scenarios/probe-cooling --design lhs --starts 20000 --step-factors 1,0.5,0.2 --solver gn,lm
  fitaudit sweep scenarios/probe-cooling --jobs 2 -o audit-out --json
  fitaudit sweep scenarios/probe-cooling --backend dask --scheduler tcp://10.0.0.5:8786"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "sweep", "fits from many starts and step factors: basins, safe start and factor",
                         DESCRIPTION, EXAMPLES, run)
    add_scenario_argument(parser)
    parser.add_argument("--design", choices=DESIGNS,
                        help="how starts are spread: a full grid, a Sobol' sequence or a Latin hypercube "
                             "(default: the scenario's [sweep] design)")
    parser.add_argument("--starts", type=int, metavar="N",
                        help="number of starts (a grid rounds down to a whole number per axis; "
                             "default: the scenario's [sweep] points)")
    add_step_factors_option(parser, "the scenario's [solver] step_factors")
    add_solver_option(parser, "the scenario's [sweep] methods", several=True)
    parser.add_argument("--resolution", type=int, metavar="N",
                        help="points per axis of each basin map (default: the scenario's [sweep] resolution)")
    add_parallel_options(parser)
    add_output_option(parser, "sweep.json, the figures and the chunk cache")
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    scenario = open_scenario(args)
    request = SweepRequest.from_scenario(scenario, design=args.design, points=args.starts,
                                         step_factors=args.step_factors, methods=args.solver,
                                         resolution=args.resolution)
    plan = parallel_plan(args)
    folder = Path(args.out)
    started = time.perf_counter()
    with progress_bar("starts", disable=args.json) as bar:
        task = bar.add_task("", total=None, rate="")

        def advance(done: int, total: int, computed: int) -> None:
            # The rate counts only starts fitted now, not chunks found in the cache.
            elapsed = max(time.perf_counter() - started, 1e-9)
            rate = f"{computed / elapsed:,.0f}/s" if computed else "from the cache"
            bar.update(task, completed=done, total=total, rate=rate)

        result = run_sweep(scenario, request, plan, folder, on_progress=advance)
    # The other stages audit this sweep's reference only while the problem stays the same.
    # The figures (seconds of drawing) go to the workers the sweep started: matplotlib is then
    # imported there, at the same time, and never in this process.
    files = write_results(result, folder, "sweep",
                          functools.partial(write_figures, mapper=local_mapper(plan)))
    if args.json:
        print_json({**result.to_dict(), "files": [str(path) for path in files]})
    else:
        show(result, files)
    inside = result.recommended is not None and bool(result.start_inside[result.recommended])
    return EXIT_OK if inside else EXIT_FINDING


def show(result: SweepResult, files: list[Path]) -> None:
    chunks = result.chunks
    out.print(f"[bold]{result.points} starts[/] ({result.design} design) × {len(result.step_factors)} step factor(s)"
              f"; {chunks['computed']} chunk(s) computed, {chunks['reused']} taken from the cache")
    table = Table(title="how the runs ended, per step factor (shares of the starts)", title_justify="left")
    curve = bool(np.any(result.solution_same_curve) or np.any(result.curve_shares > result.shares[..., BEST]))
    # A kind no run of any setting ended in gets no column (named below the table), so that the
    # columns left stay wide enough for their numbers at 80 columns.
    seen = [k for k in range(len(CATEGORIES)) if k == BEST or np.any(result.shares[..., k] > 0)]
    for heading in ("method", "step factor", *[CATEGORIES[k].replace("_", " ") for k in seen],
                    *(("best curve",) if curve else ()), "iterations to the best (median / 90%)",
                    "safe half-width (share of each range)"):
        table.add_column(heading, justify="left" if heading == "method" else "right")
    for m, method in enumerate(result.methods):
        for f, factor in enumerate(result.step_factors):
            mark = " *" if result.recommended == (m, f) else ""
            shares = [_share(result.shares[m, f, k]) for k in seen]
            iterations = f"{number(result.iterations_median[m, f, BEST])} / {number(result.iterations_p90[m, f, BEST])}"
            same = (_share(result.curve_shares[m, f]),) if curve else ()
            table.add_row(method, f"{factor:g}{mark}", *shares, *same, iterations,
                          number(result.region_radius[m, f], 3))
    print_table(table)
    unseen = [CATEGORIES[k].replace("_", " ") for k in range(len(CATEGORIES)) if k not in seen]
    if unseen:
        out.print(f"no run ended {', '.join(unseen)}; * recommended", soft_wrap=True)
    _show_solutions(result)
    _show_recommendation(result)
    for note in result.warnings:
        out.print(f"[yellow]note:[/] {shown(note)}", soft_wrap=True)
    out.print("wrote " + ", ".join(shown(path) for path in files), soft_wrap=True)


def _share(value: float) -> str:
    return "—" if value == 0 else f"{value:.1%}"


def _show_solutions(result: SweepResult) -> None:
    if not len(result.solution_ssr):
        out.print("[red]no run converged[/]")
        return
    table = Table(title=f"distinct solutions ({len(result.solution_ssr)})", title_justify="left")
    listed = min(len(result.solution_ssr), 8)
    relations = [_solution_kind(result, s) for s in range(listed)]
    for heading in ("#", "SSR", *map(shown, result.names), "share of starts (the setting reaching it most)",
                    *(("relation to the best",) if any(relations) else ())):
        table.add_column(heading, justify="left" if heading == "relation to the best" else "right")
    for s in range(listed):
        table.add_row("best" if s == 0 else str(s + 1), number(result.solution_ssr[s], 8),
                      *(number(v, 8) for v in result.solution_params[s]),
                      f"{np.max(result.solution_shares[..., s]):.1%}",
                      *((shown(relations[s]),) if any(relations) else ()))
    print_table(table)
    if listed < len(result.solution_ssr):
        outside = int(np.count_nonzero(~result.solution_inside[listed:]))
        where = f" ({outside} of them outside the searched ranges)" if outside else ""
        out.print(f"… and {len(result.solution_ssr) - listed} more in sweep.json{where}")


def _solution_kind(result: SweepResult, s: int) -> str:
    """How a listed solution relates to the reference: its kind of equivalence and mapping, and
    whether it lies outside the ranges ("" for an ordinary solution inside them)."""
    parts = []
    if result.solution_same_curve[s]:
        relation = f" ({result.solution_relation[s]})" if result.solution_relation[s] else ""
        parts.append(f"same curve: {result.solution_equivalence[s]}{relation}")
    if not result.solution_inside[s]:
        parts.append("outside ranges")
    return "; ".join(parts)


def _show_recommendation(result: SweepResult) -> None:
    if result.recommended is None:
        out.print(f"[red]no recommendation:[/] {shown(result.recommendation_reason)}", soft_wrap=True)
        if result.next_step:
            out.print(f"[bold]next step:[/] {shown(result.next_step)}", soft_wrap=True)
        return
    m, f = result.recommended
    out.print(f"[bold]recommended:[/] {result.methods[m]} with step factor {result.step_factors[f]:g}: "
              f"{result.shares[m, f, BEST]:.1%} of starts reach the best solution in "
              f"{number(result.iterations_median[m, f, BEST])} iterations (median); "
              f"{shown(result.recommendation_reason)}",
              soft_wrap=True)
    if not np.isfinite(result.region_radius[m, f]):
        err.print(f"[yellow]no safe region:[/] no box around the best fit holding at least "
                  f"{result.region_min_starts} starts had {result.region_level:.0%} of them reach the best solution")
        return
    table = Table(title=f"safe starting region: {result.region_starts[m, f]} starts inside, "
                        f"{result.region_share[m, f]:.1%} reached the best", title_justify="left")
    for heading in ("parameter", "best fit", "safe from", "safe to", "scenario start", "inside"):
        table.add_column(heading, justify="left" if heading == "parameter" else "right")
    for j, name in enumerate(result.names):
        table.add_row(shown(name), number(result.best_params[j], 8), number(result.region_lower[m, f, j], 6),
                      number(result.region_upper[m, f, j], 6), number(result.start[j], 6),
                      "yes" if result.start_inside_parameter[m, f, j] else "[red]no[/]")
    print_table(table)
    verdict = "inside" if result.start_inside[m, f] else "[red]outside[/]"
    out.print(f"the scenario's start lies {verdict} the safe region (distance {result.start_distance:.3f} of the "
              f"ranges from the best fit; the region reaches {result.region_radius[m, f]:.3f})")
