"""Closed-form pole placement: the symbolic half of the engine.

Everything here is exact SymPy arithmetic over the field of rational
functions in the plant parameters (``DomainMatrix``), so equality tests are
exact and no LU pivot can be a zero in disguise (see TECH-NOTES).  The
functions are pure and picklable so that :mod:`symbolic.runtime.budget` can run
them in a child process.

Formulas
--------
Ackermann's formula (single input)::

    K = e_nᵀ 𝒞⁻¹ α(A),   𝒞 = [B, AB, …, Aⁿ⁻¹B]

computed as K = wᵀ α(A) with 𝒞ᵀ w = e_n (no explicit inverse) and α(A) by
Horner's rule.  J. Ackermann, "Der Entwurf linearer Regelungssysteme im
Zustandsraum", *Regelungstechnik* 20(7):297–300, 1972; see also
K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
Sec. 10-2, Eq. (10-18).

Observer gain by duality: L = (Ackermann(Aᵀ, Cᵀ, α_o))ᵀ; D. G. Luenberger,
"Observing the state of a linear system", *IEEE Trans. Military
Electronics* 8(2):74–80, 1964; Ogata Sec. 10-5, Eq. (10-61).

Transfer-function numerators by the determinant identity
det(sI − A + BC) = det(sI − A)·(1 + C(sI − A)⁻¹B), so for one input and one
output C adj(sI − A) B = det(sI − A + BC) − det(sI − A): two characteristic
polynomials (Berkowitz), never a symbolic inverse.  (Sylvester's
determinant identity; e.g. T. Kailath, *Linear Systems*, Prentice Hall,
1980, Sec. 2.4, Appendix A.)
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import sympy as sp
from sympy.polys.matrices import DomainMatrix
from sympy.polys.matrices.exceptions import DMNonInvertibleMatrixError

from ..runtime.errors import StructureError

__all__ = [
    "AckermannSteps",
    "ClosedForms",
    "SeparatedForms",
    "ackermann",
    "characteristic_coefficients",
    "closed_forms",
    "desired_coefficients",
    "separated_forms",
    "structure_matrix",
]

s = sp.Symbol("s")


def desired_coefficients(poles: tuple[sp.Expr, ...]) -> tuple[sp.Expr, ...]:
    """Coefficients [1, a_{n-1}, …, a_0] of Π (s − p_i), exact and real."""
    poly = sp.Poly(sp.Mul(*[(s - p) for p in poles]).expand(), s)
    coeffs = tuple(sp.expand(c) for c in poly.all_coeffs())
    for c in coeffs:
        if sp.im(c) != 0:
            raise StructureError("requested poles are not closed under conjugation", key="poles")
    return coeffs


def _dm(*mats: sp.MatrixBase) -> list[DomainMatrix]:
    """Convert matrices to DomainMatrix over one common field."""
    dms = [DomainMatrix.from_Matrix(sp.Matrix(M)) for M in mats]
    dom = dms[0].domain
    for d in dms[1:]:
        dom = dom.unify(d.domain)
    return [d.convert_to(dom).to_field() for d in dms]


def structure_matrix(A: sp.MatrixBase, B: sp.MatrixBase) -> sp.Matrix:
    """[B, AB, …, Aⁿ⁻¹B]: the controllability matrix of (A, B).

    The observability matrix of (A, C) is ``structure_matrix(A.T, C.T).T``.
    """
    dA, dB = _dm(A, B)
    cols = [dB]
    for _ in range(A.shape[0] - 1):
        cols.append(dA * cols[-1])
    return DomainMatrix.hstack(*cols).to_Matrix()


@dataclass(frozen=True)
class AckermannSteps:
    """The intermediate results of Ackermann's formula, for the memo."""

    structure: sp.Matrix  # controllability matrix 𝒞
    last_row_of_inverse: sp.Matrix  # wᵀ = e_nᵀ 𝒞⁻¹
    polynomial_of_A: sp.Matrix  # α(A)
    gain: sp.Matrix  # K = wᵀ α(A)


