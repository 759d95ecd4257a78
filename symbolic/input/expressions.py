"""Safe reading of the numbers, expressions and poles written in a design file.

A design file is data.  Its matrix entries are numbers or short expression
strings over declared parameters (``"-c/m"``, ``"sqrt(g/l)"``,
``"exp(-a*T)"``) and its poles are real or complex numbers written as strings
(``"-4+3j"``).  Nothing in such a string may run code, read a file, or keep the
tool busy for long, so this module never hands text to ``eval``, ``exec``,
``sympify`` or ``parse_expr`` (each of them evaluates Python).  Instead the text
is parsed by :func:`ast.parse` into a syntax tree, every node of which is checked
against a short whitelist, and the SymPy object is built directly from the
accepted nodes.

Limits are checked before the corresponding work is done:

* the text has at most 2000 characters, all of them printable ASCII (Python
  folds some non-ASCII letters into ASCII ones, e.g. ``𝑘`` into ``k``, which
  would let a lookalike name pass unnoticed);
* brackets nest at most 50 deep, the syntax tree nests at most 50 deep (a chain
  ``a + b + c`` or ``a*b/c`` counts as one level) and has at most 500
  expression nodes;
* a numeric literal is plain decimal with at most 17 significant digits and a
  magnitude between 1e-15 and 1e15 (or zero); it is converted exactly from its
  decimal text, never through a binary float;
* an exponent is a number, optionally signed, or a ratio of two integers in
  parentheses (``(1/3)``), with magnitude at most 10 and denominator at most 10;
* every numeric constant that SymPy folds while the expression is built
  (a pure number, or the numeric coefficient of a product or a sum) lies
  between 1e-30 and 1e30 in magnitude and has numerator and denominator of at
  most 512 bits; the finished expression is checked throughout the same way;
* a number under a root or fractional power is at most 1e30 (SymPy factors it);
* the degree of the expression is at most 30, where parameters, ``pi`` and
  other irrational values count one, so neither ``x**1000`` nor ``pi**1000``
  can be written with nested powers;
* an upper bound on the number of terms the expression would have if fully
  expanded is at most 300 (several SymPy routines expand internally);
* at most 20 function calls and fractional powers;
* function arguments are guarded (see the comment above ``_GROWTH_FUNCTIONS``
  for the measurements): ``exp``, ``sinh``, ``cosh``, ``tanh``, ``sin``, ``cos``
  and ``tan`` may not be applied to anything containing ``exp``, ``sinh`` or
  ``cosh`` (``exp(exp(1e15))`` needs about 1e15 bits to evaluate, and SymPy
  evaluates numerically inside later operations); ``exp`` may not contain
  ``log`` (SymPy turns ``exp(n*log(k))`` into the integer ``k**n``);
  ``sinh``, ``cosh`` and ``tanh`` may not contain any function call; and the
  arguments of ``sinh``, ``cosh``, ``tanh`` and ``abs`` must be evidently real,
  i.e. contain no root or logarithm of a quantity that may be negative
  (``cosh(T*sqrt(g/l))`` is fine, ``tanh(sqrt(1 - zeta**2))`` is refused
  unless SymPy can tell that ``1 - zeta**2`` is nonnegative).

The expression is built over stand-ins for the parameters that are only known
to be real, functions of anything but a rational number or a rational multiple
of ``pi`` are kept unevaluated, and the caller's symbols are put in at the end
without re-evaluation (see :func:`parse_expression`): SymPy's sign questions on
positive parameters are what made innocent-looking text slow.  Nothing here
calls ``evalf``; the guards keep the numerical evaluation that SymPy does inside
its own assumption queries cheap.  Division by zero and
values outside a function's real domain (``log(0)``, ``sqrt(-1)``,
``(-8)**(1/3)``) are errors, so the result is free of ``nan``, ``zoo``, ``oo``
and the imaginary unit.  Two things are left to the caller, who knows the
parameter values: a root or logarithm of a quantity whose sign SymPy cannot
tell (``sqrt(k/m - c)``) is accepted as written, and a divisor that is zero
without SymPy folding it to ``0`` (``sin(1)**2 + cos(1)**2 - 1``) is not
detected, since deciding either needs numerical evaluation.

Together these keep every SymPy step small: typical entries take 1 to 5 ms,
and the slowest of 18 000 random grammar-shaped expressions took 0.1 s of CPU
time here (after SymPy's one-time lazy imports on the first call).  The limit values
are engineering judgement (common practice, no source), except the 17
significant digits (see :func:`parse_number`).
"""

from __future__ import annotations

import ast
import difflib
import keyword
import math
import numbers
import re
import warnings
from collections.abc import Callable, Mapping
from fractions import Fraction
from types import MappingProxyType
from typing import NamedTuple

import sympy
from sympy.core.sympify import SympifyError
from sympy.polys.polyerrors import BasePolynomialError

from ..runtime.errors import ExpressionError

__all__ = [
    "ALLOWED_CONSTANTS",
    "ALLOWED_FUNCTIONS",
    "NAME_PATTERN",
    "RESERVED_NAMES",
    "check_name",
    "parse_expression",
    "parse_number",
    "parse_pole",
]

# ---------------------------------------------------------------------------
# Limits.  The values are engineering judgement ("common practice, no source")
# except the 17 significant digits: 17 significant decimal digits suffice to
# write any IEEE 754 binary64 number so that it reads back as the same double
# (DBL_DECIMAL_DIG = 17, ISO/IEC 9899:2018, 5.2.4.2.2), and Python's ``repr`` of
# a float and NumPy's printing use up to 17.  A design file may therefore carry
# any double printed by a program; an 18th digit cannot change the double it
# reads as, so a longer literal claims a precision no double carries.
# ---------------------------------------------------------------------------
MAX_TEXT_LENGTH = 2000
MAX_NAME_LENGTH = 64
MAX_DEPTH = 50
MAX_NODES = 500
MAX_SIGNIFICANT_DIGITS = 17
MAX_LITERAL_EXPONENT10 = 15  # literals satisfy 1e-15 <= |x| <= 1e15 (or x == 0)
MAX_EXPONENT = 10
MAX_EXPONENT_DENOMINATOR = 10
MAX_CONSTANT_EXPONENT10 = 30  # folded constants satisfy 1e-30 <= |c| <= 1e30
MAX_CONSTANT_BITS = 512
MAX_DEGREE = 30
MAX_IRRATIONAL_STEPS = 20  # function calls plus fractional powers
MAX_EXPANDED_TERMS = 300
_QUOTE_LIMIT = 40

NAME_PATTERN: re.Pattern[str] = re.compile(r"\A[A-Za-z][A-Za-z0-9_]*\Z")
"""A parameter name: an ASCII letter, then ASCII letters, digits or ``_``.

Anchored with ``\\A`` and ``\\Z`` (not ``^``/``$``, which would accept a trailing
newline), so ``NAME_PATTERN.match(name)`` is a full match.
"""

