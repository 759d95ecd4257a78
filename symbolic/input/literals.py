"""Exact reading of the decimal literals and pole shapes written in a design file.

A literal is converted from its decimal text to an exact SymPy rational, never
through a binary float, after its significant digits and magnitude are checked.
A pole is matched on its syntax tree against the three accepted shapes
``real``, ``imag j`` and ``real ± imag j``.
"""

from __future__ import annotations

import ast
import re

import sympy

from ..runtime.errors import ExpressionError
from .syntax import quote

__all__ = [
    "MAX_LITERAL_EXPONENT10",
    "MAX_SIGNIFICANT_DIGITS",
    "PoleReader",
    "is_real_number",
    "literal_value",
    "signed_literal_value",
]

# ---------------------------------------------------------------------------
# Limits.  The magnitude bound is engineering judgement ("common practice, no
# source"); the 17 significant digits are not: 17 significant decimal digits
# suffice to write any IEEE 754 binary64 number so that it reads back as the
# same double (DBL_DECIMAL_DIG = 17, ISO/IEC 9899:2018, 5.2.4.2.2), and Python's
# ``repr`` of a float and NumPy's printing use up to 17.  A design file may
# therefore carry any double printed by a program; an 18th digit cannot change
# the double it reads as, so a longer literal claims a precision no double carries.
# ---------------------------------------------------------------------------
MAX_SIGNIFICANT_DIGITS = 17
MAX_LITERAL_EXPONENT10 = 15  # literals satisfy 1e-15 <= |x| <= 1e15 (or x == 0)

# A plain decimal literal: digits with an optional fraction and exponent.  The
# character classes are spelled out because ``\d`` also matches non-ASCII digits.
_DECIMAL = re.compile(r"([0-9]*)(?:\.([0-9]*))?(?:[eE]([+-]?[0-9]+))?")
_SIGNED_DECIMAL = re.compile(r"([+-]?)(.*)", re.DOTALL)


def literal_value(literal: str, shown: str | None = None) -> sympy.Rational:
    """Convert an unsigned plain-decimal literal exactly to a SymPy Rational.

    Checks significant digits and magnitude before building any number, so a
    literal such as ``1e999999999`` costs nothing.
    """
    shown = literal if shown is None else shown
    match = _DECIMAL.fullmatch(literal)
    if match is None or not (match.group(1) or match.group(2)):
        raise ExpressionError(
            f"number {quote(shown)} must be written in plain decimal, e.g. 12, 0.5 or 1e-3"
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
            f"number {quote(shown)} has {len(significant)} significant digits; at most "
            f"{MAX_SIGNIFICANT_DIGITS} (enough for any double-precision number to read back"
            " unchanged)"
        )
    leading = exponent + len(significant) - 1  # power of ten of the leading digit
    too_large = f"number {quote(shown)} is too large (magnitude above 1e{MAX_LITERAL_EXPONENT10})"
    too_small = (
        f"number {quote(shown)} is too small (nonzero magnitude below 1e-{MAX_LITERAL_EXPONENT10})"
    )
    if leading > MAX_LITERAL_EXPONENT10:
        raise ExpressionError(too_large)
    if leading < -MAX_LITERAL_EXPONENT10:
        raise ExpressionError(too_small)
    value = sympy.Integer(int(significant)) * sympy.Integer(10) ** exponent
    if abs(value) > sympy.Integer(10) ** MAX_LITERAL_EXPONENT10:
        raise ExpressionError(too_large)
    return value


def signed_literal_value(text: str, shown: str) -> sympy.Rational:
    """:func:`literal_value` of a literal with an optional ``+`` or ``-`` in front."""
    sign, unsigned = _SIGNED_DECIMAL.fullmatch(text).groups()  # always matches
    value = literal_value(unsigned, shown)
    return -value if sign == "-" else value


def is_real_number(value: object) -> bool:
    """True for a Python int or float that is not a bool."""
    return isinstance(value, int | float) and not isinstance(value, bool)


class PoleReader:
    """Match the three accepted pole shapes on a syntax tree."""

    def __init__(self, text: str):
        self.text = text

    def fail(self) -> ExpressionError:
        return ExpressionError(
            "a pole must be a real or complex number such as -2, -3j or -4+3j; got "
            f"{quote(self.text)}"
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
            return literal_value(segment[:-1], segment)
        if not is_real_number(node.value):
            return None
        return literal_value(segment)

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
