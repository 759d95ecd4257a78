"""Whether two SymPy expressions (or matrices of them) are the same function of the parameters.

Used by the revision comparison (:mod:`symbolic.analysis.revision_diff`) to compare plant
entries and closed-form gains of two design files without printing them: printed text
differs for equal expressions written differently (``k/m`` and ``k*m**-1`` print alike, but
``(a+b)/m`` and ``a/m + b/m`` do not), and equal text can hide different assumptions.

The test goes from cheap to dear and stops at the first answer:

1. structural equality (``a == b``): the same tree, so the same function: ``"same"``;
2. the difference ``a - b`` evaluated exactly at a few fixed, generic rational points
   (every free symbol replaced by a rational number): a nonzero value there proves the
   two functions differ: ``"different"``;
3. the difference, put over a common denominator and cancelled (``sympy.cancel``) in a
   child process with a time budget (:func:`symbolic.runtime.budget.run_bounded`), since
   ``cancel`` can take seconds on large expressions (measured: 3.7 s on a six-parameter
   plant): zero proves equality: ``"equivalent"``;
4. otherwise (the budget ran out, or a function the cancellation cannot decide): the
   difference vanished at every sample point, which for rational functions means equality
   with high probability (J. T. Schwartz, "Fast probabilistic algorithms for verification
   of polynomial identities", *J. ACM* 27(4), 701-717, 1980; R. Zippel, "Probabilistic
   algorithms for sparse polynomials", EUROSAM 1979, LNCS 72, 216-226): ``"agree at
   sample points"``.
"""

from __future__ import annotations

import sympy as sp

from ..runtime.budget import run_bounded
from ..runtime.errors import BudgetExceeded

__all__ = ["EQUAL_VERDICTS", "compare_expressions", "compare_matrices", "SAMPLE_POINTS"]

#: The verdicts that mean "the same function" (the last one with high probability only).
EQUAL_VERDICTS = frozenset({"same", "equivalent", "agree at sample points"})

#: How many generic rational points the difference is evaluated at.
SAMPLE_POINTS = 3

#: Seconds allowed for the exact cancellation of one difference.
CANCEL_BUDGET_SECONDS = 2.0

#: Digits of the numeric evaluation of a non-rational difference at a sample point.
_DIGITS = 30


def _points(symbols: list[sp.Symbol]) -> list[dict[sp.Symbol, sp.Rational]]:
    """Fixed generic rational points: positive, pairwise distinct, no small integers (so no
    denominator written from the usual parameters is likely to vanish there)."""
    return [
        {
            s: sp.Rational(1009 + 211 * i + 397 * k, 617 + 89 * k + 13 * i)
            for i, s in enumerate(symbols)
        }
        for k in range(SAMPLE_POINTS)
    ]


def _nonzero_at(difference: sp.Expr, point: dict) -> bool | None:
    """True when ``difference`` is certainly nonzero at ``point``, False when it is zero
    there, None when it is undefined there (a pole of the expression)."""
    value = difference.xreplace(point)
    if value.has(sp.zoo, sp.nan, sp.oo, -sp.oo):
        return None
    if value.is_Rational:  # a rational function: exact
        return value != 0
    number = sp.N(value, _DIGITS)
    if not number.is_number or number.has(sp.zoo, sp.nan):
        return None
    return abs(complex(number)) > 10.0 ** (5 - _DIGITS)


def _basic(x) -> sp.Basic:
    """Our own SymPy object, or a Python number made one (never text: no parsing here)."""
    if isinstance(x, sp.Basic):
        return x
    if isinstance(x, bool) or not isinstance(x, int | float | complex):
        raise TypeError(f"expected a SymPy expression or a number, got {type(x).__name__}")
    z = complex(x)
    return sp.Rational(z.real) + sp.I * sp.Rational(z.imag)  # the double's exact value


def _cancels(difference: sp.Expr) -> bool:
    return sp.cancel(sp.together(difference)) == 0


def compare_expressions(a: sp.Expr, b: sp.Expr) -> str:
    """Whether ``a`` and ``b`` are the same function of their symbols.

    Returns
    -------
    str
        ``"same"`` (structurally equal), ``"equivalent"`` (different trees, proven equal),
        ``"different"`` (proven different), or ``"agree at sample points"`` (equal at every
        sample point, not proven).

    Examples
    --------
    >>> k, m = sp.symbols("k m", real=True)
    >>> compare_expressions(-k / m, -k / m), compare_expressions(-k / m, k / m)
    ('same', 'different')
    >>> compare_expressions((k + m) / m, k / m + 1)
    'equivalent'
    """
    a, b = _basic(a), _basic(b)
    if a == b:
        return "same"
    difference = a - b
    if difference == 0:
        return "equivalent"
    symbols = sorted(difference.free_symbols, key=lambda s: s.name)
    for point in _points(symbols):
        if _nonzero_at(difference, point):
            return "different"
    try:
        if run_bounded(_cancels, (difference,), seconds=CANCEL_BUDGET_SECONDS, what="cancel"):
            return "equivalent"
    except BudgetExceeded:
        pass
    return "agree at sample points"


def compare_matrices(a: sp.MatrixBase | None, b: sp.MatrixBase | None) -> str:
    """:func:`compare_expressions` entry by entry; ``"not available"`` when either is None,
    ``"different shapes"`` when the shapes differ.  The verdict is the weakest of the
    entries: any ``"different"`` entry makes the matrices different."""
    if a is None or b is None:
        return "not available"
    if a.shape != b.shape:
        return "different shapes"
    verdicts = set()
    for x, y in zip(a, b, strict=True):
        verdict = compare_expressions(x, y)
        if verdict == "different":
            return "different"
        verdicts.add(verdict)
    for weakest in ("agree at sample points", "equivalent"):
        if weakest in verdicts:
            return weakest
    return "same"
