"""What every command shares: the consoles, error handling, JSON output, common options."""
from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

from ..engine.best_fit import FROM_START, KnownFit, SweepReference
from ..errors import InputError
from ..inputs.scenario import Scenario, load_scenario, solutions_fingerprint
from ..parallel.plan import BACKENDS, ParallelPlan
from ..sweep.result import reference_from_json

#: Exit statuses shared by all commands.
EXIT_OK, EXIT_FINDING, EXIT_BAD_INPUT = 0, 1, 2

#: Tables are wide; when the output is not a terminal, do not squeeze them to 80 columns.
PIPE_WIDTH = 200

out = Console(highlight=False)
err = Console(stderr=True, highlight=False)
if not out.is_terminal:
    out = Console(highlight=False, width=PIPE_WIDTH)


def add_command(subparsers, name: str, summary: str, description: str, examples: str,
                handler: Callable[[argparse.Namespace], int]) -> argparse.ArgumentParser:
    """A sub-command parser with a newcomer-friendly description and worked examples."""
    parser = subparsers.add_parser(
        name, help=summary, description=description, epilog=f"examples:\n{examples}",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.set_defaults(handler=handler)
    return parser


def add_scenario_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("scenario", metavar="SCENARIO",
                        help="scenario folder (holding scenario.toml), a scenario .toml file, or a bundled scenario's name (fitaudit list)")


def add_json_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object on standard output instead of tables (for scripts)")


#: Where results go when -o is not given.
DEFAULT_OUT = "fitaudit-output"
#: The sweep's result file in the output folder; the other stages take their reference from it.
SWEEP_FILE = "sweep.json"


def add_parallel_options(parser: argparse.ArgumentParser, default_jobs: int = -1, dask: bool = True) -> None:
    """--jobs, and with ``dask`` also --backend and --scheduler."""
    every = "every core" if default_jobs == -1 else f"{default_jobs}"
    parser.add_argument("--jobs", type=int, default=default_jobs, metavar="N",
                        help=f"worker processes on this machine, -1 for every core (default: {every})")
    if dask:
        parser.add_argument("--backend", choices=BACKENDS, default="processes",
                            help="processes (this machine) or dask (a running Dask cluster, see --scheduler)")
        parser.add_argument("--scheduler", metavar="ADDRESS",
                            help="address of the Dask scheduler, e.g. tcp://10.0.0.5:8786")


def parallel_plan(args: argparse.Namespace) -> ParallelPlan:
    """The ParallelPlan the options of ``add_parallel_options`` ask for."""
    return ParallelPlan(jobs=args.jobs, backend=getattr(args, "backend", "processes"),
                        scheduler=getattr(args, "scheduler", None))


def add_output_option(parser: argparse.ArgumentParser, what: str, default: str | None = DEFAULT_OUT) -> None:
    """-o/--out: the folder for ``what`` (e.g. "sweep.json, the figures and the chunk cache")."""
    shown = f"default: {default}" if default else "default: nothing is written"
    parser.add_argument("-o", "--out", default=default, metavar="OUT", help=f"folder for {what} ({shown})")


def write_results(result, folder: Path, name: str, write_figures: Callable[[object, Path], list[Path]]) -> list[Path]:
    """Write ``folder/<name>.json`` from ``result.to_dict()`` and the stage's figures.

    Returns:
        The paths written.

    Raises:
        InputError: when the folder cannot be written.
    """
    try:
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"{name}.json"
        path.write_text(json.dumps(result.to_dict(), indent=1, allow_nan=False) + "\n")
        return [path, *write_figures(result, folder / "figures")]
    except OSError as error:
        raise InputError(f"-o {folder}: cannot write the results there: {error.strerror}") from None


def run_handler(args: argparse.Namespace) -> int:
    """Run a command's handler; bad input becomes one line on stderr and exit status 2."""
    try:
        return args.handler(args)
    except InputError as error:
        err.print(f"[bold red]fitaudit: error:[/] {escape(str(error))}", markup=True, soft_wrap=True)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        err.print("fitaudit: interrupted")
        return 130


def open_scenario(args: argparse.Namespace) -> Scenario:
    """Load the scenario named on the command line and show its warnings (not in JSON mode)."""
    scenario = load_scenario(args.scenario)
    for warning in scenario.warnings:
        err.print(f"[yellow]warning:[/] {escape(warning)}", soft_wrap=True)
    return scenario


def print_json(payload: dict) -> None:
    """Strict JSON (no NaN) on standard output."""
    sys.stdout.write(json.dumps(payload, indent=2, allow_nan=False) + "\n")


def progress_bar(what: str, *, disable: bool = False) -> Progress:
    """A rich progress bar on stderr: count done, rate, elapsed and remaining time."""
    return Progress(
        TextColumn(f"[bold]{what}"), BarColumn(), MofNCompleteColumn(),
        TextColumn("{task.fields[rate]}"), TimeElapsedColumn(), TextColumn("left"), TimeRemainingColumn(),
        console=err, disable=disable, transient=False,
    )


def number(value: float, digits: int = 6) -> str:
    """A number for tables: significant digits, '—' for missing."""
    if value is None or value != value:
        return "—"
    return f"{value:.{digits}g}"


def sweep_reference(scenario: Scenario, out_folder: str | None) -> SweepReference | None:
    """The reference of ``OUT/sweep.json`` (OUT: ``out_folder``, else the default) when that sweep
    was run on this scenario's problem: same data, model, parameter ranges and solver settings.

    A missing file, or one without an in-range reference, gives None; an unreadable or foreign
    one gives None and a note on stderr, so that a stale sweep never becomes the reference.
    """
    path = Path(out_folder or DEFAULT_OUT) / SWEEP_FILE
    if not path.is_file():
        return None
    try:
        payload = json.loads(path.read_text())
        if payload.get("fingerprint") != solutions_fingerprint(scenario):
            err.print(f"[yellow]note:[/] {escape(str(path))} is not used: it was written for other data, model, "
                      "parameter ranges or solver settings; run 'fitaudit sweep' again to audit its best fit",
                      soft_wrap=True)
            return None
        return reference_from_json(payload, scenario.names)
    except (OSError, ValueError, KeyError, TypeError, AttributeError) as error:
        err.print(f"[yellow]note:[/] {escape(str(path))} is not used: it cannot be read ({escape(str(error))})",
                  soft_wrap=True)
        return None


def show_audited_fit(known: KnownFit | None, reference: SweepReference | None, out_folder: str | None) -> None:
    """Which fit the stage audited, and a warning line when a lower SSR is known."""
    if known is None:
        return
    out.print(escape(known.summary), soft_wrap=True)
    for note in known.notes:
        out.print(f"[yellow]note:[/] {escape(note)}", soft_wrap=True)
    if known.source == FROM_START and reference is None:
        folder = Path(out_folder or DEFAULT_OUT)
        out.print(f"[yellow]note:[/] no sweep of this scenario in {escape(str(folder))}: run 'fitaudit sweep' "
                  f"(-o {escape(str(folder))}) to search the parameter ranges for a lower SSR", soft_wrap=True)
    if known.warning is not None:
        out.print(f"[bold red]warning:[/] {escape(known.warning)}", soft_wrap=True)
