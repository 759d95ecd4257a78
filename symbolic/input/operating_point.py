"""The equilibrium of a nonlinear model, and its linearisation there.

The design file fixes as many of the states, inputs and outputs as the plant has inputs
(``[model.operating_point]``); the rest of ``(x*, u*)`` solves ``f(x*, u*, p) = 0`` together
with ``h_j(x*, u*, p) = y*_j`` for each output fixed.  The solution is sought in closed form
first (``sympy.solve``, in a child process within the design's symbolic budget, so that a
system SymPy cannot finish does not hang the reader), as functions of the parameters; the
real solutions at the nominal values that lie in the states' declared ranges are kept, and
exactly one must remain.  When no closed form comes, the equilibrium is found numerically at
the nominal values (``sympy.nsolve``, Newton's method in mpmath, from the middle of the
ranges) and the linearisation uses those numbers.

The linearisation is the Jacobians ``A = ∂f/∂x``, ``B = ∂f/∂u``, ``C = ∂h/∂x``,
``D = ∂h/∂u`` evaluated at ``(x*, u*)`` (H. K. Khalil, *Nonlinear Systems*, 3rd ed.,
Prentice Hall, 2002, Sec. 2.3 and 4.3 -- from memory): exact expressions in the parameters.
"""

from __future__ import annotations

import cmath
from collections.abc import Mapping, Sequence

import sympy as sp

from ..model.design import OperatingPoint
from ..runtime.budget import run_bounded
from ..runtime.errors import BudgetExceeded
from .fields import FieldReader

__all__ = ["linearise", "solve_operating_point"]

#: Solutions whose imaginary part is below this (relative to their size) count as real.
_REAL_TOLERANCE = 1e-9


def solve_operating_point(
    fields: FieldReader,
    given: Mapping[str, tuple[str, sp.Expr]],
    system: tuple,
    values: Mapping[sp.Symbol, sp.Rational],
    ranges: Sequence[tuple[float, float] | None],
    budget: float,
) -> OperatingPoint:
    """The equilibrium ``(x*, u*, y*)`` (see the module docstring).

    ``given`` maps each fixed signal name to ``(kind, index, value)`` (kind ``"state"``,
    ``"input"`` or ``"output"``); ``system`` is ``(f, h, xs, us)``.
    """
    f, h, xs, us = system
    fixed = {}
    equations = list(f)
    for kind, index, value in given.values():
        if kind == "output":
            equations.append(h[index] - value)
        else:
            fixed[(xs if kind == "state" else us)[index]] = value
    unknowns = [s for s in (*xs, *us) if s not in fixed]
    equations = [e.xreplace(fixed) for e in equations]
    solutions, closed = _solve(equations, unknowns, values, budget)
    if not closed:
        solutions = _numeric(fields, equations, unknowns, values, xs, ranges)
    kept = [s for s in solutions if _admissible(s, unknowns, values, xs, ranges)]
    if not kept:
        fields.fail(
            "model.operating_point",
            "no real equilibrium with these values"
            + (" inside the states' ranges" if any(ranges) else "")
            + f" (solved f(x, u) = 0 for {', '.join(s.name for s in unknowns)})",
        )
    if len(kept) > 1:
        shown = "; ".join(_shown(s, unknowns, values) for s in kept[:4])
        fields.fail(
            "model.operating_point",
            f"{len(kept)} equilibria fit ({shown}); give the states a range = [low, high]"
            " that holds only the one meant",
        )
    point = {**fixed, **kept[0]}
    x_star = tuple(point[s] for s in xs)
    u_star = tuple(point[s] for s in us)
    at = dict(zip((*xs, *us), (*x_star, *u_star), strict=True))
    y_star = tuple(e.xreplace(at) for e in h)
    return OperatingPoint(x_star, u_star, y_star, tuple(given), closed, len(kept))


def _solve(equations, unknowns, values, budget) -> tuple[list[dict], bool]:
    """Closed-form solutions (dicts unknown → expression), or ``([], False)`` if none came."""
    try:
        found = run_bounded(
            _sympy_solve, (equations, unknowns), seconds=budget or None, what="equilibrium"
        )
    except BudgetExceeded:
        return [], False
    complete = [s for s in found if set(s) >= set(unknowns)]
    return complete, bool(complete)


def _sympy_solve(equations, unknowns) -> list[dict]:
    try:
        return sp.solve(equations, unknowns, dict=True)
    except (NotImplementedError, ValueError, TypeError):
        return []


def _numeric(fields, equations, unknowns, values, xs, ranges) -> list[dict]:
    """Newton's method at the nominal values, from the middle of the ranges (else zero)."""
    middle = {x: (r[0] + r[1]) / 2 for x, r in zip(xs, ranges, strict=True) if r is not None}
    start = [middle.get(s, 0.0) for s in unknowns]
    at_nominal = [e.xreplace(values) for e in equations]
    try:
        root = sp.nsolve(at_nominal, unknowns, start, dict=True)
    except (ValueError, ZeroDivisionError, TypeError) as exc:
        fields.fail(
            "model.operating_point",
            f"the equilibrium has no closed form and Newton's method found none ({exc});"
            " fix more of the operating point or narrow the states' ranges",
        )
    return [{k: sp.nsimplify(v, rational=True) for k, v in r.items()} for r in root]


def _value(expr, values) -> complex:
    return complex(expr.xreplace(values).evalf(30))


def _admissible(solution, unknowns, values, xs, ranges) -> bool:
    """Real at the nominal values and inside the declared state ranges."""
    bounds = dict(zip(xs, ranges, strict=True))
    for s in unknowns:
        try:
            z = _value(solution[s], values)
        except (TypeError, ValueError):
            return False
        if not cmath.isfinite(z) or abs(z.imag) > _REAL_TOLERANCE * max(1.0, abs(z)):
            return False
        r = bounds.get(s)
        if r is not None and not r[0] <= z.real <= r[1]:
            return False
    return True


def _shown(solution, unknowns, values) -> str:
    return ", ".join(f"{s.name} = {_value(solution[s], values).real:.4g}" for s in unknowns)


def linearise(f, h, xs, us, point: OperatingPoint):
    """``(A, B, C, D)``: the Jacobians of f and h at the operating point, exact."""
    at = dict(zip((*xs, *us), (*point.states, *point.inputs), strict=True))
    F, H = sp.Matrix(f), sp.Matrix(h)

    def jacobian(M, by):
        J = M.jacobian(sp.Matrix(by)) if by else sp.zeros(M.shape[0], 0)
        return sp.ImmutableMatrix(J.xreplace(at).applyfunc(_tidy))

    return jacobian(F, xs), jacobian(F, us), jacobian(H, xs), jacobian(H, us)


def _tidy(entry: sp.Expr) -> sp.Expr:
    """A Jacobian entry as a single fraction with its common factors pulled out."""
    return sp.factor_terms(sp.together(entry))
