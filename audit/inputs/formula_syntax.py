"""What a model formula may contain, checked on Python's syntax tree before anything is evaluated.

A formula is one arithmetic expression: numbers, the parameter and predictor names, ``+ - * /
**``, unary minus and plus, calls of the functions in ``FUNCTIONS`` with one argument, and the
constant ``pi``. The text is parsed with ``ast`` (which never runs it) and every node is checked
against that whitelist; the first node outside it is reported with the text, the offending part
marked ``>>like this<<`` and its column. Checked trees are turned into sympy expressions here, so
no formula text ever reaches ``eval`` or sympy's own string parser.
"""
from __future__ import annotations

import ast
import functools
import keyword
import math
import unicodedata
from collections.abc import Iterable

from ..errors import InputError
from .settings import nearest

#: Function name in a formula -> name of the sympy function it becomes ("log10" is log(., 10)).
FUNCTIONS: dict[str, str] = {
    "exp": "exp", "log": "log", "log10": "log", "sqrt": "sqrt",
    "sin": "sin", "cos": "cos", "tan": "tan",
    "arcsin": "asin", "asin": "asin", "arccos": "acos", "acos": "acos", "arctan": "atan", "atan": "atan",
    "sinh": "sinh", "cosh": "cosh", "tanh": "tanh", "abs": "Abs",
}
CONSTANTS = ("pi",)
#: Longer texts are refused before parsing: no honest model needs more, and very long or deeply
#: nested input could exhaust the parser's or sympy's recursion.
MAX_LENGTH = 4000
#: Most numbers, names, operations and function calls in one formula (a sum of twenty Gaussian
#: peaks has 260). Exact derivatives grow with the square of a product's factors: at this size
#: a formula still compiles in seconds.
MAX_NODES = 300
#: Deepest nesting: each function call, power, unary sign or change between +/- and * or /
#: opens a level (a chain of + or of * stays on one). Typical models reach 5 to 10. Exact
#: derivatives of nested calls grow with the square of the depth (40 random chains of 18
#: nested functions compiled in at most 3 s each on a busy machine), and sympy's recursion
#: fails near 150.
MAX_DEPTH = 20
#: Largest magnitude (decimal exponent) a constant part of a formula may reach; beyond double range.
MAX_DECIMAL_EXPONENT = 308
#: Most decimal digits in an exact constant (numbers are kept as exact fractions): a constant
#: power such as (1 + 1e-20)**100000 would otherwise be computed to two million digits.
MAX_EXACT_DIGITS = 1000

#: Unicode categories shown as a space in messages: control, format (bidirectional overrides),
#: line and paragraph separators.
_UNPRINTABLE = ("Cc", "Cf", "Zl", "Zp")
_OPERATORS = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_REFUSED_OPERATORS = {ast.FloorDiv: "//", ast.Mod: "%", ast.MatMult: "@", ast.LShift: "<<", ast.RShift: ">>",
                      ast.BitOr: "|", ast.BitAnd: "&", ast.BitXor: "^"}
_REFUSED_NODES = {
    "Attribute": "attribute access is not allowed",
    "Subscript": "subscripts are not allowed (use parentheses for grouping)",
    "Lambda": "lambda functions are not allowed",
    "Constant": "only numbers are allowed as constants",
    "JoinedStr": "strings are not allowed",
    "ListComp": "comprehensions are not allowed", "SetComp": "comprehensions are not allowed",
    "DictComp": "comprehensions are not allowed", "GeneratorExp": "comprehensions are not allowed",
    "IfExp": "conditional expressions are not allowed",
    "Compare": "comparisons are not allowed", "BoolOp": "'and' / 'or' are not allowed",
    "NamedExpr": "assignments (:=) are not allowed",
    "Tuple": "tuples are not allowed (one expression only)", "List": "lists are not allowed",
    "Dict": "dictionaries are not allowed", "Set": "sets are not allowed",
    "Starred": "starred arguments are not allowed", "Await": "'await' is not allowed",
    "Yield": "'yield' is not allowed", "YieldFrom": "'yield' is not allowed", "Slice": "slices are not allowed",
}


