"""The equilibrium of a nonlinear model, and its linearisation there.

The design file fixes as many of the states, inputs and outputs as the plant has inputs
(``[model.operating_point]``); the rest of ``(x*, u*)`` solves ``f(x*, u*, p) = 0`` together
with ``h_j(x*, u*, p) = y*_j`` for each output fixed.  The solution is sought in closed form
first, as functions of the parameters, by elimination (an equation in one unknown is solved
for it, each root a branch; else an equation linear in an unknown; else ``sympy.solve`` on
what remains), in a child process within :data:`SOLVE_SECONDS` (or the design's smaller
symbolic budget), so that a system SymPy cannot finish does not hang the reader; the
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

#: Longest the closed-form solution of the equilibrium may take before Newton's method is used
#: instead (seconds; less when the design's symbolic budget is smaller).
SOLVE_SECONDS = 5.0
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
    for x, bounds in zip(xs, ranges, strict=True):
        if x in fixed and bounds is not None:
            value = _value(fixed[x], values).real
            if not bounds[0] <= value <= bounds[1]:
                fields.fail(
                    f"model.operating_point.{x.name}",
                    f"{value:.6g} lies outside the state's range [{bounds[0]:g}, {bounds[1]:g}]",
                )
    unknowns = [s for s in (*xs, *us) if s not in fixed]
    equations = [e.xreplace(fixed) for e in equations]
    keep = _Keep(values, xs, ranges, tuple(unknowns))
    solutions, closed = _solve(equations, unknowns, keep, budget)
    if not closed:
        solutions = _numeric(fields, equations, unknowns, values, xs, ranges)
    kept = [
        s
        for s in solutions
        if _admissible(s, unknowns, values, xs, ranges) and _residual_small(equations, s, values)
    ]
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


def _solve(equations, unknowns, keep, budget) -> tuple[list[dict], bool]:
    """Closed-form solutions (dicts unknown → expression), or ``([], False)`` if none came."""
    try:
        found = run_bounded(
            _closed_form_solutions,
            (equations, unknowns, keep),
            seconds=min(budget, SOLVE_SECONDS) if budget else None,
            what="equilibrium",
        )
    except BudgetExceeded:
        return [], False
    complete = [s for s in found if set(s) >= set(unknowns)]
    return complete, bool(complete)


def _closed_form_solutions(equations, unknowns, keep) -> list[dict]:
    try:
        return _eliminate([_numerator(e) for e in equations], list(unknowns), 0, keep)
    except (NotImplementedError, ValueError, TypeError):
        return []


#: Nested eliminations, at most (one per unknown is enough for a square system).
_DEPTH = 16


def _numerator(expr: sp.Expr) -> sp.Expr:
    """The numerator of ``expr`` as one fraction: where the denominator is finite and not
    zero (the equilibria the model defines), ``expr = 0`` exactly when it is."""
    return sp.numer(sp.together(expr))


def _eliminate(equations, unknowns, depth: int, keep) -> list[dict]:
    """Solve ``equations = 0`` for ``unknowns`` by elimination: first an equation in one
    unknown (each of its roots a branch), else one linear in an unknown, else SymPy's
    ``solve`` on what remains.  Returns complete solutions only; ``keep(unknown, root)``
    prunes a branch whose root is already known to be complex or out of range."""
    equations = [e for e in equations if e != 0]
    if not unknowns:
        return [] if equations else [{}]
    if not equations or depth > _DEPTH:
        return []
    chosen = _pick(equations, unknowns)
    if chosen is None:
        found = sp.solve(equations, unknowns, dict=True, check=False, simplify=False)
        return [s for s in found if set(s) >= set(unknowns)]
    eq, unknown = chosen
    out = []
    for root in _roots(eq, unknown):
        if not keep(unknown, root):
            continue  # complex or out of range (real equilibria in the ranges only)
        rest = [_numerator(e.xreplace({unknown: root})) for e in equations if e is not eq]
        others = [u for u in unknowns if u != unknown]
        for tail in _eliminate(rest, others, depth + 1, keep):
            value = root.xreplace(tail)
            out.append({unknown: value, **tail})
    return out


def _roots(eq: sp.Expr, unknown: sp.Symbol) -> list[sp.Expr]:
    """The roots of ``eq`` in ``unknown``, factor by factor (SymPy solves a product of a sine
    and a polynomial in the cosine in milliseconds, the expanded equation in a second)."""
    roots = []
    for factor, _power in sp.factor_list(eq)[1]:
        if factor.has(unknown):
            found = sp.solve(factor, unknown, check=False, simplify=False)
            roots.extend(r for r in found if r not in roots)
    return roots


def _pick(equations, unknowns):
    """``(equation, unknown)``: an equation in one unknown, else one linear in an unknown
    with a coefficient free of the unknowns; None when there is neither."""
    for e in equations:
        present = [u for u in unknowns if e.has(u)]
        if len(present) == 1:
            return e, present[0]
    for e in equations:
        for u in unknowns:
            if e.has(u) and e.is_polynomial(u) and sp.degree(e, u) == 1:
                coefficient = sp.expand(e).coeff(u, 1)
                if coefficient != 0 and not coefficient.has(*unknowns):
                    return e, u
    return None


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


class _Keep:
    """Whether a root found for one unknown can still give an admissible equilibrium: only a
    root that is already a number at the nominal values is judged (picklable for the child)."""

    def __init__(self, values, xs, ranges, unknowns):
        self.values, self.xs, self.ranges, self.unknowns = values, xs, ranges, unknowns

    def __call__(self, unknown, root) -> bool:
        if root.has(*self.unknowns):
            return True
        return _admissible({unknown: root}, [unknown], self.values, self.xs, self.ranges)


def _residual_small(equations, solution, values) -> bool:
    """Each equation vanishes at the solution (nominal values): roots were found without
    SymPy's own check, which costs seconds on trigonometric systems."""
    for e in equations:
        at = e.xreplace(solution).xreplace(values)
        try:
            r = complex(at.evalf(30))
            size = max(abs(complex(t.evalf(30))) for t in sp.Add.make_args(at))
        except (TypeError, ValueError):
            return False
        if not cmath.isfinite(r) or abs(r) > 1e-9 * max(1.0, size):
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
