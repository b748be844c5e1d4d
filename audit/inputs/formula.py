"""Models typed as formulas: exact derivatives by computer algebra, compiled to batched numpy
(and, where numba is installed, to the engine's compiled Gauss-Newton loop: ``formula_kernel``).

``compile_formula("A * exp(-k * t) + c", ("A", "k", "c"), ("t",))`` checks the text against the
whitelist of ``formula_syntax`` (it is never executed), turns it into a sympy expression,
differentiates it symbolically for every parameter and compiles model and Jacobian with
``sympy.lambdify`` to numpy functions that follow the engine's contract::

    compiled.model(x, *params)     -> (B, m)         params each (B, 1)
    compiled.jacobian(x, *params)  -> [n arrays]     each broadcastable to (B, m)

With one predictor x has shape (m,) (or (B, m) per run); with k predictors it has shape (k, m)
(or (k, B, m)), row i holding the predictor named ``predictor_names[i]``. A compiled formula
pickles as its text and names and is compiled again where it is unpickled (process and Dask
workers), since generated functions cannot be pickled.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..errors import InputError
from .formula_kernel import load_kernel, numba_available
from .formula_syntax import check_names, parse_checked, to_sympy

#: Marks a kernel not built yet (None means it cannot be had).
_NOT_BUILT = object()


class CompiledFormula:
    """A checked formula with its exact partial derivatives, ready for ``Problem``.

    Attributes:
        text: the formula as given.
        parameter_names: (n) parameter names, in the order of the model's arguments.
        predictor_names: (k) predictor names, in the order of the rows of x.
        expression: the sympy expression.
        derivatives: (n) sympy expressions, the partial derivative for each parameter.
        derivative_texts: (n) the derivatives as text (sympy's notation, e.g. ``Abs``, ``atan``).
        unused_parameters: names of parameters the formula does not contain.
    """

    def __init__(self, text: str, parameter_names: Sequence[str], predictor_names: Sequence[str],
                 where: str = "formula") -> None:
        """Check, differentiate and compile; see ``compile_formula``."""
        import sympy

        self.text = text
        self.parameter_names = tuple(parameter_names)
        self.predictor_names = tuple(predictor_names)
        self.where = where
        check_names(self.parameter_names, self.predictor_names, where)
        self.parameter_symbols = tuple(sympy.Symbol(name, real=True) for name in self.parameter_names)
        self.predictor_symbols = tuple(sympy.Symbol(name, real=True) for name in self.predictor_names)
        symbols = dict(zip(self.parameter_names + self.predictor_names,
                           self.parameter_symbols + self.predictor_symbols))
        tree = parse_checked(text, symbols, where)
        self.expression = to_sympy(tree, text, symbols, where)
        try:
            self._differentiate_and_compile(sympy)
        except RecursionError:
            # parse_checked's depth limit keeps sympy well inside Python's recursion limit; this
            # turns any case it misses into a message instead of a traceback.
            raise InputError(f"{where}: the formula is nested too deeply for its derivatives") from None
        self._kernel = _NOT_BUILT

    def _differentiate_and_compile(self, sympy) -> None:
        self.derivatives = tuple(sympy.diff(self.expression, symbol) for symbol in self.parameter_symbols)
        self.derivative_texts = tuple(str(derivative) for derivative in self.derivatives)
        self.unused_parameters = tuple(name for name, symbol in zip(self.parameter_names, self.parameter_symbols)
                                       if not self.expression.has(symbol))
        # The generated code names its arguments x_i and p_j, so that user names such as "numpy"
        # cannot shadow anything in it. They are real symbols like the user's: lambdify's own
        # dummify would swap in symbols without assumptions, and rebuilding nested functions of
        # those makes sympy's evaluation search far longer (seconds for six nested calls).
        renamed = {symbol: sympy.Symbol(f"x_{i}", real=True) for i, symbol in enumerate(self.predictor_symbols)}
        renamed.update({symbol: sympy.Symbol(f"p_{j}", real=True) for j, symbol in enumerate(self.parameter_symbols)})
        arguments = list(renamed.values())
        self._model = sympy.lambdify(arguments, self.expression.xreplace(renamed), modules="numpy", dummify=False)
        self._jacobian = sympy.lambdify(arguments, [derivative.xreplace(renamed) for derivative in self.derivatives],
                                        modules="numpy", cse=True, dummify=False)

    def __reduce__(self):
        return (compile_formula, (self.text, self.parameter_names, self.predictor_names, self.where))

    def __repr__(self) -> str:
        return f"CompiledFormula({self.text!r}, {self.parameter_names}, {self.predictor_names})"

    def _predictor_rows(self, x) -> tuple:
        if len(self.predictor_names) == 1:
            return (x,)
        x = np.asarray(x)
        if x.shape[:1] != (len(self.predictor_names),):
            raise ValueError(f"x must have {len(self.predictor_names)} rows, one per predictor "
                             f"({', '.join(self.predictor_names)}), got shape {x.shape}")
        return tuple(x)

    def model(self, x, *params):
        """Model values: x as described in the module docstring, params each (B, 1) -> (B, m)."""
        return self._model(*self._predictor_rows(x), *params)

    def jacobian(self, x, *params) -> list:
        """The n partial derivatives, each broadcastable to (B, m) (constants stay scalars)."""
        return list(self._jacobian(*self._predictor_rows(x), *params))

    def gauss_newton_kernel(self):
        """The compiled Gauss-Newton loop for this formula (built on first use, loaded from the
        disk cache where another process built it), or None without numba; see ``formula_kernel``."""
        if self._kernel is _NOT_BUILT:
            self._kernel = load_kernel(self.expression, self.derivatives, self.parameter_symbols,
                                       self.predictor_symbols)
        return self._kernel

    def callable_with(self, modules: str):
        """``f(*predictors, *params)`` and ``[df/dp_j](*predictors, *params)`` for another backend.

        ``modules="mpmath"`` gives scalar functions for extended-precision arithmetic.
        """
        import sympy

        arguments = list(self.predictor_symbols + self.parameter_symbols)
        return (sympy.lambdify(arguments, self.expression, modules=modules, dummify=True),
                sympy.lambdify(arguments, list(self.derivatives), modules=modules, dummify=True))


def compile_formula(text: str, parameter_names: Sequence[str], predictor_names: Sequence[str] = ("x",),
                    where: str = "formula") -> CompiledFormula:
    """Check, differentiate and compile a model formula.

    Args:
        text: e.g. ``"A * exp(-k * t) + c"``; see ``formula_syntax`` for what is allowed.
        parameter_names: the parameters, in the order the engine passes them (n ≥ 0).
        predictor_names: the predictors, in the order of the rows of x (k ≥ 0).
        where: names the source in error messages, e.g. ``"scenario.toml [model] expression"``.

    Returns:
        A ``CompiledFormula``; ``.model`` and ``.jacobian`` plug into ``Problem``.

    Raises:
        InputError: for names that cannot appear in a formula and for any text outside the
            whitelist, with the offending part marked.
    """
    return CompiledFormula(text, parameter_names, predictor_names, where)


def check_formula(text: str, parameter_names: Sequence[str], predictor_names: Sequence[str] = ("x",),
                  where: str = "formula") -> None:
    """Only check the text against the whitelist (fast: no computer algebra).

    Raises:
        InputError: as ``compile_formula`` does for bad names or text.
    """
    check_names(parameter_names, predictor_names, where)
    parse_checked(text, (*parameter_names, *predictor_names), where)


def formula_problem_parts(compiled: CompiledFormula) -> dict:
    """Keyword arguments for ``Problem``: model, jacobian and formula of ``compiled``."""
    if compiled.unused_parameters:
        raise InputError(f"{compiled.where}: the formula does not contain the parameter(s) "
                         f"{', '.join(compiled.unused_parameters)}, so the data cannot determine them")
    return {"model": compiled.model, "jacobian": compiled.jacobian, "formula": compiled.text,
            "kernel": compiled.gauss_newton_kernel if numba_available() else None}
