"""CPU time to draw each stage's figures of the bundled scenario's audit, optionally against another package copy.

Run:  python tests/benchmarks/bench_stage_figures.py [--rounds R] [--quick] [--out DIR] [--baseline DIR] [--keep DIR]
      [--stages NAME ...]   (e.g. git archive main | tar -x -C /tmp/figures-main; --baseline /tmp/figures-main)

The audit of ``scenarios/probe-cooling`` (its own settings, or the small designs with ``--quick``) is
run once on one worker (``--out`` keeps its chunk caches for the next run), then every stage's
figures are drawn ``R`` times in one process, PNG and PDF each as ``fitaudit run`` draws them, after
one unmeasured round (fonts, caches). Each stage's writer (``derivatives``, ``sweep``, ``bootstrap``,
``identifiability``, ``residuals``, ``fit``) is timed by the process's CPU time around it, into a
fresh folder each round (so nothing is found drawn), and each figure by the CPU time from the end of
the previous figure's saving (or the writer's start) to the end of its own. With ``--baseline`` (a
folder holding an ``audit`` package, loaded beside this tree's as ``baseline_audit``) the same
results are drawn by both, in alternating order round by round, so that a change in the machine's
load touches both alike. Prints one JSON object: per figure, per stage and side the median CPU
seconds over the rounds and the quartiles; the median of each side's per-round totals; and the
median, quartiles and range of the per-round ratios of the baseline's total to this tree's, in all
and by stage. ``--keep DIR`` leaves the last round's files there (``DIR/this``, ``DIR/baseline``),
to look at side by side.
"""
from __future__ import annotations

import os

for variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[variable] = "1"   # one core: set before numpy loads its BLAS

import argparse  # noqa: E402
import functools  # noqa: E402
import importlib  # noqa: E402
import json  # noqa: E402
import shutil  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

THIS_TREE = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(THIS_TREE), str(Path(__file__).resolve().parent)]   # this tree's package first

from baseline_package import baseline_module  # noqa: E402
from audit.report.run import run_audit  # noqa: E402

#: Each stage's figure writer by the field of the AuditResult it draws.
STAGES = {"derivatives": "derivatives", "sweep": "sweep", "bootstrap": "bootstrap",
          "identifiability": "identifiability", "residuals": "residuals", "fit": "asymptotic"}
#: Figure modules whose ``save`` ends a figure: each stage's drawing module (the sweep's are sweep_maps and
#: sweep_charts). A package copy older than these drew in the stage's own module (the name without "_charts").
SAVING_MODULES = ("derivatives_charts", "identifiability_charts", "bootstrap_charts", "residuals_charts",
                  "fit_charts", "sweep_maps", "sweep_charts")
#: What ``fitaudit run`` writes: PNG for the HTML and Markdown appendix, PDF for LaTeX.
FORMATS = ("png", "pdf")


class Side:
    """One copy of the figure code (``load``: module name under the package -> module): its stage
    writers for ``result`` (an AuditResult) and a clock that splits a writer's CPU time into its figures."""

    def __init__(self, load, result):
        self.figure_times: dict[str, float] = {}
        self._last = 0.0
        modules = {name: load(f"figures.{name}") for name in tuple(STAGES) + ("layout",)}
        for name in SAVING_MODULES:
            drawing = _drawing_module(load, name)
            drawing.save = self._clocked(drawing.save)
        self.layout = modules["layout"]
        scenario, problem = result.scenario, result.scenario.problem
        x = problem.x if problem.x.ndim == 1 else problem.x.T
        fitted = problem.predict(result.best_fit.params[None, :])[0]
        residual = modules["residuals"].residual_picture(result.residuals, x, fitted, scenario.x_names[0])
        fit = modules["fit"].fit_picture(problem, result.asymptotic, scenario.x_names[0], scenario.y_name)
        self.writers = {
            "derivatives": functools.partial(modules["derivatives"].write_figures, result.derivatives),
            "sweep": functools.partial(modules["sweep"].write_figures, result.sweep),
            "bootstrap": functools.partial(modules["bootstrap"].write_figures, result.bootstrap),
            "identifiability": functools.partial(modules["identifiability"].write_figures, result.identifiability),
            "residuals": functools.partial(modules["residuals"].draw_picture, residual),
            "fit": functools.partial(modules["fit"].draw_picture, fit),
        }

    def _clocked(self, save):
        """``save`` that records the CPU time since the previous figure's end under its stem."""
        def clocked(figure, folder, stem, formats=("png",)):
            paths = save(figure, folder, stem, formats)
            now = time.process_time()
            self.figure_times[stem] = now - self._last
            self._last = now
            return paths
        return clocked

    def timed_round(self, folder: Path, stages: tuple[str, ...]) -> tuple[dict[str, float], dict[str, float]]:
        """Draw every stage's figures into ``folder``: (stage -> CPU seconds, figure -> CPU seconds).

        The shared mathtext parser (``figures.layout``) is made afresh first, so that each round
        parses as a new worker process would, once per expression."""
        getattr(self.layout, "_MATHTEXT_PARSERS", {}).clear()
        self.figure_times = {}
        stage_times = {}
        for stage in stages:
            start = self._last = time.process_time()
            self.writers[stage](folder, FORMATS)
            stage_times[stage] = time.process_time() - start
        return stage_times, dict(self.figure_times)


