"""Routh–Hurwitz conditions of the state-feedback loop in the true parameters, in closed form.

K is fixed at its nominal value and the plant takes its true parameters: the conditions
on the coefficients of det(sI − (A_t − B_t K)) (n ≤ 3) say for which parameter values
state feedback with the true state stays stable; for n > 3 the stability boundary comes
from the grid of the mismatch study (:mod:`symbolic.analysis.mismatch`).

References
----------
.. [1] E. J. Routh, *A Treatise on the Stability of a Given State of
   Motion*, Macmillan, 1877.
.. [2] A. Hurwitz, "Ueber die Bedingungen, unter welchen eine Gleichung nur
   Wurzeln mit negativen reellen Theilen besitzt", *Mathematische Annalen*
   46:273–284, 1895. doi:10.1007/BF01446812
.. [3] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
   Sec. 5-6 (Routh's stability criterion).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..derivation.closed_form import characteristic_coefficients
from ..model.design import Design
from ..model.results import Derivation
from .mismatch import MismatchStudy, mismatch_loop

__all__ = [
    "FACTOR_LIMIT",
    "RouthHurwitzCondition",
    "StateFeedbackStability",
    "factored",
    "rounded",
    "routh_hurwitz_conditions",
    "state_feedback_stability",
]

#: Expressions with more operations than this are not factored (``factor`` can take minutes).
FACTOR_LIMIT = 400


def routh_hurwitz_conditions(coefficients: Sequence[sp.Expr]) -> tuple[sp.Expr, ...]:
    """Expressions that must all be positive for s^n + a_{n−1}s^{n−1} + … + a_0 to be Hurwitz.

    Parameters
    ----------
    coefficients : sequence
        [1, a_{n−1}, …, a_0] (monic), n = 1, 2 or 3.

    Returns
    -------
    tuple of Expr
        n = 1: (a0,); n = 2: (a1, a0); n = 3: (a2, a0, a2·a1 − a0).

    Raises
    ------
    ValueError
        For another order or a polynomial that is not monic.

    Notes
    -----
    Necessary and sufficient (Routh 1877; Hurwitz 1895).  For n = 3 the
    Routh array's first column is 1, a2, (a2 a1 − a0)/a2, a0, so with
    a2 > 0 the three conditions above are equivalent to it (a1 > 0
    follows).  K. Ogata, *Modern Control Engineering*, 5th ed., 2010,
    Sec. 5-6.

    Examples
    --------
    >>> import sympy as sp
    >>> k = sp.Symbol("k")
    >>> routh_hurwitz_conditions((1, 3, 2, k))      # s(s+1)(s+2) + k
    (3, k, 6 - k)
    """
    c = tuple(sp.Integer(x) if isinstance(x, int) else x for x in coefficients)
    n = len(c) - 1
    if c[0] != 1:
        raise ValueError("the characteristic polynomial must be monic")
    if n == 1:
        return (c[1],)
    if n == 2:
        return (c[1], c[2])
    if n == 3:
        a2, a1, a0 = c[1], c[2], c[3]
        return (a2, a0, sp.expand(a2 * a1 - a0))
    raise ValueError("closed-form Routh–Hurwitz conditions are given for orders 1 to 3")


@dataclass(frozen=True)
class RouthHurwitzCondition:
    """One Routh–Hurwitz condition ``expression > 0`` in the true parameters."""

    name: str  # "a1 > 0", "a2·a1 − a0 > 0"
    expression: sp.Expr  # exact (rational function of the parameters)
    reduced: sp.Expr  # sign-equivalent: factors of known sign removed
    assumption: str  # what the reduction assumed

    def text(self, digits: int = 6) -> str:
        if self.reduced.is_number:
            verdict = "always holds" if self.reduced > 0 else "never holds"
            return f"{self.name}:  {verdict} ({sp.sstr(rounded(self.expression, digits))} > 0)"
        shown = rounded(self.reduced, digits)
        return f"{self.name}:  {sp.sstr(shown)} > 0"


def rounded(expr: sp.Expr, digits: int) -> sp.Expr:
    """For display: rational coefficients (and integers of 8 digits or more) as floats.

    Exponents are left exact (``sqrt(a)`` stays ``sqrt(a)``, not ``a**0.5``).
    """
    if expr.is_Rational:
        if expr.is_Integer and abs(expr) < 10**7:
            return expr
        return sp.Float(expr, digits)
    if expr.is_Pow:
        return sp.Pow(rounded(expr.base, digits), expr.exp)
    if expr.args:
        return expr.func(*[rounded(a, digits) for a in expr.args])
    return expr


def factored(expr: sp.Expr) -> sp.Expr:
    """``sympy.factor`` of ``expr`` when it is small enough (:data:`FACTOR_LIMIT`), else ``expr``."""
    if sp.count_ops(expr) > FACTOR_LIMIT:
        return expr
    try:
        return sp.factor(expr)
    except (sp.PolynomialError, NotImplementedError):
        return expr


def _sign_reduced(expr: sp.Expr, design: Design) -> tuple[sp.Expr, list[str]]:
    """Drop factors whose sign is fixed over the ranges; return the rest (same sign as expr)."""
    sign_of: dict[sp.Symbol, int] = {}
    for p in design.parameters:
        lo, hi = p.range if p.range is not None else (p.value, p.value)
        if lo > 0 and p.value > 0:
            sign_of[p.symbol] = 1
        elif hi < 0 and p.value < 0:
            sign_of[p.symbol] = -1
    used: list[str] = []
    num, den = sp.fraction(sp.factor(expr) if sp.count_ops(expr) <= FACTOR_LIMIT else expr)
    sign = 1
    kept = []
    for part, power in ((num, 1), (den, -1)):
        if sp.count_ops(part) > FACTOR_LIMIT:
            kept.append(part**power)
            continue
        try:
            const, factors = sp.factor_list(part)
        except (sp.PolynomialError, NotImplementedError):
            kept.append(part**power)
            continue
        if const.is_number and const != 0:
            sign *= 1 if const > 0 else -1
        else:
            kept.append(const**power)
        for f, mult in factors:
            if mult % 2 == 0 and f.free_symbols:
                used.append(f"({f})^{mult} ≥ 0")
                continue
            if f.is_Symbol and f in sign_of:
                sign *= sign_of[f] ** mult
                used.append(str(f))
                continue
            kept.append(f ** (mult * power))
    reduced = sign * sp.Mul(*kept) if kept else sp.Integer(sign)
    return reduced, used


@dataclass(frozen=True)
class StateFeedbackStability:
    """Stability of A_t − B_t K in the true parameters (K fixed at its nominal value)."""

    order: int
    coefficients: tuple[sp.Expr, ...] | None  # det(sI − (A_t − B_t K)), closed form
    conditions: tuple[RouthHurwitzCondition, ...] | None  # None for n > 3
    lines: tuple[str, ...]  # the report's statements


def state_feedback_stability(d: Derivation, study: MismatchStudy) -> StateFeedbackStability:
    """Routh–Hurwitz conditions of A_t − B_t K (n ≤ 3) or the numeric boundary (n > 3).

    The conditions are factored and reduced to a sign-equivalent form by
    removing factors whose sign cannot change (parameters whose range and
    nominal value are positive, squares, constants); the statements then
    assume each parameter keeps the sign of its nominal value.  The
    mismatched 2n loop is always checked numerically (its eigenvalues on
    the grid).
    """
    n = d.plant.A.shape[0]
    coeffs = None
    conds: tuple[RouthHurwitzCondition, ...] | None = None
    if n <= 3:
        coeffs, conds = _closed_form_conditions(d, n)
        lines = _closed_form_lines(conds, n)
    else:
        lines = _numeric_lines(study, n)
    lines.extend(_observer_based_lines(study, n))
    return StateFeedbackStability(n, coeffs, conds, tuple(lines))


def _closed_form_conditions(
    d: Derivation, n: int
) -> tuple[tuple[sp.Expr, ...], tuple[RouthHurwitzCondition, ...]]:
    """The characteristic coefficients of A_t − B_t K and its Routh–Hurwitz conditions."""
    loop = mismatch_loop(d)
    coeffs = tuple(factored(c) for c in characteristic_coefficients(loop.state_feedback))
    raw = routh_hurwitz_conditions(coeffs)
    names = {
        1: ("a0 > 0",),
        2: ("a1 > 0", "a0 > 0"),
        3: ("a2 > 0", "a0 > 0", "a2·a1 − a0 > 0"),
    }[n]
    conds = []
    for name, expr in zip(names, raw, strict=True):
        expr = factored(sp.together(expr))
        reduced, used = _sign_reduced(expr, d.design)
        assumption = (
            "dropped factors of fixed sign: " + ", ".join(used) if used else "no factor dropped"
        )
        conds.append(RouthHurwitzCondition(name, expr, reduced, assumption))
    return coeffs, tuple(conds)


def _closed_form_lines(conds: tuple[RouthHurwitzCondition, ...], n: int) -> list[str]:
    """The report's statements of the closed-form conditions (n ≤ 3)."""
    poly = " + ".join(
        f"a{n - i}·s^{n - i}" if n - i > 1 else (f"a{n - i}·s" if n - i == 1 else "a0")
        for i in range(1, n + 1)
    )
    lines = [
        f"state feedback with the true state, det(sI − (A_t − B_t K)) = s^{n} + {poly},"
        " K fixed at its nominal value; stable if and only if (Routh 1877, Hurwitz 1895;"
        " Ogata, Modern Control Engineering, 5th ed., Sec. 5-6):"
    ]
    for c in conds:
        lines.append("  " + c.text())
    lines.append(
        "  (each parameter keeping the sign of its nominal value; positive parameters and"
        " squared factors were divided out)"
    )
    return lines


