"""What every command shares: the consoles, error handling, JSON output, common options."""
from __future__ import annotations

import argparse
import json
import os
import re
import sys
import traceback
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn
from rich.table import Table

from ..engine.batch import METHODS
from ..engine.best_fit import FROM_START, KnownFit, SweepReference
from ..errors import InputError
from ..inputs.scenario import Scenario, load_scenario, solutions_fingerprint
from ..parallel.plan import BACKENDS, ParallelPlan
from ..sweep.result import reference_from_json

#: Exit statuses shared by all commands: 3 is an error the program did not foresee (a bug, or a
#: model misbehaving in a way no check caught), never confused with a finding (1).
EXIT_OK, EXIT_FINDING, EXIT_BAD_INPUT, EXIT_UNEXPECTED = 0, 1, 2, 3
#: Set to 1 to see the traceback of an unexpected error.
TRACEBACK_VARIABLE = "FITAUDIT_TRACEBACK"
#: The lock file in an output folder; a second run on the same folder is refused while it is held.
LOCK_FILE = ".fitaudit.lock"
#: C0 and C1 control characters (ESC among them), which would drive the terminal.
CONTROL_CHARACTERS = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f]")

#: Tables are wide; when the output is not a terminal, do not squeeze them to 80 columns.
PIPE_WIDTH = 200

# emoji=False: ':x:' in a column name is text, not a picture.
out = Console(highlight=False, emoji=False)
err = Console(stderr=True, highlight=False, emoji=False)
if not out.is_terminal:
    out = Console(highlight=False, emoji=False, width=PIPE_WIDTH)


def shown(text: object) -> str:
    """A user's string (title, column name, path) ready for a rich console: control characters
    (ESC sequences) removed, markup brackets escaped."""
    return escape(CONTROL_CHARACTERS.sub("", str(text)))


def print_table(table: Table) -> None:
    """Print ``table`` so that a narrow terminal wraps its cells onto more lines instead of cutting
    them with '…': a number cut short would be read as a different number."""
    for column in table.columns:
        column.overflow = "fold"
    out.print(table)


def add_command(subparsers, name: str, summary: str, description: str, examples: str,
                handler: Callable[[argparse.Namespace], int]) -> argparse.ArgumentParser:
    """A sub-command parser with a newcomer-friendly description and worked examples."""
    # No abbreviations: an option has one spelling, so a removed one fails instead of matching a prefix.
    parser = subparsers.add_parser(
        name, help=summary, description=description, epilog=f"examples:\n{examples}",
        formatter_class=argparse.RawDescriptionHelpFormatter, allow_abbrev=False)
    parser.set_defaults(handler=handler)
    return parser


def add_scenario_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("scenario", metavar="SCENARIO",
                        help="scenario folder (holding scenario.toml), a scenario .toml file, or a bundled "
                             "scenario's name (fitaudit list)")


def add_json_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object on standard output instead of tables (for scripts)")


#: Where results go when -o is not given.
DEFAULT_OUT = "fitaudit-output"
#: The sweep's result file in the output folder; the other stages take their reference from it.
SWEEP_FILE = "sweep.json"


#: --jobs when not given, in every command: every core. Starting worker processes costs about a
#: second, so a small problem runs faster with --jobs 1; a large sweep or bootstrap gains a core's worth.
DEFAULT_JOBS = -1


def add_parallel_options(parser: argparse.ArgumentParser, dask: bool = True) -> None:
    """--jobs, and with ``dask`` also --backend and --scheduler."""
    parser.add_argument("--jobs", type=int, default=DEFAULT_JOBS, metavar="N",
                        help="worker processes on this machine, -1 for every core (default: -1; --jobs 1 is "
                             "faster where the work takes less than starting the workers, about a second)")
    if dask:
        parser.add_argument("--backend", choices=BACKENDS, default="processes",
                            help="processes (this machine) or dask (a running Dask cluster, see --scheduler)")
        parser.add_argument("--scheduler", metavar="ADDRESS",
                            help="address of the Dask scheduler, e.g. tcp://10.0.0.5:8786")


def parallel_plan(args: argparse.Namespace) -> ParallelPlan:
    """The ParallelPlan the options of ``add_parallel_options`` ask for."""
    return ParallelPlan(jobs=args.jobs, backend=getattr(args, "backend", "processes"),
                        scheduler=getattr(args, "scheduler", None))


def add_output_option(parser: argparse.ArgumentParser, what: str) -> None:
    """-o/--out: the folder for ``what`` (e.g. "sweep.json, the figures and the chunk cache")."""
    parser.add_argument("-o", "--out", default=DEFAULT_OUT, metavar="OUT",
                        help=f"folder for {what} (default: {DEFAULT_OUT})")


def add_solver_option(parser: argparse.ArgumentParser, default: str, *, several: bool = False) -> None:
    """--solver: gn or lm; with ``several``, a comma-separated list of them (e.g. gn,lm)."""
    if several:
        parser.add_argument("--solver", type=comma_words, metavar="gn,lm",
                            help=f"solvers to run, comma-separated: gn (Gauss-Newton), lm (Levenberg-Marquardt) "
                                 f"or gn,lm (default: {default})")
    else:
        parser.add_argument("--solver", choices=METHODS,
                            help=f"gn (Gauss-Newton with step factor) or lm (Levenberg-Marquardt) (default: {default})")