ALLOWED_FUNCTIONS: Mapping[str, Callable[[sympy.Expr], sympy.Expr]] = MappingProxyType(
    {
        "sqrt": sympy.sqrt,
        "exp": sympy.exp,
        "log": sympy.log,  # natural logarithm
        "sin": sympy.sin,
        "cos": sympy.cos,
        "tan": sympy.tan,
        "atan": sympy.atan,
        "sinh": sympy.sinh,
        "cosh": sympy.cosh,
        "tanh": sympy.tanh,
        "abs": sympy.Abs,
    }
)
"""The functions an expression may call, each with exactly one argument.

``log`` is the natural logarithm; angles are in radians.
"""

ALLOWED_CONSTANTS: Mapping[str, sympy.Expr] = MappingProxyType({"pi": sympy.pi})
"""The named constants an expression may use: only ``pi``.

Euler's number is written ``exp(1)``; a bare ``e`` is too easily read as a
parameter (or, in the memo, a parameter as Euler's number), so it is neither a
constant nor a permitted parameter name.
"""

_RESERVED_REASONS: dict[str, str] = {
    "s": "it is the Laplace variable",
    "z": "it is the z-transform variable",
    "I": "it is the imaginary unit in SymPy",
    "E": "it is Euler's number in SymPy",
    "e": "it would read as Euler's number, which is written exp(1)",
    "oo": "it is infinity in SymPy",
    "zoo": "it is complex infinity in SymPy",
    "nan": "it means not-a-number",
    "inf": "it means infinity",
}

RESERVED_NAMES: frozenset[str] = frozenset(
    set(ALLOWED_FUNCTIONS) | set(ALLOWED_CONSTANTS) | set(keyword.kwlist) | set(_RESERVED_REASONS)
)
"""Names that :func:`check_name` refuses as parameter names."""

# A plain decimal literal: digits with an optional fraction and exponent.  The
# character classes are spelled out because ``\d`` also matches non-ASCII digits.
_DECIMAL = re.compile(r"([0-9]*)(?:\.([0-9]*))?(?:[eE]([+-]?[0-9]+))?")
_SIGNED_DECIMAL = re.compile(r"([+-]?)(.*)", re.DOTALL)
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")

_ADDITIVE = (ast.Add, ast.Sub)
_MULTIPLICATIVE = (ast.Mult, ast.Div)

_OPERATOR_SYMBOLS: dict[type, str] = {
    ast.FloorDiv: "//",
    ast.Mod: "%",
    ast.MatMult: "@",
    ast.LShift: "<<",
    ast.RShift: ">>",
    ast.BitOr: "|",
    ast.BitXor: "^",
    ast.BitAnd: "&",
}

_FORBIDDEN_NODES: dict[type, str] = {
    ast.Attribute: "attribute access is not allowed",
    ast.Subscript: "subscripts (indexing) are not allowed",
    ast.Slice: "slices are not allowed",
    ast.Lambda: "lambda expressions are not allowed",
    ast.ListComp: "comprehensions are not allowed",
    ast.SetComp: "comprehensions are not allowed",
    ast.DictComp: "comprehensions are not allowed",
    ast.GeneratorExp: "generator expressions are not allowed",
    ast.JoinedStr: "f-strings are not allowed",
    ast.FormattedValue: "f-strings are not allowed",
    ast.NamedExpr: "assignment expressions (:=) are not allowed",
    ast.Starred: "starred expressions are not allowed",
    ast.Compare: "comparisons are not allowed",
    ast.BoolOp: "boolean operators (and, or) are not allowed",
    ast.IfExp: "conditional expressions (if ... else) are not allowed",
    ast.Tuple: "tuples are not allowed (is there a stray comma?)",
    ast.List: "lists are not allowed",
    ast.Dict: "dictionaries are not allowed",
    ast.Set: "sets are not allowed",
    ast.Await: "'await' is not allowed",
    ast.Yield: "'yield' is not allowed",
    ast.YieldFrom: "'yield' is not allowed",
}

# Errors that SymPy or Python may raise while a (bounded) expression is built;
# they are turned into ExpressionError so that nothing else escapes.
_WRAPPED_ERRORS = (
    ArithmeticError,
    MemoryError,
    RecursionError,
    NotImplementedError,
    OverflowError,
    SyntaxError,
    TypeError,
    ValueError,
    SympifyError,
    BasePolynomialError,
)

_UNDEFINED = (sympy.nan, sympy.zoo, sympy.oo, -sympy.oo)


class _SymbolsMappingError(TypeError):
    """The caller's ``symbols`` mapping holds a non-Symbol (a programming error)."""


# ---------------------------------------------------------------------------
# Small helpers
# ---------------------------------------------------------------------------
def _quote(text: str, limit: int = _QUOTE_LIMIT) -> str:
    """Quote at most ``limit`` characters of ``text`` for an error message."""
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    escaped = text.encode("unicode_escape", errors="backslashreplace").decode("ascii")
    return "'" + escaped + "'"


def _type_name(value: object) -> str:
    return type(value).__name__


def _check_text(text: str, what: str) -> str:
    """Apply the cheap character-level limits; return the text without outer spaces."""
    if len(text) > MAX_TEXT_LENGTH:
        raise ExpressionError(
            f"{what} is too long ({len(text)} characters; at most {MAX_TEXT_LENGTH})"
        )
    if not text.isascii():
        position, char = next((i, c) for i, c in enumerate(text) if ord(c) > 127)
        raise ExpressionError(
            f"non-ASCII character U+{ord(char):04X} at position {position} of {what}; "
            "write names and numbers in plain ASCII"
        )
    control = _CONTROL.search(text)
    if control is not None:
        raise ExpressionError(
            f"control character U+{ord(control.group()):04X} at position {control.start()} "
            f"of {what}"
        )
    stripped = text.strip(" ")
    if not stripped:
        raise ExpressionError(f"{what} is empty")
    depth = 0
    for char in stripped:
        if char in "([{":
            depth += 1
            if depth > MAX_DEPTH:
                raise ExpressionError(
                    f"{what} nests brackets more than {MAX_DEPTH} deep: {_quote(stripped)}"
                )
        elif char in ")]}":
            depth -= 1
    return stripped


def _parse_tree(text: str, what: str) -> ast.expr:
    """Parse checked text with :func:`ast.parse` in ``eval`` mode; return the body."""
    try:
        with warnings.catch_warnings():
            # e.g. "1(2)" warns "'int' object is not callable"; such text is rejected anyway.
            warnings.simplefilter("ignore")
            tree = ast.parse(text, mode="eval")
    except SyntaxError as error:
        detail = error.msg or "invalid syntax"
        column = f" at column {error.offset}" if error.offset else ""
        raise ExpressionError(
            f"{what} is not valid syntax ({detail}{column}): {_quote(text)}"
        ) from error
    except (RecursionError, MemoryError, ValueError, OverflowError) as error:
        raise ExpressionError(f"{what} is too complex to parse: {_quote(text)}") from error
    return tree.body


