"""Integral action in closed form: the augmented pair, ``[K, k_i]`` by Ackermann's formula
and the identity ``det 𝒞_a = z(0) det 𝒞``.

Derived in a bounded child (:func:`start_closed_form`) beside the main symbolic stage; the
construction and its references are in :mod:`symbolic.derivation.integral`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp
from sympy.polys.matrices import DomainMatrix

from ..runtime.budget import BoundedChild
from ..runtime.errors import StructureError
from . import closed_form as cf
from .pole_rules import integral_pole_for

__all__ = ["IntegralForms", "augmented_pair", "closed_form_stage", "start_closed_form"]


def augmented_pair(A, B, C_t, D_t):
    """The plant augmented with the integral of the tracking error.

    Parameters
    ----------
    A, B, C_t, D_t : sympy.Matrix or ndarray
        Plant matrices; ``C_t``/``D_t`` the tracked output's row (1 × n, 1 × m).

    Returns
    -------
    (A_a, B_a)
        ``A_a = [[A, 0], [C_t, 0]]``, ``B_a = [[B], [D_t]]`` (K. Ogata, *Modern Control
        Engineering*, 5th ed., Prentice Hall, 2010, Sec. 10-4, with the
        sign of the integrator state reversed: ``x_I' = y - r``).

    Examples
    --------
    >>> import sympy as sp
    >>> Aa, Ba = augmented_pair(sp.Matrix([[-2]]), sp.Matrix([[3]]), sp.Matrix([[1]]),
    ...                         sp.Matrix([[0]]))
    >>> Aa, Ba
    (Matrix([
    [-2, 0],
    [ 1, 0]]), Matrix([
    [3],
    [0]]))
    """
    if isinstance(A, np.ndarray):
        n = A.shape[0]
        Aa = np.block([[A, np.zeros((n, 1))], [C_t, np.zeros((1, 1))]])
        Ba = np.vstack([B, D_t])
        return Aa, Ba
    A, B, C_t, D_t = (sp.Matrix(M) for M in (A, B, C_t, D_t))
    Aa = A.row_join(sp.zeros(A.shape[0], 1)).col_join(C_t.row_join(sp.zeros(1, 1)))
    Ba = B.col_join(D_t)
    return Aa, Ba


@dataclass(frozen=True)
class IntegralForms:
    """Closed forms of the integral design (computed in a child process)."""

    A_augmented: sp.Matrix
    B_augmented: sp.Matrix
    steps: cf.AckermannSteps
    determinant: sp.Expr
    plant_determinant: sp.Expr
    zero_at_origin: sp.Expr
    ratio: sp.Expr | None
    identity_holds: bool


def _det(M: sp.Matrix) -> sp.Expr:
    dM = DomainMatrix.from_Matrix(sp.Matrix(M)).to_field()
    return dM.domain.to_sympy(dM.det())


def _factor(expr: sp.Expr) -> sp.Expr:
    try:
        return sp.factor(expr)
    except (sp.PolynomialError, NotImplementedError):
        return expr


def closed_form_stage(A, B, Ct, Dt, coeffs) -> IntegralForms:
    """The augmented pair, ``[K, k_i]`` placing ``coeffs``, the determinants and the checks of
    the identities (run in a bounded child)."""
    Aa, Ba = augmented_pair(A, B, Ct, Dt)
    try:
        steps = cf.ackermann(Aa, Ba, coeffs)
    except StructureError as exc:
        raise StructureError(
            "integral action is impossible for every parameter value: the augmented pair"
            " (plant plus integrator of the tracking error) is structurally uncontrollable"
            " (the plant is uncontrollable or its tracked output has a zero at s = 0)",
            key="tracking.method",
        ) from exc
    n = A.shape[0]
    det_a = _det(steps.structure)
    det_c = _det(cf.structure_matrix(A, B))
    system = A.row_join(B).col_join(Ct.row_join(Dt))
    z0 = sp.cancel((-1) ** n * _det(system))
    ratio = None
    if det_c != 0 and z0 != 0:
        ratio = sp.cancel(sp.together(det_a / (det_c * z0)))
    achieved = cf.characteristic_coefficients(Aa - Ba * steps.gain)
    ok = len(achieved) == len(coeffs) and all(
        sp.cancel(sp.together(a - b)) == 0 for a, b in zip(achieved, coeffs, strict=True)
    )
    return IntegralForms(Aa, Ba, steps, _factor(det_a), _factor(det_c), _factor(z0), ratio, ok)


def _seconds(design, budget: float | None) -> float | None:
    seconds = design.symbolic_budget_seconds if budget is None else budget
    return None if seconds <= 0 else seconds


def start_closed_form(
    design, controller_poles: tuple[sp.Expr, ...], *, budget: float | None = None
) -> BoundedChild | None:
    """Start the closed form of ``[K, k_i]`` in a bounded child (one input only, else None).

    :func:`symbolic.derive` starts it beside its own symbolic stage and hands it to
    :func:`symbolic.derivation.integral.integral_action` (``pending``), so that the two run at the same time.
    """
    plant = design.plant
    if plant.n_inputs != 1:
        return None
    idx = design.tracking.output
    pole, _ = integral_pole_for(design, controller_poles)
    return BoundedChild(
        closed_form_stage,
        (
            sp.Matrix(plant.A),
            sp.Matrix(plant.B),
            sp.Matrix(plant.C[idx, :]),
            sp.Matrix(plant.D[idx, :]),
            cf.desired_coefficients(tuple(controller_poles) + (pole,)),
        ),
        seconds=_seconds(design, budget),
        what="the closed form of the integral-action gain",
    )