def _drawing_module(load, name: str):
    """The module ``name`` of a package copy (``load``), or the stage's own module in a copy older than
    the drawing modules."""
    try:
        return load(f"figures.{name}")
    except ModuleNotFoundError:
        return load(f"figures.{name.removesuffix('_charts')}")


def spread(values: list[float], digits: int = 3) -> dict:
    """Median and quartiles of ``values``."""
    return {"median": round(float(np.median(values)), digits),
            "quartiles": [round(float(q), digits) for q in np.quantile(values, [0.25, 0.75])]}


def summary(rounds: list[tuple[dict[str, float], dict[str, float]]]) -> dict:
    """Per stage and per figure median and quartiles, and the median of the per-round totals (CPU s)."""
    stages = {name: spread([stage_times[name] for stage_times, _ in rounds]) for name in rounds[0][0]}
    figures = {name: spread([figure_times.get(name, 0.0) for _, figure_times in rounds]) for name in rounds[0][1]}
    totals = [sum(stage_times.values()) for stage_times, _ in rounds]
    return {"stages": stages, "figures": figures, "total_median": round(float(np.median(totals)), 3)}


def ratios(base: list[float], this: list[float]) -> dict:
    """Median, quartiles and range of the per-round ratios ``base / this``."""
    found = [b / t for b, t in zip(base, this)]
    return {**spread(found, 2), "range": [round(min(found), 2), round(max(found), 2)]}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--quick", action="store_true", help="the audit's small designs")
    parser.add_argument("--out", type=Path, help="the audit's chunk caches kept between runs (default: temporary)")
    parser.add_argument("--baseline", type=Path, help="a folder holding another copy of the audit package")
    parser.add_argument("--keep", type=Path, help="leave the last round's figures in this folder")
    parser.add_argument("--stages", nargs="+", choices=STAGES, default=list(STAGES))
    options = parser.parse_args()

    work = Path(tempfile.mkdtemp(prefix="bench-stage-figures-"))
    result = run_audit(THIS_TREE / "scenarios" / "probe-cooling", out=options.out or work / "audit",
                       quick=options.quick)
    missing = [stage for stage in options.stages if getattr(result, STAGES[stage]) is None]
    if missing:
        raise SystemExit(f"the audit has no result to draw for {missing}: {result.skipped}")
    sides = {"this": Side(lambda name: importlib.import_module(f"audit.{name}"), result)}
    if options.baseline is not None:
        sides["baseline"] = Side(functools.partial(baseline_module, options.baseline.resolve()), result)
    stages = tuple(options.stages)
    for name, side in sides.items():
        side.timed_round(work / "warm-up" / name, stages)
    times: dict[str, list] = {name: [] for name in sides}
    order = list(sides)
    for round_index in range(options.rounds):
        for name in order if round_index % 2 == 0 else order[::-1]:
            times[name].append(sides[name].timed_round(work / f"round-{round_index}" / name, stages))
    report = {"scenario": "probe-cooling", "quick": options.quick, "rounds": options.rounds, "formats": FORMATS,
              "cpu_seconds": {name: summary(rounds) for name, rounds in times.items()}}
    if "baseline" in times:
        base, this = times["baseline"], times["this"]
        report["baseline_over_this_total"] = ratios([sum(s.values()) for s, _ in base],
                                                    [sum(s.values()) for s, _ in this])
        report["baseline_over_this_by_stage"] = {stage: ratios([s[stage] for s, _ in base], [s[stage] for s, _ in this])
                                                 for stage in stages}
    if options.keep is not None:
        shutil.rmtree(options.keep, ignore_errors=True)
        shutil.copytree(work / f"round-{options.rounds - 1}", options.keep)
    shutil.rmtree(work, ignore_errors=True)
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
