"""Formula fuzzing: whatever text a scenario puts in ``[model] formula`` (or ``expression``), the
parser answers with a working model or a one-line InputError naming the key, in bounded time,
and never runs any of the text.

Outside references: numpy, evaluating the same generated expressions directly, and numdifftools
for their derivatives. Examples are drawn with a fixed seed (``derandomize``), so a run is
repeatable.
"""
from __future__ import annotations

import builtins
import math
import signal
from contextlib import contextmanager
from pathlib import Path

import numdifftools as nd
import numpy as np
import pytest
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st

from audit.errors import InputError
from audit.inputs.formula import CompiledFormula, check_formula, compile_formula
from audit.inputs.formula_syntax import FUNCTIONS, MAX_DEPTH, MAX_EXACT_DIGITS, MAX_LENGTH, MAX_NODES

WHERE = "scenario.toml [model] formula"
PARAMETERS, PREDICTORS = ("a", "b"), ("x",)
#: The point where compiled models are compared with numpy: x, then a and b.
POINT = (1.3, 0.7, 1.9)
FUZZ = settings(max_examples=60, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much,
                                       HealthCheck.function_scoped_fixture])
#: A guard against a hang, not a speed measurement: compiling any of these takes well under a
#: second; a formula that never finishes would otherwise stop the whole suite.
HANG_SECONDS = 120


@pytest.fixture(autouse=True)
def in_an_empty_folder(tmp_path, monkeypatch):
    """Run in an empty folder, where any file an injected payload wrote would show."""
    monkeypatch.chdir(tmp_path)


@contextmanager
def no_hang():
    def stuck(signum, frame):
        raise AssertionError(f"compiling the formula did not finish within {HANG_SECONDS} s")

    previous = signal.signal(signal.SIGALRM, stuck)
    signal.alarm(HANG_SECONDS)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


def answer(text: str) -> CompiledFormula | str:
    """The compiled formula, or the message of the InputError; anything else fails the test."""
    with no_hang():
        try:
            check_formula(text, PARAMETERS, PREDICTORS, where=WHERE)
            checked = True
        except InputError as error:
            checked, first = False, str(error)
        try:
            compiled = compile_formula(text, PARAMETERS, PREDICTORS, where=WHERE)
        except InputError as error:
            message = str(error)
            assert message.startswith(WHERE + ":") and len(message.splitlines()) == 1, message
            # The quick check at load time refuses what it can see on the syntax tree alone.
            assert checked or message == first
            return message
    assert checked, "the quick check refused a formula that compiles"
    return compiled


# Random text over a formula-ish alphabet: tokens of the language, and what is not in it.
TOKENS = st.sampled_from([
    "a", "b", "x", "y", "pi", "e", "0", "1", "2.5", "1e3", "1_0", "0x1f", "1j", " ", "+", "-", "*", "/", "**", "//",
    "%", "^", "(", ")", "[", "]", "{", "}", ",", ".", ":", "=", "==", "<", "'", '"', "\\", "\n", "\t", "\x00",
    "\x0b", "\u2028", "é", "ａ", "𝐞𝐱𝐩", "exp", "log", "sqrt", "abs", "sin", "lambda", "import", "__", "if", "else",
    "for", "not", "and", "@", "$", "#", "!", "`", "?", ";",
])


@FUZZ
@given(st.lists(TOKENS, max_size=40).map("".join))
def test_random_text_is_a_model_or_one_line_naming_the_key(text):
    event("a model" if isinstance(answer(text), CompiledFormula) else "refused")


# Random expression trees over the allowed functions and operators.
LEAVES = st.sampled_from(["a", "b", "x", "pi", "2", "0.5", "3", "1e-3", "10"])


def _extended(children):
    return st.one_of(
        st.tuples(children, st.sampled_from(["+", "-", "*", "/", "**"]), children).map(
            lambda t: f"({t[0]} {t[1]} {t[2]})"),
        st.tuples(st.sampled_from(sorted(FUNCTIONS)), children).map(lambda t: f"{t[0]}({t[1]})"),
        children.map(lambda child: f"(-{child})"),
    )


TREES = st.recursive(LEAVES, _extended, max_leaves=10)
NUMPY = {"exp": np.exp, "log": np.log, "log10": np.log10, "sqrt": np.sqrt, "sin": np.sin, "cos": np.cos,
         "tan": np.tan, "arcsin": np.arcsin, "asin": np.arcsin, "arccos": np.arccos, "acos": np.arccos,
         "arctan": np.arctan, "atan": np.arctan, "sinh": np.sinh, "cosh": np.cosh, "tanh": np.tanh, "abs": np.abs,
         "pi": np.pi}