def ackermann(
    A: sp.MatrixBase,
    B: sp.MatrixBase,
    coeffs: tuple[sp.Expr, ...],
    kind: str = "controllability",
) -> AckermannSteps:
    """Single-input pole placement in closed form by Ackermann's formula.

    Parameters
    ----------
    A : (n, n) Matrix
    B : (n, 1) Matrix
    coeffs : sequence
        [1, a_{n-1}, …, a_0], the desired characteristic polynomial.
    kind : str
        "controllability", or "observability" when (A, B) is a dual pair
        (Aᵀ, Cᵀ); only used in the error message.

    Returns
    -------
    AckermannSteps
        ``gain`` is the 1×n K with eig(A − BK) the roots of ``coeffs``.

    Raises
    ------
    StructureError
        When the controllability matrix is singular for generic parameters.

    Examples
    --------
    >>> import sympy as sp
    >>> A = sp.Matrix([[0, 1], [0, 0]]); B = sp.Matrix([0, 1])
    >>> ackermann(A, B, (1, 4, 8)).gain      # (s + 2)^2 + 4 = s^2 + 4s + 8
    Matrix([[8, 4]])
    """
    n = A.shape[0]
    if B.shape != (n, 1):
        raise ValueError("Ackermann's formula needs a single input")
    dA, dB = _dm(A, B)
    dom = dA.domain
    cols = [dB]
    for _ in range(n - 1):
        cols.append(dA * cols[-1])
    ctrb = DomainMatrix.hstack(*cols)
    e_n = DomainMatrix([[dom.zero]] * (n - 1) + [[dom.one]], (n, 1), dom)
    try:
        w = ctrb.transpose().lu_solve(e_n)
    except DMNonInvertibleMatrixError as exc:
        adjective = "uncontrollable" if kind == "controllability" else "unobservable"
        raise StructureError(
            f"the {kind} matrix is singular for every parameter value: the plant is"
            f" structurally {adjective}",
            key="plant",
        ) from exc
    eye = DomainMatrix.eye(n, dom)
    phi = DomainMatrix.zeros((n, n), dom)
    for c in coeffs:  # Horner: ((A + a1 I) A + a2 I) A + …
        phi = phi * dA + eye * dom.from_sympy(sp.Integer(c) if isinstance(c, int) else c)
    K = w.transpose() * phi
    return AckermannSteps(
        structure=ctrb.to_Matrix(),
        last_row_of_inverse=w.transpose().to_Matrix(),
        polynomial_of_A=phi.to_Matrix(),
        gain=K.to_Matrix(),
    )


def characteristic_coefficients(M: sp.MatrixBase) -> tuple[sp.Expr, ...]:
    """Exact characteristic-polynomial coefficients det(sI − M), leading 1 (Berkowitz)."""
    (dM,) = _dm(M)
    return tuple(dM.domain.to_sympy(c) for c in dM.charpoly())


def _poly_expr(coeffs: tuple[sp.Expr, ...]) -> sp.Expr:
    n = len(coeffs) - 1
    return sp.Add(*[c * s ** (n - i) for i, c in enumerate(coeffs)])


def _difference_is_zero(a: tuple[sp.Expr, ...], b: tuple[sp.Expr, ...]) -> bool:
    """Exact comparison of two coefficient lists (rational functions)."""
    if len(a) != len(b):
        return False
    for x, y in zip(a, b, strict=True):
        d = sp.cancel(sp.together(x - y))
        if d != 0:
            return False
    return True


@dataclass(frozen=True)
class ClosedForms:
    """Closed-form controller, observer and reference gain (single input/output)."""

    controller: AckermannSteps | None
    observer: AckermannSteps | None  # of the dual pair (Aᵀ, Cᵀ); L = gain.T
    controllability_determinant: sp.Expr | None
    observability_determinant: sp.Expr | None
    controller_charpoly: tuple[sp.Expr, ...] | None  # det(sI − (A − BK)), computed from K
    observer_charpoly: tuple[sp.Expr, ...] | None
    controller_identity_holds: bool | None  # computed charpoly equals the desired one, exactly
    observer_identity_holds: bool | None
    plant_charpoly: tuple[sp.Expr, ...]
    zero_polynomial: tuple[sp.Expr, ...] | None  # numerator of the tracked-output transfer function
    reference_gain: sp.Expr | None


def _factor_bounded(expr: sp.Expr) -> sp.Expr:
    try:
        return sp.factor(expr)
    except (sp.PolynomialError, NotImplementedError):
        return expr