def formula_error(where: str, text: str, reason: str, start: int | None = None, end: int | None = None) -> InputError:
    """An InputError naming ``where``, with the text and the characters start:end marked.

    Line breaks of every kind and other control or format characters in the text are shown as
    spaces, so that the message stays one line and its columns still count the text's characters.
    """
    text = "".join(" " if character.isspace() or unicodedata.category(character) in _UNPRINTABLE else character
                   for character in text)
    shown = " ".join(text.split()) if start is None else f"{text[:start]}>>{text[start:end]}<<{text[end:]}"
    column = "" if start is None else f" (column {start + 1})"
    return InputError(f"{where}: {reason}{column}: {shown}")


def check_names(parameter_names: Iterable[str], predictor_names: Iterable[str], where: str) -> None:
    """Refuse names a formula could not use: non-identifiers, keywords, function names, clashes.

    Raises:
        InputError: naming the first bad name.
    """
    seen: dict[str, str] = {}
    for role, names in (("parameter", parameter_names), ("predictor", predictor_names)):
        for name in names:
            if not name.isidentifier() or keyword.iskeyword(name):
                raise InputError(f"{where}: {role} name '{name}' cannot appear in a formula; use letters, "
                                 "digits and underscores, starting with a letter")
            if name in FUNCTIONS or name in CONSTANTS:
                raise InputError(f"{where}: {role} name '{name}' is also a formula function or constant; "
                                 "rename it")
            if name in seen:
                raise InputError(f"{where}: '{name}' is both a {seen[name]} and a {role} name")
            seen[name] = role


def parse_checked(text: str, names: Iterable[str], where: str) -> ast.Expression:
    """Parse ``text`` and check every node against the whitelist; nothing is evaluated.

    Args:
        text: the formula.
        names: the parameter and predictor names it may use.
        where: what to name in error messages, e.g. "scenario.toml [model] expression".

    Raises:
        InputError: empty or overlong text, a syntax error, or the first node outside the
            whitelist (marked in the text).
    """
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"{where}: the formula is empty")
    if len(text) > MAX_LENGTH:
        raise InputError(f"{where}: the formula has {len(text)} characters; at most {MAX_LENGTH} are accepted")
    flat = text.replace("\r", " ").replace("\n", " ").strip()
    try:
        tree = ast.parse(flat, mode="eval")
    except SyntaxError as error:
        offset = max(0, min((error.offset or 1) - 1, len(flat) - 1))
        raise formula_error(where, flat, f"not a single valid expression ({error.msg})", offset, offset + 1) from None
    except (RecursionError, MemoryError, ValueError):
        raise InputError(f"{where}: the formula is nested too deeply or contains invalid characters") from None
    allowed = {unicodedata.normalize("NFKC", name) for name in names}
    pending: list[tuple[ast.AST, int]] = [(tree.body, 1)]
    count = 0
    while pending:
        node, level = pending.pop()
        count += 1
        if count > MAX_NODES:
            raise InputError(f"{where}: the formula has more than {MAX_NODES} numbers, names, operations and "
                             "function calls; write a model this large as a Python model file")
        if level > MAX_DEPTH:
            start, end = _span(flat, node)
            raise formula_error(where, flat, f"nested more than {MAX_DEPTH} levels deep", start, end)
        children = _checked_children(node, flat, allowed, where)
        pending.extend((child, level + (0 if _same_chain(node, child) else 1)) for child in reversed(children))
    return tree


def _same_chain(parent: ast.AST, child: ast.AST) -> bool:
    """True when ``child`` continues ``parent``'s chain of + and - or of * and / (one level)."""
    families = ((ast.Add, ast.Sub), (ast.Mult, ast.Div))
    return (isinstance(parent, ast.BinOp) and isinstance(child, ast.BinOp)
            and any(isinstance(parent.op, family) and isinstance(child.op, family) for family in families))