def direct(text: str, x: float, a: float, b: float) -> float:
    """numpy's value of a generated expression (our own trusted text, never a user's)."""
    with np.errstate(all="ignore"):
        return float(eval(text, {"__builtins__": {}}, {**NUMPY, "x": np.float64(x), "a": np.float64(a),  # noqa: S307
                                                        "b": np.float64(b)}))


@FUZZ
@given(TREES)
def test_expression_trees_compile_to_what_numpy_computes_with_numdifftools_derivatives(text):
    compiled = answer(text)
    event("a model" if isinstance(compiled, CompiledFormula) else "refused")
    if isinstance(compiled, str):
        return                      # refused with one line: a constant part undefined or too large
    x, a, b = POINT
    expected = direct(text, x, a, b)
    with np.errstate(all="ignore"):
        value = float(np.broadcast_to(compiled.model(np.array([x]), np.array([[a]]), np.array([[b]])), (1, 1))[0, 0])
    assume(math.isfinite(expected) and math.isfinite(value))
    # numpy reference: the same expression evaluated directly (sympy may reorder exact constants,
    # so agreement is to rounding, not to the bit).
    assert value == np.float64(expected) or abs(value - expected) <= 1e-7 * max(1.0, abs(expected))
    columns = compiled.jacobian(np.array([x]), np.array([[a]]), np.array([[b]]))
    for j, name in enumerate(PARAMETERS):
        exact = float(np.broadcast_to(columns[j], (1, 1))[0, 0])
        derivative = nd.Derivative(lambda v, j=j: direct(text, x, *(v if k == j else POINT[k + 1] for k in range(2))),
                                   full_output=True)
        found = derivative(POINT[j + 1])
        # Newer numdifftools returns one object holding both; 0.9.41, the oldest allowed, a pair (value, info).
        numeric, info = (found.estimate, found) if hasattr(found, "error_estimate") else found
        numeric, error = float(numeric), float(info.error_estimate)
        assume(math.isfinite(numeric) and math.isfinite(exact) and error < 1e-6 * max(1.0, abs(numeric)))
        # numdifftools reference: Richardson-extrapolated differences with their error estimate.
        assert abs(exact - numeric) <= 1e-6 * max(1.0, abs(numeric)) + 10 * error, (name, exact, numeric)


# Code injection: each would leave a mark if any of its text were ever run.
PAYLOADS = [
    "__import__('builtins').__setattr__('fuzz_ran', 1)",
    "exec(\"import builtins; builtins.fuzz_ran = 1\")",
    "eval(\"__import__('builtins').__setattr__('fuzz_ran', 1)\")",
    "().__class__.__base__.__subclasses__()",
    "a.__class__.__init__.__globals__",
    "globals().__setitem__('fuzz_ran', 1)",
    "open('fuzz_ran', 'w')",
    "breakpoint()",
    "getattr(a, '__class__')",
]
TEMPLATES = [
    "§", "a * x + §", "exp(§)", "(lambda: §)()", "[§ for a in x]", "a if § else x", "a[§]", "(z := §)",
    "f'{§}'", "x.§", "exp(a=1, b=§)", "exp(*§)", "§ ; a", "a * x\n§", "𝐞𝐱𝐩(a) + §", "__builtins__",
    "__import__", "sympy.sympify('§')", "(yield §)", "await §",
]


@FUZZ
@given(st.sampled_from(TEMPLATES), st.sampled_from(PAYLOADS))
def test_injected_code_is_refused_and_never_runs(template, payload):
    text = template.replace("§", payload)
    assert isinstance(answer(text), str), text
    assert not hasattr(builtins, "fuzz_ran") and not Path("fuzz_ran").exists()


def test_nothing_of_an_injection_ran_in_the_working_folder(tmp_path):
    for template in TEMPLATES:
        for payload in PAYLOADS:
            assert isinstance(answer(template.replace("§", payload)), str)
    assert list(tmp_path.iterdir()) == [] and not hasattr(builtins, "fuzz_ran")