def _check_tree_size(body: ast.expr, text: str, what: str) -> None:
    """Count expression nodes and nesting depth without recursion.

    A left-leaning chain of additive (``+ -``) or multiplicative (``* /``)
    operators is one nesting level, so ``a + b + ... + z`` stays shallow.
    """
    stack: list[tuple[ast.AST, int]] = [(body, 1)]
    nodes = 0
    while stack:
        node, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise ExpressionError(f"{what} nests more than {MAX_DEPTH} deep: {_quote(text)}")
        if isinstance(node, ast.expr):
            nodes += 1
            if nodes > MAX_NODES:
                raise ExpressionError(
                    f"{what} has more than {MAX_NODES} terms and operations: {_quote(text)}"
                )
        for child in ast.iter_child_nodes(node):
            chained = (
                isinstance(node, ast.BinOp)
                and isinstance(child, ast.BinOp)
                and child is node.left
                and _operator_group(node.op) is not None
                and _operator_group(node.op) == _operator_group(child.op)
            )
            stack.append((child, depth if chained else depth + 1))


def _operator_group(op: ast.operator) -> str | None:
    if isinstance(op, _ADDITIVE):
        return "additive"
    if isinstance(op, _MULTIPLICATIVE):
        return "multiplicative"
    return None


def _literal_value(literal: str, shown: str | None = None) -> sympy.Rational:
    """Convert an unsigned plain-decimal literal exactly to a SymPy Rational.

    Checks significant digits and magnitude before building any number, so a
    literal such as ``1e999999999`` costs nothing.
    """
    shown = literal if shown is None else shown
    match = _DECIMAL.fullmatch(literal)
    if match is None or not (match.group(1) or match.group(2)):
        raise ExpressionError(
            f"number {_quote(shown)} must be written in plain decimal, e.g. 12, 0.5 or 1e-3"
        )
    whole, fraction, exponent_text = match.group(1), match.group(2) or "", match.group(3)
    digits = (whole + fraction).lstrip("0")
    exponent = (int(exponent_text) if exponent_text else 0) - len(fraction)
    if not digits:
        return sympy.Integer(0)
    significant = digits.rstrip("0")
    exponent += len(digits) - len(significant)
    if len(significant) > MAX_SIGNIFICANT_DIGITS:
        raise ExpressionError(
            f"number {_quote(shown)} has {len(significant)} significant digits; at most "
            f"{MAX_SIGNIFICANT_DIGITS} (enough for any double-precision number to read back"
            " unchanged)"
        )
    leading = exponent + len(significant) - 1  # power of ten of the leading digit
    too_large = f"number {_quote(shown)} is too large (magnitude above 1e{MAX_LITERAL_EXPONENT10})"
    too_small = (
        f"number {_quote(shown)} is too small (nonzero magnitude below 1e-{MAX_LITERAL_EXPONENT10})"
    )
    if leading > MAX_LITERAL_EXPONENT10:
        raise ExpressionError(too_large)
    if leading < -MAX_LITERAL_EXPONENT10:
        raise ExpressionError(too_small)
    value = sympy.Integer(int(significant)) * sympy.Integer(10) ** exponent
    if abs(value) > sympy.Integer(10) ** MAX_LITERAL_EXPONENT10:
        raise ExpressionError(too_large)
    return value


def _signed_literal_value(text: str, shown: str) -> sympy.Rational:
    sign, unsigned = _SIGNED_DECIMAL.fullmatch(text).groups()  # always matches
    value = _literal_value(unsigned, shown)
    return -value if sign == "-" else value


def _rational_too_big(value: sympy.Rational) -> str | None:
    """Say why a folded rational breaks the constant limits, or return None."""
    numerator, denominator = abs(int(value.p)), int(value.q)
    if max(numerator.bit_length(), denominator.bit_length()) > MAX_CONSTANT_BITS:
        return "has too many digits"
    limit = 10**MAX_CONSTANT_EXPONENT10
    if numerator > limit * denominator:
        return f"exceeds 1e{MAX_CONSTANT_EXPONENT10} in magnitude"
    if numerator and numerator * limit < denominator:
        return f"is nonzero and below 1e-{MAX_CONSTANT_EXPONENT10} in magnitude"
    return None


def _check_constant(value: sympy.Expr, text: str) -> None:
    """Bound the numeric constant SymPy folded at the top of ``value``.

    Only the top level is inspected (a pure number, or the numeric coefficient
    of a product or the numeric term of a sum), which keeps each step cheap;
    :func:`_check_all_constants` inspects the finished expression throughout.
    """
    if value.is_Rational:
        constant = value
    elif value.is_Mul:
        constant = value.as_coeff_Mul()[0]
    elif value.is_Add:
        constant = value.as_coeff_Add()[0]
    else:
        return
    if constant.is_Rational:
        problem = _rational_too_big(constant)
        if problem:
            raise ExpressionError(f"a constant in the expression {problem}: {_quote(text)}")


def _is_not_real(value: sympy.Expr) -> bool:
    """True if ``value`` holds the imaginary unit or a negative number to a
    fractional power (SymPy keeps ``(-8)**(1/3)`` as ``2*(-1)**(1/3)``, the
    complex principal root)."""
    if value.has(sympy.I):
        return True
    return any(
        power.base.is_Number and power.base.is_negative and not power.exp.is_Integer
        for power in value.atoms(sympy.Pow)
    )


def _check_all_constants(value: sympy.Expr, text: str) -> None:
    for constant in value.atoms(sympy.Rational):
        problem = _rational_too_big(constant)
        if problem:
            raise ExpressionError(f"a constant in the expression {problem}: {_quote(text)}")


# Guards on function arguments, each measured here with SymPy 1.14 while
# functions were still evaluated on construction.  Functions of non-numeric
# arguments are now kept unevaluated, but a later step that asks SymPy about
# such a value (is it real, finite, zero?) would pay the same price, so the
# guards stay:
# * exp, sinh and cosh grow so fast that exp(exp(1e15)) or sin(exp(1e15)) needs
#   about 1e15 bits to evaluate, and SymPy evaluates numerically inside many
#   later operations (abs, sqrt, a division or a product of such a value each
#   ran past 5 s), so they may not appear inside exp, sinh, cosh, tanh, sin, cos
#   or tan;
# * sinh, cosh, tanh and abs ask for the real and imaginary parts of their
#   argument, which expands it: tanh(tanh(tanh((m+c+g+q)**10))) took 1.3 s and
#   abs(tanh(sqrt(q)*(...)**10)) ran past 20 s.  Their argument must contain no
#   function call (sinh, cosh, tanh) and be known to be real (all four);
# * exp rewrites exp(n*log(k)) as k**n and computes it: exp(1e15*log(2)) would
#   build a number of 1e15 bits, so exp may not contain log.
_GROWTH_FUNCTIONS = (sympy.exp, sympy.sinh, sympy.cosh)
_NO_GROWTH_INSIDE = frozenset({"exp", "sinh", "cosh", "tanh", "sin", "cos", "tan"})
_NO_CALL_INSIDE = frozenset({"sinh", "cosh", "tanh"})
_REAL_ARGUMENT = frozenset({"sinh", "cosh", "tanh", "abs"})