def _closed_forms(
    A: sp.Matrix,
    B: sp.Matrix,
    C: sp.Matrix,
    D: sp.Matrix,
    tracked: int,
    controller_coeffs: tuple[sp.Expr, ...],
    observer_coeffs: tuple[sp.Expr, ...],
) -> ClosedForms:
    """All closed forms of the basic design.

    K needs a single input and L a single output; the missing one is None
    (the numeric engine handles multi-input / multi-output plants).
    """
    m, p = B.shape[1], C.shape[0]
    ctrl = obs = None
    det_c = det_o = None
    cp_c = cp_o = None
    ok_c = ok_o = None
    if m == 1:
        ctrl = ackermann(A, B, controller_coeffs)
        (dC,) = _dm(ctrl.structure)
        det_c = _factor_bounded(dC.domain.to_sympy(dC.det()))
        cp_c = characteristic_coefficients(A - B * ctrl.gain)
        ok_c = _difference_is_zero(cp_c, controller_coeffs)
    if p == 1:
        obs = ackermann(A.T, C.T, observer_coeffs, kind="observability")
        (dO,) = _dm(obs.structure)
        det_o = _factor_bounded(dO.domain.to_sympy(dO.det()))
        L = obs.gain.T
        cp_o = characteristic_coefficients(A - L * C)
        ok_o = _difference_is_zero(cp_o, observer_coeffs)
    plant_cp = characteristic_coefficients(A)
    zero_poly = None
    N = None
    if m == 1:
        Ct = C[tracked, :]
        Dt = D[tracked, 0]
        shifted = characteristic_coefficients(A - B * Ct)
        zero_poly = tuple(sp.cancel(a - b + Dt * b) for a, b in zip(shifted, plant_cp, strict=True))
        z0 = zero_poly[-1]
        if z0 != 0:
            # Closed loop r -> y is N z(s)/alpha_c(s): state feedback keeps the
            # plant's zeros.  Unit DC gain: N = alpha_c(0) / z(0).
            N = sp.factor(sp.cancel(controller_coeffs[-1] / z0))
    return ClosedForms(
        controller=ctrl,
        observer=obs,
        controllability_determinant=det_c,
        observability_determinant=det_o,
        controller_charpoly=cp_c,
        observer_charpoly=cp_o,
        controller_identity_holds=ok_c,
        observer_identity_holds=ok_o,
        plant_charpoly=plant_cp,
        zero_polynomial=zero_poly,
        reference_gain=N,
    )


@dataclass(frozen=True)
class SeparatedForms:
    """The 2n loop in (state, estimation-error) coordinates and the compensator."""

    matrix: sp.Matrix  # [[A − BK, BK], [0, A − LC]]
    charpoly: tuple[sp.Expr, ...]  # computed from the 2n matrix
    factors_as_expected: bool  # charpoly == alpha_c * alpha_o, exactly
    compensator_numerator: tuple[sp.Expr, ...] | None  # u/y = -num/den, degree < n
    compensator_denominator: tuple[sp.Expr, ...] | None


def _separated_forms(
    A: sp.Matrix,
    B: sp.Matrix,
    C: sp.Matrix,
    D: sp.Matrix,
    K: sp.Matrix,
    L: sp.Matrix,
    controller_coeffs: tuple[sp.Expr, ...],
    observer_coeffs: tuple[sp.Expr, ...],
    compensator: bool,
) -> SeparatedForms:
    """Build the separated closed loop, check its factorisation, and the compensator.

    The compensator is the observer driven by y with u = −K x̂:
    x̂' = (A − BK − LC + LDK) x̂ + L y, u = −K x̂, so
    U(s)/Y(s) = −K (sI − F)⁻¹ L with F = A − BK − LC + LDK.
    """
    n = A.shape[0]
    top = (A - B * K).row_join(B * K)
    bottom = sp.zeros(n, n).row_join(A - L * C)
    M = top.col_join(bottom)
    cp = characteristic_coefficients(M)
    expected = sp.Poly(
        sp.Poly(_poly_expr(controller_coeffs), s) * sp.Poly(_poly_expr(observer_coeffs), s), s
    ).all_coeffs()
    ok = _difference_is_zero(cp, tuple(expected))
    num = den = None
    if compensator and K.shape[0] == 1 and L.shape[1] == 1:
        F = A - B * K - L * C + L * D * K
        den = characteristic_coefficients(F)
        shifted = characteristic_coefficients(F - L * K)
        # both polynomials are monic of degree n: the difference has degree < n
        num = tuple(sp.factor(sp.cancel(a - b)) for a, b in zip(shifted[1:], den[1:], strict=True))
        den = tuple(sp.factor(c) for c in den)
    return SeparatedForms(M, cp, ok, num, den)