def _checked_children(node: ast.AST, text: str, allowed: set[str], where: str) -> list[ast.AST]:
    """The children of an allowed node that still need checking; raise for a refused node."""
    def refuse(reason: str, part: ast.AST = node) -> InputError:
        start, end = _span(text, part)
        return formula_error(where, text, reason, start, end)

    if isinstance(node, ast.BinOp):
        if type(node.op) in _OPERATORS:
            return [node.left, node.right]
        symbol = _REFUSED_OPERATORS.get(type(node.op), "?")
        hint = "; write ** for a power" if symbol == "^" else "; use + - * / **"
        raise refuse(f"operator '{symbol}' is not allowed{hint}")
    if isinstance(node, ast.UnaryOp):
        if isinstance(node.op, (ast.USub, ast.UAdd)):
            return [node.operand]
        raise refuse("only unary minus and plus are allowed")
    if isinstance(node, ast.Constant):
        value = node.value
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            kind = "strings are not allowed" if isinstance(value, (str, bytes)) else (
                "complex numbers are not allowed" if isinstance(value, complex) else f"'{value!r}' is not a number")
            raise refuse(kind)
        too_large = not math.isfinite(value) if isinstance(value, float) else abs(value) > 10**MAX_DECIMAL_EXPONENT
        if too_large:
            raise refuse("number outside the double-precision range")
        return []
    if isinstance(node, ast.Name):
        if node.id in allowed or node.id in CONSTANTS:
            return []
        if node.id in FUNCTIONS:
            raise refuse(f"'{node.id}' is a function; call it as {node.id}(...)")
        raise refuse(f"unknown name '{node.id}'{nearest(node.id, sorted(allowed))}; "
                     f"names: {', '.join(sorted(allowed)) or 'none'}")
    if isinstance(node, ast.Call):
        function = node.func
        if isinstance(function, ast.Attribute):
            raise refuse(_REFUSED_NODES["Attribute"], function)
        if not isinstance(function, ast.Name):
            raise refuse("only the formula functions may be called (" + ", ".join(FUNCTIONS) + ")", function)
        if function.id not in FUNCTIONS:
            raise refuse(f"'{function.id}' cannot be called; functions: {', '.join(FUNCTIONS)}", function)
        if node.keywords:
            raise refuse(f"{function.id}() takes no keyword arguments", node.keywords[0])
        if any(isinstance(argument, ast.Starred) for argument in node.args):
            raise refuse("starred arguments are not allowed",
                         next(a for a in node.args if isinstance(a, ast.Starred)))
        if len(node.args) != 1:
            raise refuse(f"{function.id}() takes exactly one argument, got {len(node.args)}")
        return [node.args[0]]
    raise refuse(_REFUSED_NODES.get(type(node).__name__, f"'{type(node).__name__}' is not allowed in a formula"))


def _span(text: str, node: ast.AST) -> tuple[int, int]:
    """Character positions of ``node`` in the one-line ``text`` (ast counts UTF-8 bytes)."""
    raw = text.encode("utf-8")
    start = getattr(node, "col_offset", 0)
    end = getattr(node, "end_col_offset", None) or len(raw)
    return len(raw[:start].decode("utf-8", "ignore")), len(raw[:end].decode("utf-8", "ignore"))


def to_sympy(tree: ast.Expression, text: str, symbols: dict, where: str):
    """The sympy expression of a checked tree.

    Numbers keep their decimal text exactly (``0.1`` becomes 1/10), so that extended-precision
    evaluation sees the number as written. Constant parts must stay real and within the
    double-precision range.

    Args:
        tree: from ``parse_checked``.
        text: the formula (for error messages).
        symbols: name -> sympy Symbol for every allowed name.
        where: what to name in error messages.

    Raises:
        InputError: a constant part that is complex, infinite, undefined or out of range.
    """
    import sympy

    flat = text.replace("\r", " ").replace("\n", " ").strip()
    by_normal_form = {unicodedata.normalize("NFKC", name): symbol for name, symbol in symbols.items()}

    def constant_check(value, node: ast.AST):
        if value.has(sympy.zoo, sympy.oo, -sympy.oo, sympy.nan):
            raise formula_error(where, flat, "division by zero or an undefined value", *_span(flat, node))
        if value.has(sympy.I) or (value.is_number and value.is_real is False):
            raise formula_error(where, flat, "this part is not a real number", *_span(flat, node))
        if exact_digits(value) > MAX_EXACT_DIGITS:
            raise formula_error(where, flat, f"this constant needs more than {MAX_EXACT_DIGITS} exact digits",
                                *_span(flat, node))
        # A constant part that overflows a double (exp(1e300); 1e300 * 1e300, which sympy folds
        # into one coefficient of A * 1e300 * 1e300) would make every model value infinite, or
        # fail as a Python integer numpy cannot convert.
        constants = [value] if value.is_number else value.atoms(sympy.Number)
        if any(not math.isfinite(float(abs(part).evalf(17))) for part in constants):
            raise formula_error(where, flat, "constant outside the double-precision range", *_span(flat, node))
        return value

    def convert(node: ast.AST):
        if isinstance(node, ast.Constant):
            if isinstance(node.value, int):
                number = sympy.Integer(node.value)
            else:
                start, end = _span(flat, node)
                number = sympy.Rational(flat[start:end].replace("_", ""))
            return constant_check(number, node)
        if isinstance(node, ast.Name):
            return sympy.pi if node.id in CONSTANTS else by_normal_form[node.id]
        if isinstance(node, ast.UnaryOp):
            operand = convert(node.operand)
            return -operand if isinstance(node.op, ast.USub) else operand
        if isinstance(node, ast.Call):
            argument = convert(node.args[0])
            name = node.func.id
            if name == "exp" and argument.is_number:
                _check_exact_exponential(argument, flat, node, where)
            function = real_abs() if name == "abs" else getattr(sympy, FUNCTIONS[name])
            return constant_check(function(argument, 10) if name == "log10" else function(argument), node)
        left, right = convert(node.left), convert(node.right)
        if isinstance(node.op, ast.Pow) and left.is_number and right.is_number:
            _check_power_size(left, right, flat, node, where)
        operation = {ast.Add: sympy.Add, ast.Mult: sympy.Mul, ast.Pow: sympy.Pow}.get(type(node.op))
        if operation is not None:
            return constant_check(operation(left, right), node)
        return constant_check(left - right if isinstance(node.op, ast.Sub) else left / right, node)

    try:
        return convert(tree.body)
    except RecursionError:
        raise InputError(f"{where}: the formula is nested too deeply") from None