# Functions that are real wherever they are finite when their argument is real.
_REAL_FOR_REAL_ARGUMENT = (
    sympy.exp,
    sympy.sin,
    sympy.cos,
    sympy.tan,
    sympy.atan,
    sympy.sinh,
    sympy.cosh,
    sympy.tanh,
    sympy.Abs,
)


def _is_plain_number(value: sympy.Expr) -> bool:
    """A rational number or a rational multiple of pi."""
    coefficient, rest = value.as_coeff_Mul()
    return bool(coefficient.is_Rational and (rest is sympy.S.One or rest is sympy.pi))


def _is_literal_zero(value: sympy.Expr) -> bool:
    return bool(value.is_Number and value.is_zero)


class _Facts:
    """Structural sign and realness of an expression over proxies.

    SymPy's own answers (``is_positive``, ``is_real``) may cost seconds (a sign
    query on a univariate polynomial in a positive symbol isolates real roots);
    these rules only look at the tree and at the assumptions of the caller's
    symbols, and say "unknown" whenever a rule does not apply.
    """

    def __init__(self) -> None:
        self.symbol_of: dict[sympy.Symbol, sympy.Symbol] = {}  # proxy -> caller's symbol

    def sign(self, value: sympy.Expr) -> int | None:
        """1 if evidently positive, -1 if evidently negative, else None."""
        if value.is_Rational:
            return 1 if value.p > 0 else -1 if value.p < 0 else None
        if value is sympy.pi or value is sympy.E:
            return 1
        if value.is_Symbol:
            symbol = self.symbol_of.get(value, value)
            return 1 if symbol.is_positive else -1 if symbol.is_negative else None
        if value.is_Mul:
            product = 1
            for factor in value.args:
                factor_sign = self.sign(factor)
                if factor_sign is None:
                    return None
                product *= factor_sign
            return product
        if value.is_Add:
            signs = {self.sign(term) for term in value.args}
            return signs.pop() if len(signs) == 1 and None not in signs else None
        if value.is_Pow:
            base, exponent = value.args
            base_sign = self.sign(base)
            if base_sign == 1 and self.real(exponent):
                return 1
            if base_sign == -1 and exponent.is_Integer:
                return -1 if int(exponent) % 2 else 1
            return None
        if isinstance(value, sympy.exp | sympy.cosh) and self.real(value.args[0]):
            return 1
        if isinstance(value, sympy.sinh | sympy.tanh | sympy.atan) and self.real(value.args[0]):
            return self.sign(value.args[0])
        if isinstance(value, sympy.Abs) and self.sign(value.args[0]) is not None:
            return 1
        return None

    def nonnegative(self, value: sympy.Expr) -> bool:
        """True if the value is evidently real and at least zero."""
        if value.is_Rational:
            return value.p >= 0
        if self.sign(value) == 1 or isinstance(value, sympy.Abs):
            return self.real(value)
        if value.is_Pow:
            base, exponent = value.args
            if exponent.is_Integer and int(exponent) > 0 and int(exponent) % 2 == 0:
                return self.real(base)
            if exponent.is_Rational and exponent.p > 0 and not exponent.is_Integer:
                return self.nonnegative(base)
            return False
        if value.is_Mul or value.is_Add:
            return all(self.nonnegative(arg) for arg in value.args)
        return False

    def real(self, value: sympy.Expr) -> bool:
        """True if the value is evidently real (where it is finite)."""
        if value.is_Rational or value is sympy.pi or value is sympy.E:
            return True
        if value.is_Symbol:
            return bool(self.symbol_of.get(value, value).is_real)
        if value.is_Add or value.is_Mul:
            return all(self.real(arg) for arg in value.args)
        if value.is_Pow:
            base, exponent = value.args
            if not (exponent.is_Rational and self.real(base)):
                return False
            return bool(exponent.is_Integer) or self.nonnegative(base)
        if isinstance(value, sympy.log):
            return self.sign(value.args[0]) == 1
        if isinstance(value, _REAL_FOR_REAL_ARGUMENT):
            return self.real(value.args[0])
        return False


class _Built(NamedTuple):
    """An expression under construction with two cheap size measures.

    ``degree`` bounds the growth of the value: rational numbers count 0; names,
    ``pi`` and any other irrational value 1; sums take the maximum, products and
    quotients the sum, powers multiply by the exponent's magnitude.  Irrational
    constants count so that ``pi**1000`` (whose value would need thousands of
    digits) is refused like ``x**1000``.

    ``terms`` bounds the number of terms the expression would have if SymPy
    expanded it (which several of its routines do internally): sums add,
    products and quotients multiply, an integer power ``n`` of ``t`` terms gives
    ``C(t+n-1, n)``, and a function call or fractional power is one term.
    """

    expr: sympy.Expr
    degree: int
    terms: int


