"""Controllability and observability of the plant: the exact conditions and the numeric rank.

:func:`conditions_of` turns the factored determinant of the controllability (or
observability) matrix into the parameter conditions under which the property is lost,
dropping factors that provably have no real zero (:func:`has_no_real_zero`);
:func:`plant_structure` reports both properties at the evaluated values and refuses a plant
that lacks one of them there.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
import sympy as sp

from ..model.results import StructureReport
from ..model.tolerances import ILL_CONDITIONED
from ..runtime.errors import StructureError

if TYPE_CHECKING:
    from ..model.design import Design
    from ..model.results import NumericPlant
    from . import closed_form as cf

__all__ = [
    "ROOT_COUNT_MAX_DEGREE",
    "conditions_of",
    "describe_zero",
    "has_no_real_zero",
    "numeric_structure",
    "plant_structure",
    "structure_report",
    "values_text",
]

#: Expressions with more operations than this are not factored outside the budgeted child.
FACTOR_LIMIT = 400


def describe_zero(f: sp.Expr) -> str:
    """'kf = 0' or 'k = c*m/b' for a factor f that must not vanish."""
    if f.is_Symbol:
        return f"{f} = 0"
    for x in sorted(f.free_symbols, key=lambda v: v.name):
        poly = sp.Poly(f, x) if f.is_polynomial(x) else None
        if poly is not None and poly.degree() == 1:
            a, b = poly.all_coeffs()
            if a.is_number:
                return f"{x} = {sp.factor(-b / a)}"
    return f"{f} = 0"


#: Factors of higher degree than this are not examined for real roots (kept as conditions).
ROOT_COUNT_MAX_DEGREE = 12


def _semidefinite_quadratic_has_no_zero(f: sp.Expr, xs: list[sp.Symbol]) -> bool:
    """True if ``f`` is a quadratic bounded on one side whose extreme value is not 0.

    Completing the square: for ``f(x) = ½ xᵀ H x + gᵀ x + c`` with H positive
    semidefinite, f is bounded below exactly when ``H x = −g`` has a solution
    x₀, and its minimum over real x is then ``f(x₀)``; f has no real zero if
    that minimum is positive.  The negative-semidefinite case is the same for
    −f.  Semidefiniteness: every principal minor is nonnegative (G. Strang,
    *Linear Algebra and Its Applications*, 4th ed., section 6.2).
    """
    poly = sp.Poly(f, *xs)
    if poly.total_degree() != 2 or not (poly.domain.is_QQ or poly.domain.is_ZZ):
        return False
    if len(xs) > 8:  # 2**n principal minors
        return False
    H = sp.hessian(f, xs)
    at_zero = {x: 0 for x in xs}
    g = sp.Matrix([sp.diff(f, x) for x in xs]).subs(at_zero)
    n = len(xs)
    subsets = [[i for i in range(n) if mask >> i & 1] for mask in range(1, 2**n)]
    for sign in (1, -1):
        Hs = sign * H
        if not all(Hs.extract(idx, idx).det() >= 0 for idx in subsets):
            continue
        try:
            x0, params = Hs.gauss_jordan_solve(-sign * g)
        except ValueError:  # -g outside the range of H: f is unbounded both ways
            return False
        x0 = x0.subs({t: 0 for t in params})
        return bool(sign * f.subs(dict(zip(xs, x0, strict=True))) > 0)
    return False


def has_no_real_zero(f: sp.Expr) -> bool:
    """True only if ``f`` provably vanishes for no real values of its parameters.

    Parameters
    ----------
    f : sympy.Expr
        One irreducible factor of a determinant; its symbols are real.

    Returns
    -------
    bool
        ``True`` when one of these proves that f has no real zero:

        * SymPy's assumptions find f positive or negative for all real
          values (e.g. ``a**2 + b**2 + 1``, ``exp(a) + 1``);
        * f is a polynomial in one parameter with rational coefficients and
          Sturm's theorem counts no real root (``Poly.count_roots``; e.g.
          ``a**2 - 2*a + 5``);
        * f is a quadratic in several parameters, bounded on one side, whose
          extreme value is nonzero (e.g. ``a**2 - 2*a*b + b**2 + 1``).

        ``False`` otherwise, including when no proof was found: the factor
        is then kept as a condition.

    Notes
    -----
    Sturm's theorem: P. Henrici, *Applied and Computational Complex
    Analysis*, vol. 1, Wiley 1974, section 6.3.

    Examples
    --------
    >>> a, b = sp.symbols("a b", real=True)
    >>> has_no_real_zero(a**2 - 2*a + 5), has_no_real_zero(a**2 - 2*a - 5)
    (True, False)
    >>> has_no_real_zero(a**2 - 2*a*b + b**2 + 1), has_no_real_zero(a**2 - b**2 + 1)
    (True, False)
    """
    xs = sorted(f.free_symbols, key=lambda v: v.name)
    if not xs or not all(x.is_real for x in xs):
        return False
    if f.is_positive or f.is_negative:
        return True
    if not f.is_polynomial(*xs):
        return False
    try:
        if len(xs) == 1:
            poly = sp.Poly(f, xs[0])
            if poly.degree() > ROOT_COUNT_MAX_DEGREE or not (
                poly.domain.is_QQ or poly.domain.is_ZZ
            ):
                return False
            return poly.count_roots() == 0
        return _semidefinite_quadratic_has_no_zero(f, xs)
    except (sp.PolynomialError, NotImplementedError, ZeroDivisionError):
        return False


def conditions_of(determinant: sp.Expr | None) -> tuple[str, ...]:
    """The parameter conditions under which a determinant vanishes.

    A factor that provably has no real zero (:func:`has_no_real_zero`) is
    not a condition: no real parameter value makes it vanish.
    """
    if determinant is None:
        return ()
    if sp.count_ops(determinant) > FACTOR_LIMIT:
        return (
            f"the determinant vanishes (it has {sp.count_ops(determinant)} operations: too"
            " large to solve for the parameters)",
        )
    num, _den = sp.fraction(sp.factor(determinant))
    try:
        _c, factors = sp.factor_list(num)
    except sp.PolynomialError:
        return (f"{num} = 0",) if num.free_symbols else ()
    return tuple(
        describe_zero(f) for f, _mult in factors if f.free_symbols and not has_no_real_zero(f)
    )


def structure_report(
    kind: str,
    matrix: sp.Matrix | None,
    determinant: sp.Expr | None,
    value: np.ndarray,
    order: int,
) -> StructureReport:
    rank = int(np.linalg.matrix_rank(value)) if np.all(np.isfinite(value)) else 0
    cond = (
        float(np.linalg.cond(value))
        if rank == order and value.shape[0] == value.shape[1]
        else (float(np.linalg.cond(value @ value.T)) ** 0.5 if rank == order else math.inf)
    )
    return StructureReport(
        kind=kind,
        matrix=matrix,
        determinant=determinant,
        conditions=conditions_of(determinant),
        numeric_rank=rank,
        order=order,
        condition_number=cond,
        value=value,
    )


def numeric_structure(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    cols = [B]
    for _ in range(A.shape[0] - 1):
        cols.append(A @ cols[-1])
    return np.hstack(cols)


def values_text(design: Design) -> str:
    """The evaluated parameter values in one line, for messages."""
    return ", ".join(f"{p.name} = {p.value}" for p in design.parameters) or "no parameters"


def plant_structure(
    design: Design, forms: cf.ClosedForms | None, num: NumericPlant, notes: list[str]
) -> tuple[StructureReport, StructureReport]:
    """Controllability and observability of the plant at the evaluated values.

    Raises
    ------
    StructureError
        Naming ``plant`` when either property is lost at the evaluated values, or holds in
        exact arithmetic but not in double precision (see :func:`refuse_rank_loss`).
    """
    n = design.plant.order
    ctrb_value = numeric_structure(num.A, num.B)
    obsv_value = numeric_structure(num.A.T, num.C.T).T
    ctrb_cf = forms.controller.structure if forms and forms.controller else None
    obsv_cf = forms.observer.structure.T if forms and forms.observer else None
    controllability = structure_report(
        "controllability",
        ctrb_cf,
        forms.controllability_determinant if forms else None,
        ctrb_value,
        n,
    )
    observability = structure_report(
        "observability", obsv_cf, forms.observability_determinant if forms else None, obsv_value, n
    )
    for rep in (controllability, observability):
        refuse_rank_loss(design, rep, notes)
    return controllability, observability


def refuse_rank_loss(design: Design, rep: StructureReport, notes: list[str]) -> None:
    """Refuse a plant whose controllability (observability) matrix loses rank at the
    evaluated values, exactly or in double precision; note an ill-conditioned one."""
    n = design.plant.order
    values = design.values
    exact_zero = False
    if rep.determinant is not None:
        at_values = rep.determinant.xreplace(values)
        if at_values.is_Rational:
            exact_zero = at_values == 0
        else:  # algebraic numbers: 60 significant digits decide
            exact_zero = abs(complex(sp.N(at_values, 60))) < 1e-45
    if not exact_zero and not rep.full_rank and rep.determinant is not None:
        # the exact determinant is not zero: the plant is controllable (observable),
        # but not in double precision; refuse without calling it uncontrollable
        with np.errstate(all="ignore"):
            cond = float(np.linalg.cond(rep.value)) if np.all(np.isfinite(rep.value)) else math.inf
        raise StructureError(
            f"the plant is {rep.adjective.removeprefix('un')} in exact arithmetic (det of the"
            f" {rep.kind} matrix = {complex(sp.N(at_values, 6)).real:.3e} at the evaluated"
            f" values, not zero), but numerically it is not: the {rep.kind} matrix has"
            f" condition number {cond:.1e}, beyond what double precision resolves"
            " (numeric rank"
            f" {rep.numeric_rank} of {n}); rescale the states (other units) so that its"
            " entries are of similar size",
            design.path,
            "plant",
        )
    if exact_zero or not rep.full_rank:
        where = (
            f" (the plant is {rep.adjective} where {'; '.join(rep.conditions)})"
            if rep.conditions
            else ""
        )
        raise StructureError(
            f"the plant is {rep.adjective} at the evaluated parameter values"
            f" ({values_text(design)}): {rep.kind} matrix rank {rep.numeric_rank} of {n}{where}",
            design.path,
            "plant",
        )
    if rep.condition_number > ILL_CONDITIONED:
        notes.append(
            f"the {rep.kind} matrix is ill-conditioned (condition number"
            f" {rep.condition_number:.2e}): the gains are sensitive to the model"
        )
