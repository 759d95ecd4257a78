"""The whitelist walker: a SymPy expression built node by node from a checked syntax tree.

:class:`ExpressionBuilder` accepts only numbers, names of the given vocabulary,
``+ - * / **``, unary signs and calls of the allowed functions; every other node
is refused with a message naming it.  Each step is sized before SymPy runs it
and checked after (:mod:`symbolic.input.caps`), function arguments pass the
guards of :mod:`symbolic.input.guards`, and the expression is built over
stand-ins for the parameters that are only known to be real (see
:func:`symbolic.input.expressions.parse_expression`).
"""

from __future__ import annotations

import ast
import difflib
import math
from collections.abc import Callable, Mapping
from fractions import Fraction
from typing import NamedTuple

import sympy

from ..runtime.errors import ExpressionError
from .caps import (
    MAX_CONSTANT_BITS,
    MAX_DEGREE,
    MAX_EXPANDED_TERMS,
    MAX_EXPONENT,
    MAX_EXPONENT_DENOMINATOR,
    MAX_IRRATIONAL_STEPS,
    UNDEFINED,
    check_constant,
    check_root_base,
    is_not_real,
)
from .guards import check_argument
from .literals import is_real_number, literal_value
from .signs import Facts
from .syntax import operator_group, quote, type_name

__all__ = ["ExpressionBuilder", "SymbolsMappingError", "Vocabulary"]

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


class SymbolsMappingError(TypeError):
    """The caller's ``symbols`` mapping holds a non-Symbol (a programming error)."""


class Vocabulary(NamedTuple):
    """The names an expression may use, and those it may not.

    ``functions`` maps each callable name to its SymPy function, ``constants``
    each named constant to its value, and ``reserved`` each name that is refused
    outright to the reason given in the message.
    """

    functions: Mapping[str, Callable[[sympy.Expr], sympy.Expr]]
    constants: Mapping[str, sympy.Expr]
    reserved: Mapping[str, str]


def _is_plain_number(value: sympy.Expr) -> bool:
    """A rational number or a rational multiple of pi."""
    coefficient, rest = value.as_coeff_Mul()
    return bool(coefficient.is_Rational and (rest is sympy.S.One or rest is sympy.pi))


def _is_literal_zero(value: sympy.Expr) -> bool:
    return bool(value.is_Number and value.is_zero)


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