@functools.cache
def real_abs():
    """sympy's Abs, differentiated as for a real argument: sign(u)·u'.

    A formula's model is real-valued (where an argument leaves the real domain numpy gives NaN),
    but sympy cannot always prove an argument real (acos(u) is real only for |u| ≤ 1) and then
    differentiates |u| through re(u) and im(u), which split again at every nested function: the
    derivative of abs(tan(log10(exp(acos(abs(arccos(tan(arccos(a*x))))))))) ran to 100 000
    characters. The class keeps the name Abs, so every printer treats it as sympy's.
    """
    import sympy

    def derivative(self, symbol):
        return sympy.Derivative(self.args[0], symbol, evaluate=True) * sympy.sign(self.args[0])

    return type("Abs", (sympy.Abs,), {"_eval_derivative": derivative})


def exact_digits(value) -> float:
    """Decimal digits of the longest numerator or denominator among the exact numbers in ``value``."""
    import sympy

    bits = [max(abs(number.p).bit_length(), number.q.bit_length()) for number in value.atoms(sympy.Rational)]
    return max(bits, default=0) * math.log10(2)


def _check_power_size(base, exponent, text: str, node: ast.AST, where: str) -> None:
    """Refuse a constant power beyond double range, or one whose exact value would need more than
    MAX_EXACT_DIGITS digits (a rational power of an exact number is expanded), before sympy
    computes it exactly."""
    try:
        magnitude = abs(float(base)) if base.is_real else math.inf
        power = float(exponent) if exponent.is_real else math.inf
    except (OverflowError, TypeError):
        magnitude = power = math.inf
    if exponent.is_Rational and abs(power) * exact_digits(base) > MAX_EXACT_DIGITS:
        raise formula_error(where, text, f"this constant power needs more than {MAX_EXACT_DIGITS} exact digits",
                            *_span(text, node))
    if magnitude == 0 or magnitude == 1:
        return
    if not math.isfinite(power) or abs(power * math.log10(magnitude)) > MAX_DECIMAL_EXPONENT:
        raise formula_error(where, text, "constant power outside the double-precision range", *_span(text, node))


def _check_exact_exponential(argument, text: str, node: ast.AST, where: str) -> None:
    """Refuse exp(c·log(r)) of exact numbers whose value sympy would expand to r**c beyond
    MAX_EXACT_DIGITS digits."""
    import sympy

    growth = 0.0
    for term in sympy.Add.make_args(argument):
        coefficient, rest = term.as_coeff_Mul()
        for logarithm in rest.atoms(sympy.log):
            try:
                growth += abs(float(coefficient)) * exact_digits(logarithm.args[0])
            except OverflowError:
                growth = math.inf
    if growth > MAX_EXACT_DIGITS:
        raise formula_error(where, text, f"this constant needs more than {MAX_EXACT_DIGITS} exact digits",
                            *_span(text, node))
