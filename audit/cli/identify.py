"""``fitaudit identify``: can the data determine the parameters? Correlations, weak combinations, profiles."""
from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
from rich.table import Table

from ..figures.identifiability import write_figures
from ..identifiability.analysis import PRACTICAL_CORRELATION, Identifiability, identify_scenario
from ..identifiability.profiles import SIDE_STATUS
from .common import (EXIT_FINDING, EXIT_OK, add_command, add_json_option, add_output_option, add_parallel_options,
                     add_scenario_argument, number, open_scenario, out, parallel_plan, print_json, print_table,
                     progress_bar, show_audited_fit, shown, sweep_reference, write_results)

DESCRIPTION = """\
Take the best known fit, then ask whether the data can determine each parameter. The best
known fit is the sweep's reference (the lowest SSR inside the parameter ranges) when
OUT/sweep.json holds a sweep of the same data, model, ranges and solver settings, else the
lowest-SSR fit from the scenario's start over its step factors and Levenberg-Marquardt; a
warning says when a lower SSR than the audited one is known.

  singular values   of the weighted Jacobian, raw and with unit-length columns, and the
                    condition numbers; the weakest directions in words, e.g. "tau and dT
                    trade off against each other: tau - 0.98*dT is barely constrained"
                    (each parameter counted in units of its conditional standard error)
  correlations      of the estimates, with the strongly correlated pairs listed
                    ([identifiability] strong_correlation, default 0.95)
  collinearity      index of every parameter subset up to six (Brun, Reichert & Kuensch,
                    2001); subsets above [identifiability] collinearity_limit (default 15)
                    are not identifiable, and the largest identifiable subsets are named
  rank check        a zero singular value at the fit and at random points in the ranges
                    means no data of this design can separate the parameters (structural)
  profiles          each parameter fixed on a grid reaching well past its asymptotic interval
                    (clipped to its range), the others refitted; a side still below the level
                    SSR_min*(1 + F(1, m-n)/(m-n)) at the grid's end walks on in doubling steps
                    up to the range bound. Each interval end is where the profile crosses that
                    level, found by root-finding on refits (about ten significant digits). A
                    side that stays below the level up to the range bound is OPEN: the data do
                    not bound the parameter there (also reported: refits that failed first).

Exit status: 0 every parameter identifiable, 1 something flagged (structural
non-identifiability, an open profile interval, or a lower SSR known than the audited fit's, a
profile refit's included), 2 bad input."""

EXAMPLES = """\
  fitaudit identify scenarios/probe-cooling
  fitaudit identify scenarios/probe-cooling --profile-points 61 -o audit-out
  fitaudit identify scenarios/probe-cooling --jobs 2 --json > identifiability.json"""


def register(subparsers) -> None:
    parser = add_command(subparsers, "identify", "check that the data determine every parameter",
                         DESCRIPTION, EXAMPLES, run)
    add_scenario_argument(parser)
    parser.add_argument("--profile-points", type=int, metavar="N",
                        help="grid points of each parameter's profile, the estimate included "
                             "(default: [identifiability] profile_points, 41)")
    add_parallel_options(parser, dask=False)
    add_output_option(parser, "identifiability.json and the figures; the sweep's sweep.json is read from there")
    add_json_option(parser)


def run(args: argparse.Namespace) -> int:
    scenario = open_scenario(args)
    plan = parallel_plan(args)
    reference = sweep_reference(scenario, args.out)
    with progress_bar("profiles", disable=args.json) as progress:
        task = progress.add_task("profiles", total=None, rate="")

        def on_step(done: int, total: int) -> None:
            progress.update(task, completed=done, total=total)

        result = identify_scenario(scenario, points=args.profile_points, plan=plan, on_step=on_step,
                                   reference=reference)
    written = write_results(result, Path(args.out), "identifiability", write_figures)
    if args.json:
        print_json(result.to_dict())
    else:
        show_audited_fit(result.audited_fit, reference, args.out)
        show(result)
        for path in written:
            out.print(f"wrote {shown(path)}", soft_wrap=True)
    return EXIT_FINDING if result.flagged or result.audited_fit.lower_ssr_known else EXIT_OK