class ExpressionBuilder:
    """Build a SymPy expression from a size-checked syntax tree."""

    def __init__(self, text: str, symbols: Mapping[str, sympy.Symbol], vocabulary: Vocabulary):
        self.text = text
        self.symbols = symbols
        self.vocabulary = vocabulary
        self.irrational_steps = 0
        self.proxy_of: dict[sympy.Symbol, sympy.Symbol] = {}  # caller's symbol -> proxy
        self.facts = Facts()

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
            if operator_group(node.op) is not None:
                return self._chain(node)
            symbol = _OPERATOR_SYMBOLS.get(type(node.op), type(node.op).__name__)
            hint = " (use ** for powers)" if isinstance(node.op, ast.BitXor) else ""
            raise ExpressionError(f"operator '{symbol}' is not allowed{hint}")
        if isinstance(node, ast.Call):
            return self._call(node)
        message = _FORBIDDEN_NODES.get(type(node))
        if message is None:
            message = f"the construct {type(node).__name__} is not allowed"
        raise ExpressionError(f"{message}: {quote(self.segment(node))}")

    def check_size(self, degree: int, terms: int) -> None:
        """Refuse a step whose measures are over the limits, before SymPy runs it."""
        if degree > MAX_DEGREE:
            raise ExpressionError(
                f"the expression's degree exceeds {MAX_DEGREE} (powers too high): "
                f"{quote(self.text)}"
            )
        if terms > MAX_EXPANDED_TERMS:
            raise ExpressionError(
                f"the expression would expand to more than {MAX_EXPANDED_TERMS} terms: "
                f"{quote(self.text)}"
            )

    def finish(self, result: sympy.Expr, degree: int, terms: int) -> _Built:
        """Check the limits after one operation and record the measures."""
        if result.is_Rational:
            degree, terms = 0, 1
        check_constant(result, self.text)
        self.check_size(degree, terms)
        return _Built(result, degree, terms)

    def count_irrational_step(self, node: ast.AST) -> None:
        self.irrational_steps += 1
        if self.irrational_steps > MAX_IRRATIONAL_STEPS:
            raise ExpressionError(
                f"more than {MAX_IRRATIONAL_STEPS} function calls and fractional powers: "
                f"{quote(self.segment(node))}"
            )

    # -- leaves ---------------------------------------------------------------
    def _constant(self, node: ast.Constant) -> sympy.Expr:
        value = node.value
        if isinstance(value, bool) or value is None or value is Ellipsis:
            raise ExpressionError(f"the constant {value!r} is not allowed")
        if isinstance(value, str):
            raise ExpressionError(f"strings are not allowed: {quote(self.segment(node))}")
        if isinstance(value, bytes):
            raise ExpressionError(f"bytes are not allowed: {quote(self.segment(node))}")
        if isinstance(value, complex):
            raise ExpressionError(
                f"imaginary numbers are not allowed in an expression: {quote(self.segment(node))}"
            )
        if isinstance(value, int | float):
            return literal_value(self.segment(node))
        raise ExpressionError(f"the constant {quote(self.segment(node))} is not allowed")

    def _name(self, node: ast.Name) -> _Built:
        name = node.id
        constants, reserved = self.vocabulary.constants, self.vocabulary.reserved
        if name in constants:
            return _Built(constants[name], 1, 1)
        if name in self.vocabulary.functions:
            raise ExpressionError(f"'{name}' is a function; call it as {name}(...)")
        if name in reserved:
            raise ExpressionError(
                f"the name '{name}' is reserved and cannot appear in an expression: "
                f"{reserved[name]}"
            )
        symbol = self.symbols.get(name)
        if symbol is None:
            raise ExpressionError(self._undeclared(name))
        if not isinstance(symbol, sympy.Symbol):
            raise SymbolsMappingError(
                f"symbols[{name!r}] must be a sympy.Symbol, got {type_name(symbol)}"
            )
        return _Built(self.proxy(symbol), 1, 1)

    def _undeclared(self, name: str) -> str:
        message = f"undeclared name {quote(name)}"
        declared = sorted(key for key in self.symbols if isinstance(key, str))
        close = difflib.get_close_matches(name, declared, n=3, cutoff=0.6)
        if close:
            return f"{message}; did you mean {', '.join(close)}?"
        if not declared:
            return f"{message}; no parameters are declared"
        shown = ", ".join(declared[:10]) + (", ..." if len(declared) > 10 else "")
        return f"{message}; declared parameters: {quote(shown, 100)[1:-1]}"

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
        group = operator_group(node.op)
        tail: list[tuple[ast.operator, ast.expr]] = []
        current: ast.expr = node
        while isinstance(current, ast.BinOp) and operator_group(current.op) == group:
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
                    raise ExpressionError(f"division by zero: {quote(self.segment(right_node))}")
                result = left.expr / right.expr
            left = self.finish(result, degree, terms)
        return left

    def _power(self, node: ast.BinOp) -> _Built:
        exponent = self._exponent(node.right)
        base = self.build(node.left)
        if _is_literal_zero(base.expr) and exponent.is_negative:
            raise ExpressionError(
                f"division by zero (zero to a negative power): {quote(self.segment(node))}"
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
                        f"a constant in the expression has too many digits: {quote(self.text)}"
                    )
        else:
            self.count_irrational_step(node)
            check_root_base(base.expr, quote(self.segment(node)))
            if self.facts.sign(base.expr) == -1:
                raise ExpressionError(
                    f"{quote(self.segment(node))} is not real (a negative quantity to a "
                    "fractional power)"
                )
        result = base.expr**exponent
        if result.has(*UNDEFINED):
            raise ExpressionError(f"{quote(self.segment(node))} is undefined")
        if not exponent.is_Integer and is_not_real(result):
            raise ExpressionError(
                f"{quote(self.segment(node))} is not real (a negative number to a fractional power)"
            )
        return self.finish(result, degree, terms)

    def _exponent(self, node: ast.expr) -> sympy.Rational:
        """Read an exponent: a signed number or a signed ratio of two integers."""
        shown = quote(self.segment(node))
        negative, inner = self._strip_signs(node)
        if isinstance(inner, ast.Constant) and is_real_number(inner.value):
            value = literal_value(self.segment(inner))
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
        value = literal_value(self.segment(inner))
        return -value if negative else value

    def _call(self, node: ast.Call) -> _Built:
        func = node.func
        if isinstance(func, ast.Attribute):
            raise ExpressionError(f"attribute access is not allowed: {quote(self.segment(func))}")
        if not isinstance(func, ast.Name):
            raise ExpressionError(
                f"only the named functions {', '.join(self.vocabulary.functions)} may be called: "
                f"{quote(self.segment(node))}"
            )
        function = self.vocabulary.functions.get(func.id)
        if function is None:
            raise ExpressionError(
                f"function {quote(func.id)} is not allowed; allowed: "
                f"{', '.join(self.vocabulary.functions)}"
            )
        if node.keywords:
            raise ExpressionError(f"keyword arguments are not allowed: {quote(self.segment(node))}")
        if any(isinstance(argument, ast.Starred) for argument in node.args):
            raise ExpressionError(f"starred arguments are not allowed: {quote(self.segment(node))}")
        if len(node.args) != 1:
            raise ExpressionError(
                f"function '{func.id}' takes exactly one argument, got {len(node.args)}"
            )
        self.count_irrational_step(node)
        argument = self.build(node.args[0])
        check_argument(self.facts, func.id, argument.expr, quote(self.segment(node)))
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
        if result.has(*UNDEFINED):
            raise ExpressionError(
                f"{quote(self.segment(node))} is undefined (outside the function's domain)"
            )
        if is_not_real(result):
            raise ExpressionError(
                f"{quote(self.segment(node))} is not real (outside the function's real domain)"
            )
        return self.finish(result, max(1, argument.degree), 1)
