"""Integral action: state feedback on the plant augmented with the integral of the tracking error.

A reference gain N gives zero steady-state error only for the nominal plant and without load:
a constant input disturbance, or a plant that differs from the model, leaves an error.  Integral
action removes both.  The plant ``x' = A x + B u``, ``y = C x + D u`` is augmented with one state

.. math::  \\dot x_I = y_t - r

(sign convention: the integral of *output minus reference*, ``y_t`` the tracked output row
``C_t x + D_t u``), which gives the augmented pair of order n + 1

.. math::  A_a = \\begin{bmatrix} A & 0 \\\\ C_t & 0 \\end{bmatrix},\\qquad
           B_a = \\begin{bmatrix} B \\\\ D_t \\end{bmatrix},

and the control law ``u = -K x - k_i x_I = -[K, k_i] [x; x_I]``.  ``[K, k_i]`` places the n
controller poles of the design plus one extra real pole (the *integral pole*) by Ackermann's
formula on ``(A_a, B_a)``.  The reference enters only through the integrator, so the loop from
``r`` to ``y_t`` is ``k_i z(s) / alpha_a(s)`` with unit gain at s = 0 whatever the plant
parameters, as long as the loop is stable.  With K. Ogata's convention
(``xi' = r - y``, ``u = -K x + k_I xi``) the same loop has ``k_I = k_i``.

Augmented controllability.  ``[B_a, A_a B_a, ..., A_a^n B_a] = [[A, B], [C_t, D_t]]
[[0, 𝒞], [1, 0]]`` with 𝒞 the plant's controllability matrix, and for one input
``det [[A, B], [C_t, D_t]] = (-1)^n z(0)`` (Rosenbrock's system matrix at s = 0; z(s) the
numerator of the tracked output's transfer function), so

.. math::  \\det 𝒞_a = z(0) \\det 𝒞 .

The augmented pair is controllable exactly when the plant is and has no zero at s = 0; the
identity is verified exactly for every design (:attr:`IntegralAction.determinant_ratio`).

Anti-windup: with ``[simulation] u_max`` the integrator is corrected by back-calculation
(:mod:`symbolic.derivation.integral_study`).

Caution: integral action on a machine that moves, heats or flies winds up whenever the actuator
limits; test the anti-windup scheme on the real actuator with reduced limits and an independent
emergency stop before trusting it.

References
----------
.. [1] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 10-4
   (design of servo systems; type-1 servo with integral control, augmented state
   ``[x; xi]``).
.. [2] G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback Control of Dynamic
   Systems*, 6th ed., Pearson, 2010, Sec. 7.10 (integral control and robust tracking; the
   integrator state ``x_I' = y - r``) -- from memory, section number not confirmed.
.. [3] H. H. Rosenbrock, *State-Space and Multivariable Theory*, Nelson, 1970, Ch. 3 (the
   system matrix and its determinant, the zero polynomial).
.. [4] J. Ackermann, "Der Entwurf linearer Regelungssysteme im Zustandsraum",
   *Regelungstechnik* 20(7):297-300, 1972.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..model.results import Check, Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime.budget import BoundedChild
from ..runtime.errors import BudgetExceeded, StructureError
from . import closed_form as cf
from .checks import eigenvalue_check
from .integral_forms import IntegralForms, augmented_pair, start_closed_form
from .numeric import (
    evaluate_matrix,
    numeric_ackermann,
    relative_difference,
    scipy_placement,
)
from .pole_rules import integral_pole_for
from .structure import conditions_of

__all__ = ["SIGN_CONVENTION", "IntegralAction", "integral_action"]

SIGN_CONVENTION = (
    "x_I' = y - r (integral of output minus reference); u = -K x - k_i x_I."
    " With Ogata's xi' = r - y and u = -K x + k_I xi the same loop has k_I = k_i."
)


# --------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class IntegralAction:
    """State feedback with integral action, derived and checked.

    Attributes
    ----------
    A_augmented, B_augmented : ndarray
        The augmented pair (n + 1 states) at the evaluated parameter values.
    A_augmented_closed_form, B_augmented_closed_form : sympy.Matrix
        The same in the parameters.
    K : ndarray, shape (m, n)
        State part of the gain (differs from the basic design's K: one more pole).
    integral_gain : ndarray, shape (m, 1)
        ``k_i`` in ``u = -K x - k_i x_I``.
    K_augmented : ndarray, shape (m, n + 1)
        ``[K, k_i]``.
    closed_form : sympy.Matrix or None
        ``[K, k_i]`` in the parameters (one input, within the budget).
    poles : tuple of sympy.Expr
        The n controller poles followed by the integral pole.
    integral_pole : sympy.Expr
    pole_rule : str
        How the integral pole was chosen.
    coefficients : tuple of sympy.Expr
        Desired characteristic polynomial of ``A_a - B_a [K, k_i]``, ``[1, ..., a_0]``.
    controllability_determinant : sympy.Expr or None
        ``det 𝒞_a``, factored.
    zero_at_origin : sympy.Expr or None
        ``z(0)``, the tracked output's transfer-function numerator at s = 0.
    determinant_ratio : sympy.Expr or None
        ``det 𝒞_a / (det 𝒞 · z(0))``, exactly; 1 confirms the identity of the module notes.
    conditions : tuple of str
        Parameter conditions under which integral action is impossible.
    closed_loop_poles : ndarray
        Eigenvalues of ``A_a - B_a [K, k_i]``.
    tracked_index : int
    sign_convention, method : str
    checks : tuple of Check
    notes : tuple of str
    """

    A_augmented: np.ndarray
    B_augmented: np.ndarray
    A_augmented_closed_form: sp.Matrix
    B_augmented_closed_form: sp.Matrix
    K: np.ndarray
    integral_gain: np.ndarray
    K_augmented: np.ndarray
    closed_form: sp.Matrix | None
    poles: tuple[sp.Expr, ...]
    integral_pole: sp.Expr
    pole_rule: str
    coefficients: tuple[sp.Expr, ...]
    controllability_determinant: sp.Expr | None
    zero_at_origin: sp.Expr | None
    determinant_ratio: sp.Expr | None
    conditions: tuple[str, ...]
    closed_loop_poles: np.ndarray
    tracked_index: int
    sign_convention: str
    method: str
    checks: tuple[Check, ...]
    notes: tuple[str, ...]

    @property
    def pole_values(self) -> np.ndarray:
        return np.array([complex(p) for p in self.poles])


def _is_zero_at(expr: sp.Expr, values) -> bool:
    v = expr.xreplace(values)
    if v.is_Rational:
        return v == 0
    return abs(complex(sp.N(v, 60))) < 1e-45


# --------------------------------------------------------------------------------------------
# The design
# --------------------------------------------------------------------------------------------
def integral_action(
    d: Derivation, *, budget: float | None = None, pending: BoundedChild | None = None
) -> IntegralAction:
    """Derive ``[K, k_i]`` for integral action on the tracked output, and check it.

    Parameters
    ----------
    d : Derivation
        The basic design (its controller poles, plant and tracked output are used).
    budget : float, optional
        Seconds for the closed form (default: the design's symbolic budget; zero or
        negative runs it in this process without a limit).
    pending : BoundedChild, optional
        The closed form already started by
        :func:`~symbolic.derivation.integral_forms.start_closed_form` for the same design
        and controller poles (default: started here).

    Returns
    -------
    IntegralAction

    Raises
    ------
    StructureError
        Naming ``tracking.method`` when the augmented pair is uncontrollable at the evaluated
        parameter values: the tracked output has a zero at s = 0 (then no constant input can
        hold it at a non-zero constant, and no integrator can help).

    Notes
    -----
    Poles: the n controller poles and one real integral pole (``tracking.integral_pole``, or
    :func:`~symbolic.derivation.pole_rules.default_integral_pole`).  The gain: Ackermann's
    formula on the augmented pair [4], in closed form for one input (several inputs:
    ``scipy.signal.place_poles``, not unique); cross-checked.  See the module references.

    Examples
    --------
    >>> import symbolic
    >>> design = symbolic.parse_design(b'''
    ... [parameters.tau]
    ... value = 0.5
    ... [plant]
    ... A = [["-1/tau"]]
    ... B = [["2/tau"]]
    ... C = [[1]]
    ... [controller]
    ... poles = [-4]
    ... [tracking]
    ... method = "integral"
    ... integral_pole = -6
    ... ''')
    >>> result = integral_action(symbolic.derive(design, budget=0), budget=0)
    >>> result.closed_form     # (s + 4)(s + 6) = s^2 + 10 s + 24
    Matrix([[5*tau - 1/2, 12*tau]])
    """
    design = d.design
    notes: list[str] = []
    checks: list[Check] = []
    pole, rule = integral_pole_for(design, d.controller_poles.poles)
    poles = tuple(d.controller_poles.poles) + (pole,)
    forms = _closed_form(d, budget, pending, notes)
    Aa, Ba = _numeric_pair(d)
    conditions = _refuse_zero_at_origin(d, Aa, Ba, forms)
    gain = _augmented_gain(d, Aa, Ba, poles, forms, checks)
    _steady_state_check(d, Aa, Ba, gain["K_augmented"], checks, notes)
    return IntegralAction(
        A_augmented=Aa,
        B_augmented=Ba,
        **_exact_parts(design, forms),
        **gain,
        poles=poles,
        integral_pole=pole,
        pole_rule=rule,
        coefficients=cf.desired_coefficients(poles),
        conditions=conditions,
        tracked_index=design.tracking.output,
        sign_convention=SIGN_CONVENTION,
        checks=tuple(checks),
        notes=tuple(notes),
    )


def _numeric_pair(d: Derivation) -> tuple[np.ndarray, np.ndarray]:
    """The augmented pair at the evaluated values."""
    idx = d.design.tracking.output
    return augmented_pair(
        d.plant.A, d.plant.B, d.plant.C[idx : idx + 1, :], d.plant.D[idx : idx + 1, :]
    )


def _closed_form(
    d: Derivation, budget: float | None, pending: BoundedChild | None, notes: list[str]
) -> IntegralForms | None:
    """The closed forms (one input; started here unless ``pending``), or None."""
    design = d.design
    forms: IntegralForms | None = None
    if design.plant.n_inputs == 1:
        if pending is None:
            pending = start_closed_form(design, d.controller_poles.poles, budget=budget)
        try:
            forms = pending.result()
        except BudgetExceeded as exc:
            notes.append(f"integral action: {exc}; numeric results are given instead")
        except StructureError as exc:
            raise StructureError(exc.problem, design.path, "tracking.method") from exc
    elif pending is not None:
        pending.cancel()
    return forms


def _exact_parts(design, forms: IntegralForms | None) -> dict:
    """The fields of :class:`IntegralAction` in the parameters (the augmented pair always)."""
    plant = design.plant
    idx = design.tracking.output
    if forms is None:
        Aa_cf, Ba_cf = augmented_pair(
            sp.Matrix(plant.A), sp.Matrix(plant.B), plant.C[idx, :], plant.D[idx, :]
        )
    return {
        "A_augmented_closed_form": forms.A_augmented if forms is not None else Aa_cf,
        "B_augmented_closed_form": forms.B_augmented if forms is not None else Ba_cf,
        "controllability_determinant": forms.determinant if forms is not None else None,
        "zero_at_origin": forms.zero_at_origin if forms is not None else None,
        "determinant_ratio": forms.ratio if forms is not None else None,
    }


def _refuse_zero_at_origin(d: Derivation, Aa, Ba, forms: IntegralForms | None) -> tuple[str, ...]:
    """The conditions under which integral action is impossible; refused when the augmented
    pair is uncontrollable at the evaluated values (a zero at s = 0)."""
    design = d.design
    plant = design.plant
    n, idx = plant.order, design.tracking.output
    values = design.values
    tracked = plant.outputs[idx].name
    ctrb_a = np.hstack([np.linalg.matrix_power(Aa, k) @ Ba for k in range(n + 1)])
    rank = int(np.linalg.matrix_rank(ctrb_a))
    zero_exact = forms is not None and _is_zero_at(forms.zero_at_origin, values)
    conditions = conditions_of(forms.determinant) if forms is not None else ()
    if zero_exact or rank < n + 1:
        where = (
            f"; integral action is impossible where {' or '.join(conditions)}" if conditions else ""
        )
        raise StructureError(
            f"integral action needs the tracked output '{tracked}' to have no zero at s = 0,"
            f" but at the evaluated parameter values z(0) = 0: the augmented controllability"
            f" matrix has rank {rank} of {n + 1} (det of the augmented controllability matrix = z(0) × det of the plant's){where}. A zero at the"
            " origin blocks constant signals, so no controller can hold this output at a"
            ' non-zero constant; track another output, or use method = "reference_gain" for'
            " a regulator only",
            design.path,
            "tracking.method",
        )

    return conditions


def _augmented_gain(
    d: Derivation,
    Aa,
    Ba,
    poles: tuple[sp.Expr, ...],
    forms: IntegralForms | None,
    checks: list[Check],
) -> dict:
    """``[K, k_i]`` placing the poles on the augmented pair, how, and its checks (fields of
    :class:`IntegralAction`)."""
    design = d.design
    values = design.values
    n, m = design.plant.order, design.plant.n_inputs
    requested = np.array([complex(p) for p in poles])
    reference, how = scipy_placement(Aa, Ba, requested)
    closed = None
    if forms is not None:
        closed = forms.steps.gain
        Ka = evaluate_matrix(closed, values)
        method = "Ackermann's formula on the augmented pair, closed form"
    elif m == 1:
        Ka = numeric_ackermann(Aa, Ba, requested)
        method = "Ackermann's formula on the augmented pair, floating point"
    else:
        if reference is None:
            raise StructureError(
                f"cannot place the poles of the integral loop: {how}",
                design.path,
                "tracking.method",
            )
        Ka = reference
        method = "scipy.signal.place_poles on the augmented pair (several inputs: not unique)"
    achieved = _gain_checks(Aa, Ba, Ka, requested, reference, how, forms, m, checks)
    return {
        "K": Ka[:, :n].copy(),
        "integral_gain": Ka[:, n:].copy(),
        "K_augmented": Ka,
        "closed_form": closed,
        "closed_loop_poles": achieved,
        "method": method,
    }


def _gain_checks(Aa, Ba, Ka, requested, reference, how, forms, m: int, checks: list[Check]):
    """``[K, k_i]`` against ``scipy.signal.place_poles`` and floating-point Ackermann, the
    eigenvalues of the loop and the exact identities; returns those eigenvalues."""
    if m == 1:
        if reference is not None:
            diff = relative_difference(Ka, reference)
            checks.append(
                Check(
                    "integral action: [K, k_i] vs scipy.signal.place_poles on (A_a, B_a)"
                    " (relative)",
                    diff,
                    GAIN_TOLERANCE,
                    diff <= GAIN_TOLERANCE,
                )
            )
        else:
            checks.append(
                Check(
                    "integral action: [K, k_i] vs scipy.signal.place_poles", None, None, None, how
                )
            )
        if forms is not None:
            alt = numeric_ackermann(Aa, Ba, requested)
            diff = relative_difference(Ka, alt)
            checks.append(
                Check(
                    "integral action: closed form vs floating-point Ackermann (relative)",
                    diff,
                    GAIN_TOLERANCE,
                    diff <= GAIN_TOLERANCE,
                )
            )
    achieved = np.linalg.eigvals(Aa - Ba @ Ka)
    checks.append(
        eigenvalue_check(
            "integral action: eigenvalues of A_a − B_a[K, k_i] vs requested poles (relative)",
            Aa - Ba @ Ka,
            requested,
            achieved=achieved,
            terms=(Aa, (Ba, Ka)),
            weights=np.abs(Aa) + np.abs(Ba) @ np.abs(Ka),
        )
    )
    if forms is not None:
        checks.append(
            Check(
                "integral action: det(sI − (A_a − B_a[K, k_i])) equals the desired polynomial"
                " identically (exact, symbolic)",
                None,
                None,
                bool(forms.identity_holds),
            )
        )
        if forms.ratio is not None:
            checks.append(
                Check(
                    "integral action: det (augmented controllability matrix) = z(0)·det (controllability matrix) identically (exact, symbolic)",
                    None,
                    None,
                    bool(forms.ratio == 1),
                )
            )
    return achieved


def _steady_state_check(d: Derivation, Aa, Ba, Ka, checks: list[Check], notes: list[str]):
    """The loop from r to the tracked output has unit DC gain (integrator in the loop)."""
    plant = d.design.plant
    n, idx = plant.order, d.design.tracking.output
    tracked = plant.outputs[idx].name
    Ct, Dt = d.plant.C[idx : idx + 1, :], d.plant.D[idx : idx + 1, :]
    Acl = Aa - Ba @ Ka
    Er = np.zeros((n + 1, 1))
    Er[n, 0] = -1.0
    try:
        xs = np.linalg.solve(Acl, -Er)
        dc = float(((Ct - Dt @ Ka[:, :n]) @ xs[:n] - (Dt @ Ka[:, n:]) @ xs[n:]).item())
        checks.append(
            Check(
                f"integral action: steady-state gain from r to {tracked} equals 1",
                abs(dc - 1.0),
                GAIN_TOLERANCE,
                abs(dc - 1.0) <= GAIN_TOLERANCE,
            )
        )
    except np.linalg.LinAlgError:
        notes.append("integral action: the closed loop is singular; no steady state")