class _Builder:
    """Build a SymPy expression from a size-checked syntax tree."""

    def __init__(self, text: str, symbols: Mapping[str, sympy.Symbol]):
        self.text = text
        self.symbols = symbols
        self.irrational_steps = 0
        self.proxy_of: dict[sympy.Symbol, sympy.Symbol] = {}  # caller's symbol -> proxy
        self.facts = _Facts()

    def proxy(self, symbol: sympy.Symbol) -> sympy.Symbol:
        """A stand-in for ``symbol`` known only to be real (see ``parse_expression``)."""
        proxy = self.proxy_of.get(symbol)
        if proxy is None:
            proxy = (
                sympy.Symbol(symbol.name, real=True)
                if symbol.is_real
                else sympy.Symbol(symbol.name)
            )
            if proxy in self.facts.symbol_of and self.facts.symbol_of[proxy] != symbol:
                # Two declared symbols share a name.
                proxy = sympy.Dummy(symbol.name, real=bool(symbol.is_real))
            self.proxy_of[symbol] = proxy
            self.facts.symbol_of[proxy] = symbol
        return proxy

    def substitute_symbols(self, expr: sympy.Expr) -> sympy.Expr:
        """Put the caller's symbols in place of the proxies without re-evaluating."""
        mapping = {proxy: symbol for symbol, proxy in self.proxy_of.items() if proxy != symbol}
        if not mapping:
            return expr
        with sympy.evaluate(False):
            return expr.xreplace(mapping)

    def segment(self, node: ast.AST) -> str:
        # The text is one line of ASCII, so column offsets are character offsets.
        return self.text[node.col_offset : node.end_col_offset]

    def build(self, node: ast.AST) -> _Built:
        if isinstance(node, ast.Constant):
            return _Built(self._constant(node), 0, 1)
        if isinstance(node, ast.Name):
            return self._name(node)
        if isinstance(node, ast.UnaryOp):
            return self._unary(node)
        if isinstance(node, ast.BinOp):
            if isinstance(node.op, ast.Pow):
                return self._power(node)
            if _operator_group(node.op) is not None:
                return self._chain(node)
            symbol = _OPERATOR_SYMBOLS.get(type(node.op), type(node.op).__name__)
            hint = " (use ** for powers)" if isinstance(node.op, ast.BitXor) else ""
            raise ExpressionError(f"operator '{symbol}' is not allowed{hint}")
        if isinstance(node, ast.Call):
            return self._call(node)
        message = _FORBIDDEN_NODES.get(type(node))
        if message is None:
            message = f"the construct {type(node).__name__} is not allowed"
        raise ExpressionError(f"{message}: {_quote(self.segment(node))}")

    def check_size(self, degree: int, terms: int) -> None:
        """Refuse a step whose measures are over the limits, before SymPy runs it."""
        if degree > MAX_DEGREE:
            raise ExpressionError(
                f"the expression's degree exceeds {MAX_DEGREE} (powers too high): "
                f"{_quote(self.text)}"
            )
        if terms > MAX_EXPANDED_TERMS:
            raise ExpressionError(
                f"the expression would expand to more than {MAX_EXPANDED_TERMS} terms: "
                f"{_quote(self.text)}"
            )

    def finish(self, result: sympy.Expr, degree: int, terms: int) -> _Built:
        """Check the limits after one operation and record the measures."""
        if result.is_Rational:
            degree, terms = 0, 1
        _check_constant(result, self.text)
        self.check_size(degree, terms)
        return _Built(result, degree, terms)

    def count_irrational_step(self, node: ast.AST) -> None:
        self.irrational_steps += 1
        if self.irrational_steps > MAX_IRRATIONAL_STEPS:
            raise ExpressionError(
                f"more than {MAX_IRRATIONAL_STEPS} function calls and fractional powers: "
                f"{_quote(self.segment(node))}"
            )

    # -- leaves ---------------------------------------------------------------
    def _constant(self, node: ast.Constant) -> sympy.Expr:
        value = node.value
        if isinstance(value, bool) or value is None or value is Ellipsis:
            raise ExpressionError(f"the constant {value!r} is not allowed")
        if isinstance(value, str):
            raise ExpressionError(f"strings are not allowed: {_quote(self.segment(node))}")
        if isinstance(value, bytes):
            raise ExpressionError(f"bytes are not allowed: {_quote(self.segment(node))}")
        if isinstance(value, complex):
            raise ExpressionError(
                f"imaginary numbers are not allowed in an expression: {_quote(self.segment(node))}"
            )
        if isinstance(value, int | float):
            return _literal_value(self.segment(node))
        raise ExpressionError(f"the constant {_quote(self.segment(node))} is not allowed")

    def _name(self, node: ast.Name) -> _Built:
        name = node.id
        if name in ALLOWED_CONSTANTS:
            return _Built(ALLOWED_CONSTANTS[name], 1, 1)
        if name in ALLOWED_FUNCTIONS:
            raise ExpressionError(f"'{name}' is a function; call it as {name}(...)")
        if name in _RESERVED_REASONS:
            raise ExpressionError(
                f"the name '{name}' is reserved and cannot appear in an expression: "
                f"{_RESERVED_REASONS[name]}"
            )
        symbol = self.symbols.get(name)
        if symbol is None:
            raise ExpressionError(self._undeclared(name))
        if not isinstance(symbol, sympy.Symbol):
            raise _SymbolsMappingError(
                f"symbols[{name!r}] must be a sympy.Symbol, got {_type_name(symbol)}"
            )
        return _Built(self.proxy(symbol), 1, 1)

    def _undeclared(self, name: str) -> str:
        message = f"undeclared name {_quote(name)}"
        declared = sorted(key for key in self.symbols if isinstance(key, str))
        close = difflib.get_close_matches(name, declared, n=3, cutoff=0.6)
        if close:
            return f"{message}; did you mean {', '.join(close)}?"
        if not declared:
            return f"{message}; no parameters are declared"
        shown = ", ".join(declared[:10]) + (", ..." if len(declared) > 10 else "")
        return f"{message}; declared parameters: {_quote(shown, 100)[1:-1]}"

    # -- operators ------------------------------------------------------------
    def _unary(self, node: ast.UnaryOp) -> _Built:
        if isinstance(node.op, ast.Not):
            raise ExpressionError("boolean operators (not) are not allowed")
        if isinstance(node.op, ast.Invert):
            raise ExpressionError("operator '~' is not allowed")
        operand = self.build(node.operand)
        if isinstance(node.op, ast.USub):
            return self.finish(-operand.expr, operand.degree, operand.terms)
        return operand

    def _chain(self, node: ast.BinOp) -> _Built:
        """Fold a left-leaning chain ``a op b op c ...`` of one operator group."""
        group = _operator_group(node.op)
        tail: list[tuple[ast.operator, ast.expr]] = []
        current: ast.expr = node
        while isinstance(current, ast.BinOp) and _operator_group(current.op) == group:
            tail.append((current.op, current.right))
            current = current.left
        left = self.build(current)
        for op, right_node in reversed(tail):
            right = self.build(right_node)
            if isinstance(op, ast.Add | ast.Sub):
                degree = max(left.degree, right.degree)
                terms = left.terms + right.terms
            else:
                degree = left.degree + right.degree
                terms = left.terms * right.terms
            self.check_size(degree, terms)
            if isinstance(op, ast.Add):
                result = left.expr + right.expr
            elif isinstance(op, ast.Sub):
                result = left.expr - right.expr
            elif isinstance(op, ast.Mult):
                if _is_literal_zero(left.expr) or _is_literal_zero(right.expr):
                    # 0*f is 0 here; SymPy would ask whether f is finite, which for
                    # tanh(...) expands its argument.
                    result = sympy.Integer(0)
                else:
                    result = left.expr * right.expr
            else:
                # Only an explicit number is tested for zero: asking SymPy whether a
                # numeric expression is zero may evaluate it numerically.
                if _is_literal_zero(right.expr):
                    raise ExpressionError(f"division by zero: {_quote(self.segment(right_node))}")
                result = left.expr / right.expr
            left = self.finish(result, degree, terms)
        return left

    def _power(self, node: ast.BinOp) -> _Built:
        exponent = self._exponent(node.right)
        base = self.build(node.left)
        if _is_literal_zero(base.expr) and exponent.is_negative:
            raise ExpressionError(
                f"division by zero (zero to a negative power): {_quote(self.segment(node))}"
            )
        magnitude = Fraction(abs(int(exponent.p)), int(exponent.q))
        degree = math.ceil(base.degree * magnitude)
        if exponent.is_Integer:
            power = abs(int(exponent))
            terms = math.comb(base.terms + power - 1, power) if power else 1
        else:
            terms = 1
        self.check_size(degree, terms)  # before SymPy computes anything
        if exponent.is_Integer:
            if base.expr.is_Rational:
                # Bound the folded power before computing it.
                bits = max(abs(int(base.expr.p)).bit_length(), int(base.expr.q).bit_length())
                if bits * abs(int(exponent)) > 2 * MAX_CONSTANT_BITS:
                    raise ExpressionError(
                        f"a constant in the expression has too many digits: {_quote(self.text)}"
                    )
        else:
            self.count_irrational_step(node)
            self._check_root_base(base.expr, node)
            if self.facts.sign(base.expr) == -1:
                raise ExpressionError(
                    f"{_quote(self.segment(node))} is not real (a negative quantity to a "
                    "fractional power)"
                )
        result = base.expr**exponent
        if result.has(*_UNDEFINED):
            raise ExpressionError(f"{_quote(self.segment(node))} is undefined")
        if not exponent.is_Integer and _is_not_real(result):
            raise ExpressionError(
                f"{_quote(self.segment(node))} is not real (a negative number to a "
                "fractional power)"
            )
        return self.finish(result, degree, terms)

    def _check_root_base(self, base: sympy.Expr, node: ast.AST) -> None:
        """Bound the numbers under a root: SymPy factors them (measured: a 500-bit
        rational to the power 51/10 took 1.3 s; 100-bit numbers stay under 20 ms)."""
        limit = 10**MAX_CONSTANT_EXPONENT10
        for constant in base.atoms(sympy.Rational):
            if abs(int(constant.p)) > limit or int(constant.q) > limit:
                raise ExpressionError(
                    f"a number under a root or fractional power exceeds "
                    f"1e{MAX_CONSTANT_EXPONENT10}: {_quote(self.segment(node))}"
                )

    def _exponent(self, node: ast.expr) -> sympy.Rational:
        """Read an exponent: a signed number or a signed ratio of two integers."""
        shown = _quote(self.segment(node))
        negative, inner = self._strip_signs(node)
        if isinstance(inner, ast.Constant) and _is_real_number(inner.value):
            value = _literal_value(self.segment(inner))
        elif isinstance(inner, ast.BinOp) and isinstance(inner.op, ast.Div):
            numerator = self._integer_literal(inner.left)
            denominator = self._integer_literal(inner.right)
            if numerator is None or denominator is None:
                raise ExpressionError(
                    f"an exponent ratio must be of two integers, e.g. (1/3); got {shown}"
                )
            if denominator == 0:
                raise ExpressionError(f"division by zero in the exponent {shown}")
            value = numerator / denominator
        else:
            raise ExpressionError(
                f"an exponent must be a number such as 2, -1, 0.5 or (1/3); got {shown}"
            )
        value = -value if negative else value
        if abs(value) > MAX_EXPONENT:
            raise ExpressionError(f"the exponent {shown} is too large (at most {MAX_EXPONENT})")
        if value.q > MAX_EXPONENT_DENOMINATOR:
            raise ExpressionError(
                f"the exponent {shown} must be an integer or a fraction with denominator at "
                f"most {MAX_EXPONENT_DENOMINATOR}"
            )
        return value

    @staticmethod
    def _strip_signs(node: ast.expr) -> tuple[bool, ast.expr]:
        negative = False
        while isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub | ast.UAdd):
            negative ^= isinstance(node.op, ast.USub)
            node = node.operand
        return negative, node

    def _integer_literal(self, node: ast.expr) -> sympy.Integer | None:
        negative, inner = self._strip_signs(node)
        if not (
            isinstance(inner, ast.Constant)
            and isinstance(inner.value, int)
            and not isinstance(inner.value, bool)
        ):
            return None
        value = _literal_value(self.segment(inner))
        return -value if negative else value

    def _call(self, node: ast.Call) -> _Built:
        func = node.func
        if isinstance(func, ast.Attribute):
            raise ExpressionError(f"attribute access is not allowed: {_quote(self.segment(func))}")
        if not isinstance(func, ast.Name):
            raise ExpressionError(
                f"only the named functions {', '.join(ALLOWED_FUNCTIONS)} may be called: "
                f"{_quote(self.segment(node))}"
            )
        function = ALLOWED_FUNCTIONS.get(func.id)
        if function is None:
            raise ExpressionError(
                f"function {_quote(func.id)} is not allowed; allowed: "
                f"{', '.join(ALLOWED_FUNCTIONS)}"
            )
        if node.keywords:
            raise ExpressionError(
                f"keyword arguments are not allowed: {_quote(self.segment(node))}"
            )
        if any(isinstance(argument, ast.Starred) for argument in node.args):
            raise ExpressionError(
                f"starred arguments are not allowed: {_quote(self.segment(node))}"
            )
        if len(node.args) != 1:
            raise ExpressionError(
                f"function '{func.id}' takes exactly one argument, got {len(node.args)}"
            )
        self.count_irrational_step(node)
        argument = self.build(node.args[0])
        self._check_argument(func.id, argument.expr, node)
        if func.id == "sqrt" or _is_plain_number(argument.expr):
            # A root is a power (kept consistent with **(1/2)); a function of a
            # rational number or a rational multiple of pi is evaluated, so
            # sin(pi/6) is 1/2 and log(0) and tan(pi/2) are caught.
            result = function(argument.expr)
        else:
            # SymPy's automatic evaluation of a function asks questions about its
            # argument (sign, realness, finiteness) whose answers may cost seconds
            # for a polynomial argument (measured: abs of a degree-8 polynomial,
            # 0.2-0.5 s) and tenths of a second for a sum of roots; the function
            # is kept as written.
            result = function(argument.expr, evaluate=False)
        if result.has(*_UNDEFINED):
            raise ExpressionError(
                f"{_quote(self.segment(node))} is undefined (outside the function's domain)"
            )
        if _is_not_real(result):
            raise ExpressionError(
                f"{_quote(self.segment(node))} is not real (outside the function's real domain)"
            )
        return self.finish(result, max(1, argument.degree), 1)

    def _check_argument(self, name: str, argument: sympy.Expr, node: ast.Call) -> None:
        """Apply the argument guards listed above ``_GROWTH_FUNCTIONS``."""
        shown = _quote(self.segment(node))
        if name in _NO_GROWTH_INSIDE and argument.has(*_GROWTH_FUNCTIONS):
            raise ExpressionError(
                f"'{name}' may not be applied to an argument that contains exp, sinh or "
                f"cosh: {shown}"
            )
        if name == "exp" and argument.has(sympy.log):
            raise ExpressionError(
                f"'exp' may not be applied to an argument that contains log: {shown}"
            )
        if name in _NO_CALL_INSIDE and argument.atoms(sympy.Function):
            raise ExpressionError(
                f"'{name}' may not be applied to an argument that contains a function call: {shown}"
            )
        if name in _REAL_ARGUMENT and not self.facts.real(argument):
            raise ExpressionError(
                f"the argument of '{name}' must be evidently real (no root or logarithm of a "
                f"quantity that may be negative): {shown}"
            )
        if name == "sqrt":
            self._check_root_base(argument, node)
        if name in ("sqrt", "log") and self.facts.sign(argument) == -1:
            raise ExpressionError(f"{shown} is not real (the argument is negative)")


