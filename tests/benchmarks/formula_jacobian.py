"""Speed of formula models: compiling, and fitting with the exact Jacobian vs central differences.

For every NIST StRD file: the time to check, differentiate and compile its formula, and the time
to fit a batch of starts scattered around Start 2 (Levenberg-Marquardt, tolerance 1e-10) with the
symbolic Jacobian and with the engine's central differences; also the cost of the extended-
precision check. Prints one JSON object.

    python tests/benchmarks/formula_jacobian.py [NIST_DIR] [--runs 256]
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

from audit.engine.batch import fit_batch
from audit.engine.problem import Problem
from audit.validation.extended_precision import refine_in_extended_precision
from audit.validation.grade import reference_model
from audit.validation.reference import read_reference

DEFAULT_DIR = Path(__file__).resolve().parents[2].parent / "shared" / "reference" / "nist-strd"


def seconds(function) -> tuple[float, object]:
    start = time.perf_counter()
    value = function()
    return time.perf_counter() - start, value


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folder", nargs="?", default=str(DEFAULT_DIR))
    parser.add_argument("--runs", type=int, default=256)
    args = parser.parse_args()
    rng = np.random.default_rng(20261201)
    rows = []
    for path in sorted(Path(args.folder).glob("*.dat")):
        reference = read_reference(path)
        compile_time, fitted = seconds(lambda: reference_model(reference))
        problem = fitted.problem
        numeric = Problem(model=problem.model, x=problem.x, y=problem.y, names=problem.names)
        starts = reference.start2 * (1 + rng.uniform(-0.05, 0.05, (args.runs, problem.n_params)))
        exact_time, exact = seconds(lambda: fit_batch(problem, starts, method="lm", tol=1e-10, max_iter=1000))
        numeric_time, differences = seconds(lambda: fit_batch(numeric, starts, method="lm", tol=1e-10, max_iter=1000))
        extended_time, _ = seconds(lambda: refine_in_extended_precision(
            fitted.model, fitted.response, reference.data_text, exact.params[0]))
        rows.append({
            "problem": reference.name, "observations": problem.n_obs, "parameters": problem.n_params,
            "compile_s": round(compile_time, 4), "fit_exact_s": round(exact_time, 4),
            "fit_differences_s": round(numeric_time, 4),
            "differences_over_exact": round(numeric_time / exact_time, 2),
            "converged_exact": int(exact.converged.sum()), "converged_differences": int(differences.converged.sum()),
            "extended_check_s": round(extended_time, 4),
        })
    total = {key: round(sum(row[key] for row in rows), 3)
             for key in ("compile_s", "fit_exact_s", "fit_differences_s", "extended_check_s")}
    total["differences_over_exact"] = round(total["fit_differences_s"] / total["fit_exact_s"], 2)
    json.dump({"runs_per_problem": args.runs, "problems": rows, "total": total}, sys.stdout, indent=2)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