# --------------------------------------------------------------------------
# Functions of the parameters (sqrt, exp, sin, ...) as generators
# --------------------------------------------------------------------------
def _generators(*exprs) -> dict:
    """Map every non-rational subexpression (a function call, a fractional power) to a symbol.

    The closed forms are then computed over the field of rational functions in
    the parameters *and* these generators, where every zero test is exact
    (SymPy's catch-all ``EX`` domain is avoided: its elements break
    DomainMatrix arithmetic).  Treating ``sqrt(g/l)`` as an independent symbol
    is sound: Ackermann's formula and the determinant identities hold over any
    field, so an identity proved with the generator free also holds after
    substituting it back.
    """
    mapping: dict = {}
    powers: dict = {}  # x**(p/q) -> g**p, applied together with mapping

    def visit(e) -> None:
        if e.is_Atom:
            return
        if e.is_Pow and e.exp.is_Rational and not e.exp.is_Integer:
            # x**(p/q) = (x**(1/q))**p: one generator per root, so that sqrt(x) and 1/sqrt(x)
            # stay related (their product is 1)
            root = sp.Pow(e.base, sp.Rational(1, e.exp.q))
            if root not in mapping:
                mapping[root] = sp.Dummy(f"g{len(mapping)}", real=True)
            powers[e] = mapping[root] ** e.exp.p
            return
        if isinstance(e, sp.Function) or (e.is_Pow and not e.exp.is_Integer):
            if e not in mapping:
                mapping[e] = sp.Dummy(f"g{len(mapping)}", real=True)
            return
        for arg in e.args:
            visit(arg)

    for x in exprs:
        if isinstance(x, sp.MatrixBase):
            for entry in x:
                visit(entry)
        elif isinstance(x, sp.Basic):
            visit(x)
    return mapping, powers


def _substitute(obj, mapping: dict):
    """Apply ``xreplace(mapping)`` through result dataclasses, tuples and matrices."""
    if not mapping or obj is None or isinstance(obj, bool | int | float | str):
        return obj
    if dataclasses.is_dataclass(obj):
        changes = {
            f.name: _substitute(getattr(obj, f.name), mapping) for f in dataclasses.fields(obj)
        }
        return dataclasses.replace(obj, **changes)
    if isinstance(obj, tuple):
        return tuple(_substitute(x, mapping) for x in obj)
    if isinstance(obj, sp.MatrixBase):
        return obj.xreplace(mapping)
    if isinstance(obj, sp.Basic):
        return obj.xreplace(mapping)
    return obj


def closed_forms(
    A: sp.Matrix,
    B: sp.Matrix,
    C: sp.Matrix,
    D: sp.Matrix,
    tracked: int,
    controller_coeffs: tuple[sp.Expr, ...],
    observer_coeffs: tuple[sp.Expr, ...],
) -> ClosedForms:
    """All closed forms of the basic design (see :func:`_closed_forms`).

    Functions of the parameters are handled as independent generators and
    substituted back in the results (:func:`_generators`).
    """
    mapping, powers = _generators(A, B, C, D)
    forward = {**mapping, **powers}
    back = {v: k for k, v in mapping.items()}
    result = _closed_forms(
        *(M.xreplace(forward) for M in (A, B, C, D)), tracked, controller_coeffs, observer_coeffs
    )
    return _substitute(result, back)


def separated_forms(
    A: sp.Matrix,
    B: sp.Matrix,
    C: sp.Matrix,
    D: sp.Matrix,
    K: sp.Matrix,
    L: sp.Matrix,
    controller_coeffs: tuple[sp.Expr, ...],
    observer_coeffs: tuple[sp.Expr, ...],
    compensator: bool,
) -> SeparatedForms:
    """The separated loop and the compensator (see :func:`_separated_forms`), with functions of
    the parameters handled as generators."""
    mapping, powers = _generators(A, B, C, D, K, L)
    forward = {**mapping, **powers}
    back = {v: k for k, v in mapping.items()}
    result = _separated_forms(
        *(M.xreplace(forward) for M in (A, B, C, D, K, L)),
        controller_coeffs,
        observer_coeffs,
        compensator,
    )
    return _substitute(result, back)