def show(result: Identifiability) -> None:
    estimates, profiles = result.estimates, result.profiles
    out.print(f"best fit: {result.fit_outcome}, SSR {number(estimates.ssr, 8)}, {estimates.dof} degrees of freedom")
    spectrum = Table(title="singular values of the weighted Jacobian", title_justify="left")
    for heading in ("direction", "raw", "unit columns", "condition index"):
        spectrum.add_column(heading, justify="right")
    for k, (raw, scaled, index) in enumerate(zip(result.singular_raw, result.singular_scaled,
                                                 result.condition_index), start=1):
        spectrum.add_row(str(k), number(raw, 4), number(scaled, 4), number(index, 4))
    print_table(spectrum)
    out.print(f"condition number: {number(result.condition_scaled, 4)} with unit-length columns, "
              f"{number(result.condition_raw, 4)} raw")
    out.print("[bold]weakest directions[/] (parameters in units of their conditional standard errors):")
    for text in result.weak_text:
        out.print(f"  {shown(text)}", soft_wrap=True)
    # Six decimals: at four, a correlation of 0.99995 would print as a perfect +1.0000.
    pairs = [f"{shown(result.names[i])}–{shown(result.names[j])} {r:+.6f}"
             for (i, j), r in zip(result.strong_pairs, result.strong_correlation)]
    off_diagonal = estimates.correlation[~np.eye(len(result.names), dtype=bool)]
    # A singular covariance has no correlations: "none" would read as "no parameter trades off".
    listed = "undefined (the covariance is singular; see the weakest directions)" \
        if not np.all(np.isfinite(off_diagonal)) else ", ".join(pairs) or "none"
    out.print(f"strongly correlated pairs (|r| ≥ {result.strong_limit:g}): {listed}", soft_wrap=True)
    _show_collinearity(result)
    rank = result.rank
    usable = np.isfinite(rank.ratio)
    spread = (f"{number(np.min(rank.ratio[usable]), 3)} to {number(np.max(rank.ratio[usable]), 3)}"
              if usable.any() else "not computable")
    out.print(f"rank check (smallest/largest unit-column singular value, zero below {rank.tolerance:g}): "
              f"{number(rank.ratio_at_fit, 3)} at the fit, {spread} at {len(rank.ratio)} random points")
    level = f"{profiles.confidence:.0%}"
    table = Table(title=f"{level} intervals: asymptotic (t) and profile likelihood", title_justify="left")
    for heading in ("parameter", "estimate", "asymptotic lower", "asymptotic upper", "profile lower",
                    "profile upper"):
        table.add_column(heading, justify="left" if heading == "parameter" else "right")
    for j, name in enumerate(result.names):
        table.add_row(shown(name), number(result.params[j], 8), number(estimates.lower[j], 6),
                      number(estimates.upper[j], 6), _end(profiles.lower[j], profiles.lower_status[j]),
                      _end(profiles.upper[j], profiles.upper_status[j]))
    print_table(table)
    for status in sorted({*profiles.lower_status, *profiles.upper_status} - {"closed"}):
        out.print(f"  {OPEN_SIDE[status]}: {SIDE_STATUS[status]}")
    for finding in result.findings:
        colour = "red" if finding["level"] == "flag" else "yellow"
        out.print(f"[{colour}]{finding['level']}[/]: {shown(finding['text'])}", soft_wrap=True)
    tied = any(abs(r) >= PRACTICAL_CORRELATION for r in result.strong_correlation)
    if not result.flagged and tied:
        out.print("[yellow]bounded, but not separately determined[/]: every profile interval closes, yet a pair "
                  f"correlated beyond |r| = {PRACTICAL_CORRELATION:g} is practically non-identifiable (above)",
                  soft_wrap=True)
    elif not result.flagged:
        out.print("[green]ok[/]: every parameter is bounded by its profile; no structural non-identifiability")


def _show_collinearity(result: Identifiability) -> None:
    collinearity = result.collinearity
    if not len(collinearity.index):
        return
    above = int(np.sum(collinearity.index >= collinearity.limit))
    worst = int(np.argmax(np.nan_to_num(collinearity.index, posinf=np.finfo(float).max)))
    subsets = ", ".join("{" + ", ".join(shown(result.names[j]) for j in subset) + "}"
                        for subset in collinearity.largest_identifiable[:5]) or "none"
    sizes = "2" if collinearity.max_size == 2 else f"2 to {collinearity.max_size}"
    out.print(f"collinearity indices (subsets of size {sizes}, limit {collinearity.limit:g}): "
              f"{above} of {len(collinearity.index)} at or above the limit; largest "
              f"{{{', '.join(map(shown, collinearity.subset_names(worst)))}}} {number(collinearity.index[worst], 4)}")
    out.print(f"largest identifiable subsets: {subsets}")


#: How an open side reads in the intervals table (the meanings are printed below it).
OPEN_SIDE = {"open_at_bound": "open (range bound)", "open_fits_failed": "open (fits failed)",
             "open_no_bound": "open (no range)"}


def _end(value: float, status: str) -> str:
    return number(value, 8) if status == "closed" else OPEN_SIDE[status]