def _numeric_lines(study: MismatchStudy, n: int) -> list[str]:
    """The report's statements on the state-feedback loop checked on the grid (n > 3)."""
    sf_changes = [c for c in study.changes if c.loop == "state feedback"]
    if not study.grid.varied:
        return [
            f"state feedback with the true state (order {n} > 3, no closed form given): no"
            " parameter has a range, so only the nominal point was checked"
        ]
    if not sf_changes and bool(np.all(study.state_feedback_stable)):
        return [
            f"state feedback with the true state (order {n} > 3, checked numerically): stable"
            f" over the whole grid ({study.grid.size} points)"
        ]
    if not sf_changes:
        return [
            f"state feedback with the true state (order {n} > 3, checked numerically):"
            f" unstable at {int(np.sum(~study.state_feedback_stable))} of"
            f" {study.grid.size} grid points"
        ]
    return [
        f"state feedback with the true state (order {n} > 3, checked numerically);"
        " stability boundary on the grid:",
        *("  " + c.text() for c in sf_changes),
    ]


def _observer_based_lines(study: MismatchStudy, n: int) -> list[str]:
    """The statement on the mismatched 2n loop, checked through its eigenvalues on the grid."""
    ob_changes = [c for c in study.changes if c.loop == "observer-based"]
    count = study.grid.values.shape[0]
    status = (
        "stable at every point"
        if study.all_stable
        else f"unstable at {study.unstable_count} of {count} points"
    )
    return [
        f"observer-based loop with mismatch (order {2 * n}): Routh–Hurwitz checked numerically"
        f" through its eigenvalues at {count} points (grid and nominal): {status}",
        *("  " + c.text() for c in ob_changes),
    ]