def _is_real_number(value: object) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


# ---------------------------------------------------------------------------
# Public functions
# ---------------------------------------------------------------------------
def check_name(name: str) -> None:
    """Check that ``name`` may be used as a parameter name.

    Parameters
    ----------
    name : str
        The proposed name, e.g. ``"m_c"``.

    Raises
    ------
    ExpressionError
        If ``name`` is not a string, is longer than 64 characters, does not
        match :data:`NAME_PATTERN` (an ASCII letter, then ASCII letters, digits
        or underscores), contains a double underscore, or is reserved: an
        allowed function or constant, a Python keyword, ``s`` and ``z`` (the
        transform variables), ``I``, ``E``, ``e``, ``oo``, ``zoo``, ``nan``,
        ``inf``.

    Notes
    -----
    Names reach the memo through ``sympy.latex``, which prints a symbol name
    as written except that ``_`` starts a subscript and ``__`` a superscript
    (``k__2`` would print as :math:`k^{2}`, a power); hence plain identifiers
    and no double underscore.  Non-ASCII is refused because Python folds
    identifiers to NFKC, so ``𝑘`` and ``k`` would be the same name [1]_.

    References
    ----------
    .. [1] Python Software Foundation, *The Python Language Reference*,
       release 3.11, section 2.3 "Identifiers and keywords" (NFKC
       normalisation of identifiers); M. von Löwis, PEP 3131 "Supporting
       Non-ASCII Identifiers", 2007.

    Examples
    --------
    >>> check_name("m_c")
    >>> check_name("lambda")
    Traceback (most recent call last):
    ...
    symbolic.runtime.errors.ExpressionError: the name 'lambda' is reserved: it is a Python keyword
    """
    if not isinstance(name, str):
        raise ExpressionError(f"a name must be a string, got {_type_name(name)}")
    if len(name) > MAX_NAME_LENGTH:
        raise ExpressionError(
            f"the name {_quote(name)} is too long ({len(name)} characters; "
            f"at most {MAX_NAME_LENGTH})"
        )
    if NAME_PATTERN.match(name) is None:
        raise ExpressionError(
            f"the name {_quote(name)} is not a plain identifier (an ASCII letter, then ASCII "
            "letters, digits or underscores)"
        )
    if "__" in name:
        raise ExpressionError(
            f"the name {_quote(name)} contains a double underscore (it would print as a "
            "superscript)"
        )
    if name in RESERVED_NAMES:
        if name in ALLOWED_FUNCTIONS:
            reason = "it is a function"
        elif name in ALLOWED_CONSTANTS:
            reason = "it is a constant"
        elif name in _RESERVED_REASONS:
            reason = _RESERVED_REASONS[name]
        else:
            reason = "it is a Python keyword"
        raise ExpressionError(f"the name '{name}' is reserved: {reason}")


