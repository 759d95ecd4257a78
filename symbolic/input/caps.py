"""The limits on the values SymPy builds from an expression, checked as it is built.

Every numeric constant SymPy folds lies between 1e-30 and 1e30 in magnitude
with numerator and denominator of at most 512 bits; a number under a root is at
most 1e30 (SymPy factors it); exponents, degree, expanded terms and irrational
steps are bounded by the constants below.  The values are engineering judgement
(common practice, no source).
"""

from __future__ import annotations

import sympy

from ..runtime.errors import ExpressionError
from .syntax import quote

__all__ = [
    "MAX_CONSTANT_BITS",
    "MAX_CONSTANT_EXPONENT10",
    "MAX_DEGREE",
    "MAX_EXPANDED_TERMS",
    "MAX_EXPONENT",
    "MAX_EXPONENT_DENOMINATOR",
    "MAX_IRRATIONAL_STEPS",
    "UNDEFINED",
    "check_all_constants",
    "check_constant",
    "check_root_base",
    "is_not_real",
]

MAX_EXPONENT = 10
MAX_EXPONENT_DENOMINATOR = 10
MAX_CONSTANT_EXPONENT10 = 30  # folded constants satisfy 1e-30 <= |c| <= 1e30
MAX_CONSTANT_BITS = 512
MAX_DEGREE = 30
MAX_IRRATIONAL_STEPS = 20  # function calls plus fractional powers
MAX_EXPANDED_TERMS = 300

#: SymPy's undefined and infinite values; none may appear in an accepted expression.
UNDEFINED = (sympy.nan, sympy.zoo, sympy.oo, -sympy.oo)


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


def check_constant(value: sympy.Expr, text: str) -> None:
    """Bound the numeric constant SymPy folded at the top of ``value``.

    Only the top level is inspected (a pure number, or the numeric coefficient
    of a product or the numeric term of a sum), which keeps each step cheap;
    :func:`check_all_constants` inspects the finished expression throughout.
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
            raise ExpressionError(f"a constant in the expression {problem}: {quote(text)}")


def is_not_real(value: sympy.Expr) -> bool:
    """True if ``value`` holds the imaginary unit or a negative number to a
    fractional power (SymPy keeps ``(-8)**(1/3)`` as ``2*(-1)**(1/3)``, the
    complex principal root)."""
    if value.has(sympy.I):
        return True
    return any(
        power.base.is_Number and power.base.is_negative and not power.exp.is_Integer
        for power in value.atoms(sympy.Pow)
    )


def check_all_constants(value: sympy.Expr, text: str) -> None:
    """Bound every rational in the finished expression (see :func:`check_constant`)."""
    for constant in value.atoms(sympy.Rational):
        problem = _rational_too_big(constant)
        if problem:
            raise ExpressionError(f"a constant in the expression {problem}: {quote(text)}")


def check_root_base(base: sympy.Expr, shown: str) -> None:
    """Bound the numbers under a root: SymPy factors them (measured: a 500-bit
    rational to the power 51/10 took 1.3 s; 100-bit numbers stay under 20 ms).

    ``shown`` is the quoted root or power, for the message.
    """
    limit = 10**MAX_CONSTANT_EXPONENT10
    for constant in base.atoms(sympy.Rational):
        if abs(int(constant.p)) > limit or int(constant.q) > limit:
            raise ExpressionError(
                f"a number under a root or fractional power exceeds "
                f"1e{MAX_CONSTANT_EXPONENT10}: {shown}"
            )