# Huge, tiny and exact numbers, alone and in powers and exponentials.
NUMBERS = st.one_of(
    st.integers(min_value=-10**400, max_value=10**400).map(str),
    st.tuples(st.integers(1, 99999), st.integers(-600, 600)).map(lambda t: f"{t[0]}e{t[1]}"),
    st.integers(1, 60).map(lambda k: f"(1+1e-{k})"),
    st.integers(1, 60).map(lambda k: f"sqrt(1+1e-{k})"),
    st.sampled_from(["0", "1", "0.5", "pi", "sqrt(2)", "1e308", "1e-308", "0." + "0" * 500 + "1"]),
)
EXPONENTS = st.one_of(NUMBERS, st.integers(-10**6, 10**6).map(str))


@FUZZ
@given(NUMBERS, EXPONENTS, st.sampled_from(["a*x*{}*{}", "a*x*({})**({})", "a*x*exp(({})*log({}))", "a*x**({})+{}",
                                             "a*x*({})/({})", "a*x*(({})**({}))**3"]))
def test_huge_numbers_are_a_model_or_one_line(base, exponent, template):
    first, second = (exponent, base) if "log" in template else (base, exponent)
    answer(template.replace("{}", first, 1).replace("{}", second, 1))


@pytest.mark.parametrize("text", [
    "a*x*(1+1e-20)**100000",                   # 2 million exact digits
    "a*x*exp(100000*log(1+1e-20))",            # the same power, written as an exponential
    "a*x*sqrt(1+1e-20)**100000",               # a power of an exact root
    "a*x*((1+1e-20)**1000)**100",              # a power of a power
    "a*x*(1+1e-20)**40*(1+1e-20)**40",         # a product of two long constants
    "a*x*0." + "0" * 1500 + "1",               # a literal longer than any double
])
def test_constants_whose_exact_value_would_grow_without_bound_are_refused(text):
    # Each of these took minutes or ran out of memory before the limit (sympy computes powers of
    # exact fractions exactly); common practice: refuse input whose cost grows without bound.
    message = answer(text)
    assert isinstance(message, str) and f"more than {MAX_EXACT_DIGITS} exact digits" in message


def test_abs_of_an_argument_sympy_cannot_prove_real_keeps_a_small_derivative():
    # sympy differentiates |u| through re(u) and im(u) unless u is provably real, and those split
    # again at every nested function: this derivative ran to 100 000 characters. With |u|' =
    # sign(u)·u' (the model is real-valued) it stays the size of the chain rule's product.
    compiled = answer("abs(tan(log10(exp(acos(abs(arccos(tan(arccos(a*x)))))))))")
    assert isinstance(compiled, CompiledFormula) and len(compiled.derivative_texts[0]) < 2000
    # The derivative against numdifftools (reference) at a·x = 0.8, where every arccos has an
    # argument inside [-1, 1] (tan(arccos(0.8)) = 0.75) and no abs sits at its kink.
    exact = float(np.broadcast_to(compiled.jacobian(np.array([1.0]), np.array([[0.8]]), np.array([[1.0]]))[0],
                                  (1, 1))[0, 0])
    numeric = nd.Derivative(lambda a: direct("abs(tan(log10(exp(arccos(abs(arccos(tan(arccos(a*x)))))))))",
                                             1.0, a, 1.0))(0.8)
    assert np.isfinite(exact) and exact != 0
    np.testing.assert_allclose(exact, numeric, rtol=1e-7)


# Deep nesting and long formulas, on both sides of the documented limits.
@settings(FUZZ, max_examples=10)
@given(st.lists(st.sampled_from(sorted(FUNCTIONS)), min_size=MAX_DEPTH - 4, max_size=MAX_DEPTH + 2))
def test_nested_calls_are_accepted_up_to_the_depth_limit_only(functions):
    text = "".join(f"{name}(" for name in functions) + "a*x" + ")" * len(functions)
    # Each call is a level, then the product, then its names: len + 2 levels.
    assert isinstance(answer(text), CompiledFormula) == (len(functions) + 2 <= MAX_DEPTH), text


@FUZZ
@given(st.integers(0, 400), st.integers(0, 4200))
def test_deep_parentheses_and_long_sign_chains_are_a_model_or_one_line(parentheses, signs):
    answer("(" * parentheses + "a*x" + ")" * parentheses)
    answer("-" * signs + "a*x")


@FUZZ
@given(st.integers(1, 1100), st.sampled_from(["+", "*", "/", "-"]))
def test_long_formulas_are_accepted_up_to_the_size_limits_only(terms, operator):
    text = operator.join(["(a*x+b)"] * terms)
    nodes = 5 * terms + terms - 1            # per term: a sum, a product and three names
    accepted = isinstance(answer(text), CompiledFormula)
    assert accepted == (nodes <= MAX_NODES and len(text) <= MAX_LENGTH), (terms, operator)