def parse_number(value: object) -> sympy.Expr:
    """Convert a design-file number to an exact SymPy number.

    Parameters
    ----------
    value : int, float or str
        A TOML integer or float, or a string holding a plain decimal number
        with an optional sign (``"-2.5"``, ``"1e-3"``).

    Returns
    -------
    sympy.Integer or sympy.Rational
        The exact value.  A float is converted from its shortest decimal
        representation (``repr``), so ``0.1`` gives ``1/10`` rather than the
        binary value ``3602879701896397/36028797018963968`` [1]_.

    Raises
    ------
    ExpressionError
        For a bool, nan or infinity, a magnitude above 1e15 or nonzero below
        1e-15, more than 17 significant digits [2]_, a string that is not a
        plain decimal number, or any other type.

    References
    ----------
    .. [1] D. Goldberg, "What Every Computer Scientist Should Know About
       Floating-Point Arithmetic", *ACM Computing Surveys* 23(1), 1991,
       section 1.1 (0.1 has no exact binary representation).
    .. [2] ISO/IEC 9899:2018 (C17), 5.2.4.2.2: ``DBL_DECIMAL_DIG`` = 17 for
       IEEE 754 binary64, the significant decimal digits that suffice to write
       any double so that it reads back unchanged (``repr`` of a float uses at
       most 17).  (``DBL_DIG`` = 15 is the other direction: decimals of 15
       digits survive a trip through a double.)

    Examples
    --------
    >>> parse_number(0.1)
    1/10
    >>> parse_number("-1.5e1")
    -15
    """
    if isinstance(value, bool):
        raise ExpressionError("expected a number, got a boolean")
    if isinstance(value, numbers.Integral):
        integer = int(value)
        if abs(integer) > 10**MAX_LITERAL_EXPONENT10:
            raise ExpressionError(
                f"number is too large (magnitude above 1e{MAX_LITERAL_EXPONENT10})"
            )
        text = str(integer)
        return _signed_literal_value(text, text)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ExpressionError(f"expected a finite number, got {value!r}")
        text = repr(float(value))
        return _signed_literal_value(text, text)
    if isinstance(value, str):
        text = _check_text(value, "number")
        return _signed_literal_value(text, text)
    raise ExpressionError(f"expected a number, got {_type_name(value)}")


