"""A formula's compiled Gauss-Newton loop: generated source, cached on disk, compiled by numba.

The engine's loop (``engine/kernel_loop.py``) calls ``accumulate`` for one pass over the data
per iteration. This module writes that function from the formula's sympy expression and its
derivatives, with common subexpressions computed once (``sympy.cse``), appends it to
the loop's text and saves the whole under the user's cache folder, named by a digest of the
text. numba's ``cache=True`` keeps the machine code beside that file, so a formula compiles
once per machine, not once per process or worker.

Everything here is optional: without numba, or where the cache folder cannot be written or the
formula cannot be compiled, ``load_kernel`` returns None and the engine keeps its numpy path.
"""
from __future__ import annotations

import hashlib
import importlib.util
import os
import sys
import tempfile
from pathlib import Path

import numpy as np

from ..engine.compiled import loop_source, run_loop
from ..engine.iterate import Runs

#: Bumped when the generated file's layout changes, so that old cached files are not reused.
KERNEL_FORMAT = 1


def kernel_cache_folder() -> Path:
    """Where generated kernels live: $XDG_CACHE_HOME/fitaudit/kernels, else ~/.cache/fitaudit/kernels."""
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "fitaudit" / "kernels"


def numba_available() -> bool:
    """True when numba can be imported (checked without importing it)."""
    return importlib.util.find_spec("numba") is not None


def accumulate_source(expression, derivatives, parameter_symbols, predictor_symbols) -> str:
    """Source of ``accumulate(x, observed, weights, point, gram, gradient) -> ssr`` for this model.

    One pass over the observations: x (k, m), observed and weights (sqrt(w)) (m,), point (n,).
    The sums live in local variables (registers, not memory) and are stored once at the end:
    gram (n, n) gets the upper triangle of JᵀJ, gradient (n,) Jᵀr, both weighted. Symbols are
    renamed so that no user name can shadow anything in the generated code.
    """
    import sympy
    from sympy.printing.pycode import PythonCodePrinter

    n, k = len(parameter_symbols), len(predictor_symbols)
    renamed = {symbol: sympy.Symbol(f"p_{j}", real=True) for j, symbol in enumerate(parameter_symbols)}
    renamed.update({symbol: sympy.Symbol(f"x_{i}", real=True) for i, symbol in enumerate(predictor_symbols)})
    outputs = [part.xreplace(renamed) for part in (expression, *derivatives)]
    shared, (value, *partials) = sympy.cse(outputs, symbols=sympy.numbered_symbols("t_"))
    printer = PythonCodePrinter({"standard": "python3"})
    pairs = [(a, b) for a in range(n) for b in range(a, n)]
    body = [f"x_{i} = x[{i}, i]" for i in range(k)]
    body += [f"{symbol} = {printer.doprint(part)}" for symbol, part in shared]
    body += ["weight = weights[i]", f"residual = (observed[i] - ({printer.doprint(value)})) * weight",
             "ssr += residual * residual"]
    body += [f"d_{j} = ({printer.doprint(part)}) * weight" for j, part in enumerate(partials)]
    body += [f"q_{j} += d_{j} * residual" for j in range(n)]
    body += [f"g_{a}_{b} += d_{a} * d_{b}" for a, b in pairs]
    lines = ["@numba.njit(cache=True, error_model=\"numpy\")",
             "def accumulate(x, observed, weights, point, gram, gradient):  # pragma: no cover - compiled"]
    lines += [f"    p_{j} = point[{j}]" for j in range(n)]
    lines += ["    ssr = 0.0"] + [f"    q_{j} = 0.0" for j in range(n)] + [f"    g_{a}_{b} = 0.0" for a, b in pairs]
    lines += ["    for i in range(observed.shape[0]):"] + [f"        {line}" for line in body]
    lines += [f"    gradient[{j}] = q_{j}" for j in range(n)] + [f"    gram[{a}, {b}] = g_{a}_{b}" for a, b in pairs]
    lines += ["    return ssr"]
    return "\n".join(lines) + "\n"


def load_kernel(expression, derivatives, parameter_symbols, predictor_symbols):
    """The compiled loop for this formula, or None where it cannot be had (see the module docstring)."""
    if not numba_available():
        return None
    source = (loop_source() + "\n\n"
              + accumulate_source(expression, derivatives, parameter_symbols, predictor_symbols))
    digest = hashlib.sha256(f"{KERNEL_FORMAT}\n{source}".encode()).hexdigest()[:24]
    try:
        path = _written(kernel_cache_folder() / f"gauss_newton_{digest}.py", source)
        name = f"fitaudit_kernel_{digest}"
        spec = importlib.util.spec_from_file_location(name, path)
        module = importlib.util.module_from_spec(spec)
        # numba's cache finds the functions the loop calls through sys.modules.
        sys.modules[name] = module
        spec.loader.exec_module(module)
        _warm_up(module.fit_runs, len(parameter_symbols), len(predictor_symbols))
    except Exception:   # numba missing a function, an unwritable cache: the numpy path still works
        return None
    return module.fit_runs


def _written(path: Path, source: str) -> Path:
    """``path`` holding ``source``; written atomically, since workers may race to write it."""
    if path.exists() and path.read_text() == source:
        return path
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(dir=path.parent, suffix=".tmp")
    with os.fdopen(handle, "w") as stream:
        stream.write(source)
    os.replace(temporary, path)
    return path


def _warm_up(loop, n_params: int, n_predictors: int) -> None:
    """Compile (or load from numba's cache) for the argument types the engine passes, on one run."""
    x = np.linspace(1.0, 2.0, 3)
    runs = Runs(starts=np.ones((1, n_params)), step_factor=np.ones(1), y=np.ones(3),
                x=x if n_predictors <= 1 else np.tile(x, (n_predictors, 1)), sqrt_weights=None,
                free=np.arange(n_params), held=None, typical=np.ones((1, n_params)))
    run_loop(loop, runs, 1e-8, 1)
