"""Structural sign and realness of an expression, read from its tree alone.

The expression parser asks whether a base, a function argument or a divisor is
evidently positive, negative or real.  SymPy's own answers may cost seconds, so
these rules look only at the tree and at the assumptions of the caller's symbols,
and answer "unknown" whenever a rule does not apply.
"""

from __future__ import annotations

import sympy

__all__ = ["Facts"]

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


class Facts:
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