def add_step_factors_option(parser: argparse.ArgumentParser, default: str, *, several: bool = True) -> None:
    """--step-factors A,B,...: step factors in (0, 1]; without ``several`` exactly one value."""
    what = "step factors in (0, 1], comma-separated, e.g. 1,0.5,0.25" if several else \
        "the step factor in (0, 1]; one value, as this command runs one setting"
    parser.add_argument("--step-factors", type=comma_numbers, metavar="A,B,..." if several else "A",
                        help=f"{what} (default: {default})")


def comma_numbers(text: str) -> tuple[float, ...]:
    """``"1,0.5"`` -> (1.0, 0.5); argparse reports anything else as a usage error."""
    try:
        return tuple(float(item) for item in text.split(",") if item.strip())
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected numbers separated by commas, got {text!r}") from None


def comma_words(text: str) -> tuple[str, ...]:
    """``"gn, lm"`` -> ("gn", "lm")."""
    return tuple(item.strip() for item in text.split(",") if item.strip())


def one_step_factor(args: argparse.Namespace) -> float | None:
    """The single --step-factors value of a command that runs one step factor (None when not given).

    Raises:
        InputError: for several values or one outside (0, 1].
    """
    if args.step_factors is None:
        return None
    if len(args.step_factors) != 1:
        raise InputError(f"--step-factors {','.join(f'{a:g}' for a in args.step_factors)}: this command runs one "
                         "step factor; give one value ('fitaudit sweep' compares several)")
    factor = args.step_factors[0]
    if not 0 < factor <= 1:
        raise InputError(f"--step-factors {factor:g}: must lie in (0, 1]")
    return factor


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
    """Run a command's handler; bad input becomes one line on stderr and exit status 2, an
    unforeseen error one line and status 3 (with the traceback when FITAUDIT_TRACEBACK=1).

    The output folder (``args.out``) is checked and locked before anything is computed.
    """
    try:
        with claimed_output(getattr(args, "out", None)):
            return args.handler(args)
    except InputError as error:
        err.print(f"[bold red]fitaudit: error:[/] {shown(error)}", soft_wrap=True)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        err.print("fitaudit: interrupted")
        return 130
    except Exception as error:
        if os.environ.get(TRACEBACK_VARIABLE) == "1":
            err.print(shown(traceback.format_exc()), soft_wrap=True)
        err.print(f"[bold red]fitaudit: unexpected error:[/] {shown(type(error).__name__)}: {shown(error)} "
                  f"(rerun with {TRACEBACK_VARIABLE}=1 for the traceback)", soft_wrap=True)
        return EXIT_UNEXPECTED


@contextmanager
def claimed_output(out_folder: str | None) -> Iterator[None]:
    """Make sure ``out_folder`` can be written and hold its lock while the command runs.

    A folder this call created is removed again if the command left it empty (bad input).

    Raises:
        InputError: the path is a file or lies inside one, cannot be created or written, or
            another fitaudit run holds its lock.
    """
    if not out_folder:
        yield
        return
    folder = Path(out_folder)
    existed = folder.is_dir()
    try:
        folder.mkdir(parents=True, exist_ok=True)
        lock = open(folder / LOCK_FILE, "a")
    except OSError as error:
        raise InputError(f"-o {folder}: cannot write there: {error.strerror or error}") from None
    try:
        if not _try_lock(lock):
            raise InputError(f"-o {folder}: another fitaudit run is writing to this folder; wait for it to "
                             "finish or choose another folder") from None
        yield
    finally:
        lock.close()
        if not existed and [entry.name for entry in folder.iterdir()] == [LOCK_FILE]:
            (folder / LOCK_FILE).unlink()
            folder.rmdir()


def _try_lock(handle) -> bool:
    """Take an exclusive lock on the open file ``handle`` without waiting; False when another
    process holds it. The system drops the lock when the process ends, however it ends."""
    try:
        import fcntl
    except ImportError:  # Windows
        import msvcrt
        try:
            msvcrt.locking(handle.fileno(), msvcrt.LK_NBLCK, 1)
            return True
        except OSError:
            return False
    try:
        fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        return True
    except BlockingIOError:
        return False


def open_scenario(args: argparse.Namespace) -> Scenario:
    """Load the scenario named on the command line and show its warnings (not in JSON mode)."""
    scenario = load_scenario(args.scenario)
    for warning in scenario.warnings:
        err.print(f"[yellow]warning:[/] {shown(warning)}", soft_wrap=True)
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
            err.print(f"[yellow]note:[/] {shown(path)} is not used: it was written for other data, model, "
                      "parameter ranges or solver settings; run 'fitaudit sweep' again to audit its best fit",
                      soft_wrap=True)
            return None
        return reference_from_json(payload, scenario.names)
    except (OSError, ValueError, KeyError, TypeError, AttributeError) as error:
        err.print(f"[yellow]note:[/] {shown(path)} is not used: it cannot be read ({shown(error)})",
                  soft_wrap=True)
        return None


def show_audited_fit(known: KnownFit | None, reference: SweepReference | None, out_folder: str | None) -> None:
    """Which fit the stage audited, and a warning line when a lower SSR is known."""
    if known is None:
        return
    out.print(shown(known.summary), soft_wrap=True)
    for note in known.notes:
        out.print(f"[yellow]note:[/] {shown(note)}", soft_wrap=True)
    if known.source == FROM_START and reference is None:
        folder = Path(out_folder or DEFAULT_OUT)
        out.print(f"[yellow]note:[/] no sweep of this scenario in {shown(folder)}: run 'fitaudit sweep' "
                  f"(-o {shown(folder)}) to search the parameter ranges for a lower SSR", soft_wrap=True)
    if known.warning is not None:
        out.print(f"[bold red]warning:[/] {shown(known.warning)}", soft_wrap=True)