def parse_expression(text: str | int | float, symbols: Mapping[str, sympy.Symbol]) -> sympy.Expr:
    """Build the SymPy expression written in a design-file entry.

    Parameters
    ----------
    text : str, int or float
        A number (handled by :func:`parse_number`) or an expression over the
        declared parameters: decimal numbers, names, ``+ - * / **``, unary
        ``+``/``-``, parentheses, the constant ``pi`` and calls of the
        functions in :data:`ALLOWED_FUNCTIONS` with one argument.  Operator
        precedence and associativity are Python's [1]_: ``-x**2`` is
        ``-(x**2)`` and ``a/b/c`` is ``(a/b)/c``.
    symbols : Mapping[str, sympy.Symbol]
        The declared parameters, created by the caller with their assumptions
        (e.g. ``real=True, positive=True``); these objects are used as given.

    Returns
    -------
    sympy.Expr
        The expression as written, with no ``nan``, ``zoo``, ``oo`` or
        imaginary unit in it.  Numbers are exact rationals; nothing is
        evaluated numerically.

    Raises
    ------
    ExpressionError
        If the text breaks the grammar or a limit listed in the module notes,
        names an undeclared or reserved parameter, divides by zero, leaves a
        function's domain (``log(0)``) or is not real (``sqrt(-1)``).  No other
        exception escapes for any ``str`` input.
    TypeError
        If ``symbols`` maps a used name to something other than a
        ``sympy.Symbol`` (a programming error, not a design-file error).

    Notes
    -----
    The text is parsed with :func:`ast.parse` and checked node by node against
    a whitelist; no Python code is evaluated.  Exponents must be numbers (see
    module notes), so ``x**y`` and ``9**9**9`` are refused.

    The expression is built as written.  SymPy's automatic evaluation asks
    sign questions that can take seconds (measured here: ``abs``, ``log``,
    ``sin`` or ``sqrt(c*P)`` of a degree-8 polynomial ``P`` in a positive
    symbol took 0.2 to 0.5 s, a degree-100 one 22 s), so the expression is
    first built over stand-ins that are only known to be real, functions of
    non-numeric arguments are not evaluated, and the caller's symbols are put
    in at the end without re-evaluation.  Simplifications that need a
    parameter's sign are therefore not made: with ``m`` positive,
    ``sqrt(m**2)`` becomes ``Abs(m)`` (true for any real ``m``) but not ``m``,
    ``abs(m)`` stays ``Abs(m)`` and ``sqrt(g/l)`` stays ``sqrt(g/l)``;
    ``sympy.simplify`` makes them later if wanted.  Functions of rational
    numbers and rational multiples of ``pi`` are evaluated (``sin(pi/6)`` is
    ``1/2``); other functions are kept as written (``abs(sqrt(2) - 2)``).

    References
    ----------
    .. [1] Python Software Foundation, *The Python Language Reference*,
       release 3.11, sections 6.5 "The power operator" and 6.17 "Operator
       precedence".

    Examples
    --------
    >>> import sympy
    >>> m, c = sympy.symbols("m c", positive=True)
    >>> parse_expression("-c/m", {"m": m, "c": c})
    -c/m
    >>> parse_expression("1e-3*m**(1/2)", {"m": m})
    sqrt(m)/1000
    >>> parse_expression("sqrt(m**2) + sin(pi/6)", {"m": m})
    Abs(m) + 1/2
    """
    if isinstance(text, bool):
        raise ExpressionError("expected a number or an expression, got a boolean")
    if isinstance(text, int | float):
        return parse_number(text)
    if not isinstance(text, str):
        raise ExpressionError(f"expected a number or an expression, got {_type_name(text)}")
    try:
        stripped = _check_text(text, "expression")
        body = _parse_tree(stripped, "expression")
        _check_tree_size(body, stripped, "expression")
        builder = _Builder(stripped, symbols)
        result = builder.build(body).expr
        _check_all_constants(result, stripped)
        if result.has(*_UNDEFINED):
            raise ExpressionError(
                f"the expression is undefined (infinite or not a number): {_quote(stripped)}"
            )
        if _is_not_real(result):
            raise ExpressionError(
                f"the expression is not real (it contains an imaginary part): {_quote(stripped)}"
            )
        return builder.substitute_symbols(result)
    except (ExpressionError, _SymbolsMappingError):
        raise
    except _WRAPPED_ERRORS as error:
        raise ExpressionError(
            f"the expression could not be built ({_type_name(error)}): {_quote(text)}"
        ) from error


def parse_pole(text: str | int | float) -> sympy.Expr:
    """Convert a pole written in a design file to an exact SymPy number.

    Parameters
    ----------
    text : str, int or float
        A number, or a string of one of the forms ``real``, ``imag j`` or
        ``real ± imag j``, with decimal parts and an optional sign in front:
        ``"-2"``, ``"-3j"``, ``"-4+3j"``, ``"-1.5e1 - 2.5j"``.  ``J`` is
        accepted for ``j`` as in Python [1]_.

    Returns
    -------
    sympy.Expr
        ``re + im*I`` with exact rational ``re`` and ``im``, e.g. ``-4 + 3*I``.
        Whether the pole is stable is for the caller to check.

    Raises
    ------
    ExpressionError
        For any other form (``"1j*2j"``, ``"-4+3k"``, ``"3j+4"``), for a part
        breaking the literal limits of :func:`parse_number`, or for a
        non-number.

    References
    ----------
    .. [1] Python Software Foundation, *The Python Language Reference*,
       release 3.11, section 2.4.7 "Imaginary literals".

    Examples
    --------
    >>> parse_pole("-4+3j")
    -4 + 3*I
    >>> parse_pole("-1.5e1 - 2.5j")
    -15 - 5*I/2
    """
    if isinstance(text, bool):
        raise ExpressionError("expected a pole, got a boolean")
    if isinstance(text, int | float):
        return parse_number(text)
    if not isinstance(text, str):
        raise ExpressionError(f"expected a pole as a number or a string, got {_type_name(text)}")
    try:
        stripped = _check_text(text, "pole")
        body = _parse_tree(stripped, "pole")
        _check_tree_size(body, stripped, "pole")
        pole = _PoleReader(stripped).read(body)
    except ExpressionError:
        raise
    except _WRAPPED_ERRORS as error:
        raise ExpressionError(
            f"the pole could not be read ({_type_name(error)}): {_quote(text)}"
        ) from error
    return pole


class _PoleReader:
    """Match the three accepted pole shapes on a syntax tree."""

    def __init__(self, text: str):
        self.text = text

    def fail(self) -> ExpressionError:
        return ExpressionError(
            "a pole must be a real or complex number such as -2, -3j or -4+3j; got "
            f"{_quote(self.text)}"
        )

    def signed(self, node: ast.expr, kind: type) -> sympy.Rational | None:
        """Value of ``[+|-] literal`` where the literal's value has type ``kind``."""
        negative = False
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub | ast.UAdd):
            negative = isinstance(node.op, ast.USub)
            node = node.operand
        value = self.literal(node, kind)
        if value is None:
            return None
        return -value if negative else value

    def literal(self, node: ast.expr, kind: type) -> sympy.Rational | None:
        if not isinstance(node, ast.Constant) or isinstance(node.value, bool):
            return None
        segment = self.text[node.col_offset : node.end_col_offset]
        if kind is complex:
            if not isinstance(node.value, complex) or segment[-1:] not in ("j", "J"):
                return None
            return _literal_value(segment[:-1], segment)
        if not _is_real_number(node.value):
            return None
        return _literal_value(segment)

    def read(self, body: ast.expr) -> sympy.Expr:
        real = self.signed(body, float)
        if real is not None:
            return real
        imaginary = self.signed(body, complex)
        if imaginary is not None:
            return imaginary * sympy.I
        if isinstance(body, ast.BinOp) and isinstance(body.op, ast.Add | ast.Sub):
            real = self.signed(body.left, float)
            imaginary = self.literal(body.right, complex)
            if real is not None and imaginary is not None:
                if isinstance(body.op, ast.Sub):
                    imaginary = -imaginary
                return real + imaginary * sympy.I
        raise self.fail()
