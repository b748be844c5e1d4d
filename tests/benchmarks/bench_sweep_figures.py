"""CPU time to draw each figure of the bundled scenario's sweep, optionally against another copy of the package.

Run:  python tests/benchmarks/bench_sweep_figures.py [--rounds R] [--cache DIR] [--baseline DIR] [--keep DIR]
      (e.g. git archive main | tar -x -C /tmp/figures-main; --baseline /tmp/figures-main)

The sweep of ``scenarios/probe-cooling`` (its own settings: the default sweep) is run once on one
worker (``--cache`` keeps its chunks for the next run), then its figures are drawn ``R`` times in
one process, after one unmeasured round (fonts, caches). Each figure is timed by the process's CPU
time around its drawing (matplotlib is imported before, as in a worker), through ``write_figures``'
``mapper`` argument, into a fresh folder each round. With ``--baseline`` (a folder holding an
``audit`` package, loaded beside this tree's as ``baseline_audit``) the same result is drawn by
both, in alternating order round by round, so a change in the machine's load touches both alike.
Prints one JSON object: per figure and side the median CPU seconds over the rounds and the
quartiles; the median over the rounds of each side's total; and the median of the per-round
ratios of the baseline's total to this tree's. ``--keep DIR`` leaves the last round's PNGs there
(``DIR/this``, ``DIR/baseline``), to look at side by side.
"""
from __future__ import annotations

import os

for variable in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ[variable] = "1"   # one core: set before numpy loads its BLAS

import argparse  # noqa: E402
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
from audit.inputs.scenario import load_scenario  # noqa: E402
from audit.parallel.plan import ParallelPlan  # noqa: E402
from audit.sweep.run import SweepRequest, run_sweep  # noqa: E402


def load_baseline_writer(folder: Path):
    """``write_figures`` of the sweep figures of the ``audit`` package under ``folder``."""
    return baseline_module(folder, "figures.sweep").write_figures


def timed_round(write_figures, result, folder: Path) -> dict[str, float]:
    """Draw every sweep figure of ``result`` into ``folder``: figure name -> CPU seconds.

    The figures' shared mathtext parser (``figures.layout``, where the package has one) is made
    afresh first, so that each round parses as a new worker process would, once per expression.
    """
    layout = sys.modules.get(write_figures.__module__.rsplit(".", 1)[0] + ".layout")
    getattr(layout, "_MATHTEXT_PARSERS", {}).clear()
    times: dict[str, float] = {}

    def timing_map(draw, figures):
        drawn = []
        for figure in figures:
            start = time.process_time()
            paths = draw(figure)
            elapsed = time.process_time() - start
            name = Path(paths[0]).stem if paths else "-".join(map(str, figure))
            times[name] = elapsed
            drawn.append(paths)
        return drawn

    write_figures(result, folder, mapper=timing_map)
    return times


def summary(rounds: list[dict[str, float]]) -> dict:
    """Median and quartiles per figure, and the median of the per-round totals (CPU seconds)."""
    figures = {name: [round_[name] for round_ in rounds] for name in rounds[0]}
    per_figure = {name: {"median": round(float(np.median(times)), 3),
                         "quartiles": [round(float(q), 3) for q in np.quantile(times, [0.25, 0.75])]}
                  for name, times in figures.items()}
    return {"figures": per_figure, "total_median": round(float(np.median([sum(r.values()) for r in rounds])), 3)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--cache", type=Path, help="sweep chunk cache kept between runs (default: a temporary one)")
    parser.add_argument("--baseline", type=Path, help="a folder holding another copy of the audit package")
    parser.add_argument("--keep", type=Path, help="leave the last round's figures in this folder")
    options = parser.parse_args()

    from audit.figures.sweep import write_figures
    importlib.import_module("audit.figures.sweep_charts")   # matplotlib, imported before timing, as in a worker

    writers = {"this": write_figures}
    if options.baseline is not None:
        writers["baseline"] = load_baseline_writer(options.baseline.resolve())
    work = Path(tempfile.mkdtemp(prefix="bench-sweep-figures-"))
    scenario = load_scenario(THIS_TREE / "scenarios" / "probe-cooling")
    result = run_sweep(scenario, SweepRequest.from_scenario(scenario), ParallelPlan(jobs=1),
                       options.cache or work / "cache")
    for side, writer in writers.items():
        timed_round(writer, result, work / "warm-up" / side)
    times: dict[str, list[dict[str, float]]] = {side: [] for side in writers}
    order = list(writers)
    for round_index in range(options.rounds):
        for side in order if round_index % 2 == 0 else order[::-1]:
            folder = work / f"round-{round_index}" / side
            times[side].append(timed_round(writers[side], result, folder))
    report = {"rounds": options.rounds, "cpu_seconds": {side: summary(rounds) for side, rounds in times.items()}}
    if "baseline" in times:
        ratios = [sum(base.values()) / sum(this.values()) for base, this in zip(times["baseline"], times["this"])]
        report["baseline_over_this_total"] = {"median": round(float(np.median(ratios)), 2),
                                              "range": [round(min(ratios), 2), round(max(ratios), 2)]}
    if options.keep is not None:
        last = work / f"round-{options.rounds - 1}"
        shutil.rmtree(options.keep, ignore_errors=True)
        shutil.copytree(last, options.keep)
    shutil.rmtree(work, ignore_errors=True)
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
