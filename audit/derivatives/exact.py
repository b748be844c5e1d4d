"""The exact reference of the derivative check: the stated formula's derivatives by computer algebra.

Computer algebra is most of a rerun's derivative check: importing sympy alone takes about a
second. So, given a cache folder, the formula's values and derivatives at the check points are
stored there (``parallel.chunk_cache``: written atomically, checksummed) under a hash of all they
follow from: the formula, the parameter and predictor names, the predictors' values, the points,
the package version and its computing code. A rerun reads them back and imports no sympy. Whether
the formula reproduces the model function is judged afresh every time, since the model file can
change under an unchanged formula.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import __version__
from ..engine.problem import Problem
from ..errors import InputError
from ..parallel.chunk_cache import ChunkStore, cache_key, code_digest

#: Largest relative difference between the stated formula and the model function for the
#: formula to count as the same model.
FORMULA_MATCH = 1e-9
#: The stored arrays: the formula's values (K, m) and its derivatives (K, n, m) at the points.
VALUES, DERIVATIVES = "values", "derivatives"


def exact_derivatives(problem: Problem, points: np.ndarray, formula: str, predictor_names: tuple[str, ...],
                      cache: Path | None = None) -> tuple[np.ndarray | None, tuple[str, ...]]:
    """(exact (K, n, m) or None, notes): the formula's derivatives at ``points`` (K, n), if the
    formula reproduces the model function there; ``cache``: a folder to keep them in (None: none)."""
    store = None if cache is None else ChunkStore(_folder(cache, problem, points, formula, predictor_names), "exact")
    stored = None if store is None else store.load(0)
    if stored is None:
        try:
            stored = _computed(problem, points, formula, predictor_names)
        except InputError as error:
            return None, (f"the stated formula cannot be used for exact derivatives: {error}",)
        if store is not None:
            store.save(0, stored)
    model_values = problem.predict(points)
    scale = np.max(np.abs(model_values))
    if not np.all(np.abs(stored[VALUES] - model_values) <= FORMULA_MATCH * scale):
        return None, (f"the stated formula '{formula}' does not reproduce the model function at the check "
                      "points, so it is not used as the exact reference",)
    return stored[DERIVATIVES], ()


def _computed(problem: Problem, points: np.ndarray, formula: str, predictor_names) -> dict[str, np.ndarray]:
    """The formula's values and derivatives at ``points``, by computer algebra (raises InputError)."""
    from ..inputs.formula import compile_formula   # sympy: only when nothing is stored

    compiled = compile_formula(formula, problem.names, predictor_names, where="[model] formula")
    symbolic = Problem(model=compiled.model, x=problem.x, y=problem.y, names=problem.names,
                       jacobian=compiled.jacobian)
    return {VALUES: symbolic.predict(points), DERIVATIVES: symbolic.derivatives(points)}


def _folder(cache: Path, problem: Problem, points: np.ndarray, formula: str, predictor_names) -> Path:
    key = cache_key({"formula": formula, "parameters": list(problem.names), "predictors": list(predictor_names),
                     "x": np.asarray(problem.x, dtype=float), "points": points, "version": __version__,
                     "code": code_digest()})
    return Path(cache) / f"exact-derivatives-{key}"
