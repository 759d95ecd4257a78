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

Anti-windup.  With ``[simulation] u_max`` the integrator is corrected by back-calculation
[5]: ``x_I' = (y_t - r) + (u_d - sat(u_d)) / (k_i T_t)`` with the demanded input ``u_d``, which
pulls ``u_d`` back to the limit with the time constant ``T_t`` while the input is limited and is
inactive otherwise; ``T_t = 1/|p_I|``, the integral pole's time constant (common practice, no
source).  Unlike freezing the integrator ("conditional integration") the right-hand side stays
continuous, so the ODE solver takes no chattering steps.

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
.. [5] K. J. Åström and T. Hägglund, *Advanced PID Control*, ISA, 2006, Sec. 3.5 (integrator
   windup; conditional integration and back-calculation) -- from memory.
.. [6] K. J. Åström and R. M. Murray, *Feedback Systems*, Princeton University Press, 2008,
   Sec. 10.4 (integrator windup) -- from memory.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import sympy as sp
from sympy.polys.matrices import DomainMatrix

from ..model.results import Check, Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime.budget import BoundedChild
from ..runtime.errors import BudgetExceeded, GainsmithWarning, StructureError
from . import closed_form as cf
from .numeric import (
    evaluate_matrix,
    numeric_ackermann,
    relative_difference,
    scipy_placement,
)
from .pipeline import conditions_of, eigenvalue_check

__all__ = [
    "DEFAULT_INTEGRAL_POLE_FACTOR",
    "DISTURBANCE_FRACTION",
    "MISMATCH_FRACTION",
    "DisturbanceRun",
    "IntegralAction",
    "IntegralStudy",
    "WindupRun",
    "augmented_pair",
    "default_integral_pole",
    "integral_action",
    "integral_study",
    "mismatch_cases",
]

#: The integral pole sits at this multiple of the slowest controller pole's real part unless
#: ``tracking.integral_pole`` says otherwise.  Common practice, no source: a little faster than
#: the dominant poles, so that the integral mode does not add a slow tail to the step response,
#: yet not so fast that k_i (and the overshoot it causes after a saturation) grows large.
DEFAULT_INTEGRAL_POLE_FACTOR = sp.Rational(3, 2)

#: Size of the step input disturbance of the study, as a fraction of the largest input the
#: reference-gain loop uses for the reference step alone (common practice, no source).
DISTURBANCE_FRACTION = 0.2

#: Without parameter ranges, the mismatched plants scale every parameter by 1 -/+ this
#: fraction (common practice, no source).
MISMATCH_FRACTION = sp.Rational(1, 5)

#: A run stops when the state grows past this size (as in :mod:`symbolic.verification.linear_stepping`).
STATE_LIMIT = 1e12

SIGN_CONVENTION = (
    "x_I' = y - r (integral of output minus reference); u = -K x - k_i x_I."
    " With Ogata's xi' = r - y and u = -K x + k_I xi the same loop has k_I = k_i."
)

ANTI_WINDUP_RULE = (
    "back-calculation: x_I' = (y - r) + (u_demanded - u_applied)/(k_i T_t), which drives the"
    " demanded input back to the limit with the time constant T_t while the input is limited"
    " and changes nothing while it is not (Åström and Hägglund, Advanced PID Control, ISA,"
    " 2006, Sec. 3.5, from memory); tracking time constant T_t = 1/|integral pole|, the"
    " integral mode's own time constant (common practice, no source); the observer is fed the"
    " applied (limited) input"
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


@dataclass(frozen=True)
class DisturbanceRun:
    """One loop on one plant: a reference step at t = 0, an input disturbance step later.

    ``error_before`` / ``error_after`` are the exact steady-state tracking errors ``r - y``
    (from the closed-loop equilibrium, not the last sample) with the reference alone and with
    reference and disturbance; None when the loop is unstable.
    """

    loop: str  # "reference gain" or "integral action"
    plant: str  # "nominal", "low end", "high end"
    plant_description: str
    time: np.ndarray
    tracked_output: np.ndarray
    control: np.ndarray  # (N, m)
    stable: bool
    error_before: float | None
    error_after: float | None
    overshoot_percent: float | None
    stopped_early: bool


@dataclass(frozen=True)
class WindupRun:
    """The integral loop with a limited input, with or without anti-windup."""

    anti_windup: bool
    time: np.ndarray
    tracked_output: np.ndarray
    control: np.ndarray
    integrator: np.ndarray
    overshoot_percent: float | None
    method: str


@dataclass(frozen=True)
class IntegralStudy:
    """Reference-gain loop against integral loop, with disturbance and parameter mismatch."""

    runs: tuple[DisturbanceRun, ...]
    windup: tuple[WindupRun, ...] | None  # (without, with) anti-windup, when u_max is given
    reference: float
    disturbance: float
    disturbance_time: float
    horizon: float
    u_max: float | None
    disturbance_rule: str
    mismatch_rule: str
    anti_windup_rule: str
    notes: tuple[str, ...]

    def run(self, loop: str, plant: str) -> DisturbanceRun:
        for r in self.runs:
            if r.loop == loop and r.plant == plant:
                return r
        raise KeyError((loop, plant))


# --------------------------------------------------------------------------------------------
# Formulas
# --------------------------------------------------------------------------------------------
def augmented_pair(A, B, C_t, D_t):
    """The plant augmented with the integral of the tracking error.

    Parameters
    ----------
    A, B, C_t, D_t : sympy.Matrix or ndarray
        Plant matrices; ``C_t``/``D_t`` the tracked output's row (1 × n, 1 × m).

    Returns
    -------
    (A_a, B_a)
        ``A_a = [[A, 0], [C_t, 0]]``, ``B_a = [[B], [D_t]]`` (Ogata [1] Sec. 10-4 with the
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


def _same_number(a: sp.Expr, b: sp.Expr) -> bool:
    """Whether two exact numbers (poles) are equal: exactly, or to 50 significant digits."""
    difference = sp.expand(a - b)
    if difference.is_Rational or difference.is_zero is not None:
        return bool(difference.is_zero)
    return abs(complex(sp.N(difference, 50))) <= 1e-40 * max(1.0, abs(complex(sp.N(b, 20))))


def default_integral_pole(controller_poles: tuple[sp.Expr, ...]) -> tuple[sp.Expr, str]:
    """The integral pole by the default rule, and the rule in one sentence.

    The pole is real, at :data:`DEFAULT_INTEGRAL_POLE_FACTOR` (1.5) times the real part of the
    slowest controller pole (common practice, no source); when that value coincides with a
    controller pole it is moved 10 % farther left until it does not, so that no pole repeats
    (``scipy.signal.place_poles`` refuses repeated poles).

    Examples
    --------
    >>> default_integral_pole((-2 + sp.I, -2 - sp.I, -10))[0]
    -3
    """
    slowest = max(sp.re(p) for p in controller_poles)
    pole = DEFAULT_INTEGRAL_POLE_FACTOR * slowest
    moved = 0
    while any(_same_number(pole, p) for p in controller_poles):
        pole = pole * sp.Rational(11, 10)
        moved += 1
    rule = (
        f"integral pole real, at {DEFAULT_INTEGRAL_POLE_FACTOR} times the real part of the"
        " slowest controller pole (default; common practice, no source: a little faster than"
        " the dominant poles so the integral mode adds no slow tail)"
    )
    if moved:
        rule += f", moved 10 % farther left {moved} time(s) so that no pole repeats"
    return pole, rule


@dataclass(frozen=True)
class _Forms:
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


def _closed_form_stage(A, B, Ct, Dt, coeffs) -> _Forms:
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
    return _Forms(Aa, Ba, steps, _factor(det_a), _factor(det_c), _factor(z0), ratio, ok)


def _seconds(design, budget: float | None) -> float | None:
    seconds = design.symbolic_budget_seconds if budget is None else budget
    return None if seconds <= 0 else seconds


def _is_zero_at(expr: sp.Expr, values) -> bool:
    v = expr.xreplace(values)
    if v.is_Rational:
        return v == 0
    return abs(complex(sp.N(v, 60))) < 1e-45


# --------------------------------------------------------------------------------------------
# The design
# --------------------------------------------------------------------------------------------
def integral_pole_for(design, controller_poles: tuple[sp.Expr, ...]) -> tuple[sp.Expr, str]:
    if design.tracking.integral_pole is not None:
        return (
            design.tracking.integral_pole,
            "integral pole as given in the design file (tracking.integral_pole)",
        )
    return default_integral_pole(controller_poles)


def start_closed_form(
    design, controller_poles: tuple[sp.Expr, ...], *, budget: float | None = None
) -> BoundedChild | None:
    """Start the closed form of ``[K, k_i]`` in a bounded child (one input only, else None).

    :func:`symbolic.derive` starts it beside its own symbolic stage and hands it to
    :func:`integral_action` (``pending``), so that the two run at the same time.
    """
    plant = design.plant
    if plant.n_inputs != 1:
        return None
    idx = design.tracking.output
    pole, _ = integral_pole_for(design, controller_poles)
    return BoundedChild(
        _closed_form_stage,
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
        The closed form already started by :func:`start_closed_form` for the same design
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
    Poles: the n controller poles of the design and one real integral pole
    (``tracking.integral_pole``, or :func:`default_integral_pole`).  The gain is Ackermann's
    formula on the augmented pair [4] (closed form for one input), cross-checked against
    ``scipy.signal.place_poles`` and by the eigenvalues of ``A_a - B_a [K, k_i]``.  Several
    inputs: ``place_poles`` alone (the gain is then not unique).

    References
    ----------
    See the module references [1]-[4].

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
    plant = design.plant
    values = design.values
    idx = design.tracking.output
    n, m = plant.order, plant.n_inputs
    notes: list[str] = []
    checks: list[Check] = []

    pole, rule = integral_pole_for(design, d.controller_poles.poles)
    poles = tuple(d.controller_poles.poles) + (pole,)
    coeffs = cf.desired_coefficients(poles)
    requested = np.array([complex(p) for p in poles])

    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    Ct, Dt = C[idx : idx + 1, :], D[idx : idx + 1, :]
    Aa, Ba = augmented_pair(A, B, Ct, Dt)
    Aa_cf, Ba_cf = augmented_pair(
        sp.Matrix(plant.A), sp.Matrix(plant.B), plant.C[idx, :], plant.D[idx, :]
    )

    forms: _Forms | None = None
    if m == 1:
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

    # ---- structure at the evaluated values --------------------------------------------------
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

    # ---- the gain -----------------------------------------------------------------------------
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
    # steady state: the loop from r to y_t has unit DC gain (integrator in the loop)
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

    return IntegralAction(
        A_augmented=Aa,
        B_augmented=Ba,
        A_augmented_closed_form=forms.A_augmented if forms is not None else Aa_cf,
        B_augmented_closed_form=forms.B_augmented if forms is not None else Ba_cf,
        K=Ka[:, :n].copy(),
        integral_gain=Ka[:, n:].copy(),
        K_augmented=Ka,
        closed_form=closed,
        poles=poles,
        integral_pole=pole,
        pole_rule=rule,
        coefficients=coeffs,
        controllability_determinant=forms.determinant if forms is not None else None,
        zero_at_origin=forms.zero_at_origin if forms is not None else None,
        determinant_ratio=forms.ratio if forms is not None else None,
        conditions=conditions,
        closed_loop_poles=achieved,
        tracked_index=idx,
        sign_convention=SIGN_CONVENTION,
        method=method,
        checks=tuple(checks),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------------------------
# Simulation: reference step plus input disturbance, with parameter mismatch
# --------------------------------------------------------------------------------------------
def mismatch_cases(design) -> list[tuple[str, str, dict[sp.Symbol, sp.Rational]]]:
    """The mismatched "true" plants of the study: ``(label, description, values)``.

    Every parameter with a ``range`` goes to the low end of its range ("low end") and to the
    high end ("high end"), the others keep their nominal values.  When no parameter has a
    range, every parameter is scaled by 0.8 and by 1.2 (:data:`MISMATCH_FRACTION`; common
    practice, no source).  A plant without parameters has no mismatch case.
    """
    params = design.parameters
    if not params:
        return []
    ranged = [p for p in params if p.range is not None]
    out = []
    for label, end in (("low end", 0), ("high end", 1)):
        values = dict(design.values)
        if ranged:
            for p in ranged:
                values[p.symbol] = p.range[end]
            what = ", ".join(f"{p.name} = {float(p.range[end]):g}" for p in ranged)
        else:
            f = 1 - MISMATCH_FRACTION if end == 0 else 1 + MISMATCH_FRACTION
            for p in params:
                values[p.symbol] = p.value * f
            what = f"every parameter × {float(f):g}"
        out.append((label, what, values))
    return out


@dataclass(frozen=True)
class _LoopMatrices:
    """``z' = F0 z + Bu u + Ed d + Er r``, ``u = Ku z + Nr r``, ``y_t = Cy z + Dy (u + d)``."""

    F0: np.ndarray
    Bu: np.ndarray
    Ed: np.ndarray
    Er: np.ndarray
    Ku: np.ndarray
    Nr: np.ndarray
    Cy: np.ndarray
    Dy: np.ndarray
    n: int
    integral: bool


def _loop_matrices(true, nominal, K, L, idx, *, N=None, ki=None) -> _LoopMatrices:
    """The loop: true plant, observer on the nominal model, reference gain or integrator.

    Plant ``x' = A_t x + B_t (u + d e_1)``, ``y = C_t x + D_t (u + d e_1)`` (the disturbance
    acts on the first input); observer ``x̂' = A x̂ + B u + L (y - C x̂ - D u)``; integrator
    ``x_I' = y_t - r``; control ``u = -K x̂ + N r`` or ``u = -K x̂ - k_i x_I``.
    """
    At, Bt, Ct, Dt = true
    A, B, C, D = nominal
    n, m = A.shape[0], B.shape[1]
    integ = ki is not None
    nz = 2 * n + (1 if integ else 0)
    F0 = np.zeros((nz, nz))
    F0[:n, :n] = At
    F0[n : 2 * n, :n] = L @ Ct
    F0[n : 2 * n, n : 2 * n] = A - L @ C
    rows_u = [Bt, B - L @ D + L @ Dt]
    rows_d = [Bt[:, :1], L @ Dt[:, :1]]
    Er = np.zeros((nz, 1))
    Ku = np.zeros((m, nz))
    Ku[:, n : 2 * n] = -K
    if integ:
        F0[2 * n, :n] = Ct[idx]
        rows_u.append(Dt[idx : idx + 1, :])
        rows_d.append(Dt[idx : idx + 1, :1])
        Er[2 * n, 0] = -1.0
        Ku[:, 2 * n :] = -ki
    Cy = np.zeros((1, nz))
    Cy[0, :n] = Ct[idx]
    return _LoopMatrices(
        F0=F0,
        Bu=np.vstack(rows_u),
        Ed=np.vstack(rows_d),
        Er=Er,
        Ku=Ku,
        Nr=np.zeros((m, 1)) if N is None else np.asarray(N, dtype=float).reshape(m, 1),
        Cy=Cy,
        Dy=Dt[idx : idx + 1, :],
        n=n,
        integral=integ,
    )


def _linear(loop: _LoopMatrices) -> tuple[np.ndarray, np.ndarray]:
    """``z' = F z + G w`` with ``w = [r, d]``."""
    F = loop.F0 + loop.Bu @ loop.Ku
    G = np.hstack([loop.Er + loop.Bu @ loop.Nr, loop.Ed])
    return F, G


def _output(loop: _LoopMatrices, Z: np.ndarray, W: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Tracked output and control along a trajectory (rows of Z, inputs rows of W = [r, d])."""
    U = Z @ loop.Ku.T + W[:, :1] @ loop.Nr.T
    Ud = U.copy()
    Ud[:, 0] += W[:, 1]
    y = Z @ loop.Cy.T + Ud @ loop.Dy.T
    return y[:, 0], U


def _overshoot(y: np.ndarray, final: float | None) -> float | None:
    if final is None or final == 0 or not np.all(np.isfinite(y)):
        return None
    s = math.copysign(1.0, final)
    return max(0.0, 100.0 * (float(np.max(s * y)) - abs(final)) / abs(final))


@dataclass(frozen=True)
class _Trajectory:
    time: np.ndarray
    output: np.ndarray
    control: np.ndarray
    stable: bool
    stopped: bool
    finals: dict[str, float]  # exact tracked output at equilibrium: "before" / "after" d


def _simulate_linear(loop, r, dist, t_d, time) -> _Trajectory:
    """Exact stepping of the linear loop on a uniform grid (Van Loan); exact equilibria."""
    F, G = _linear(loop)
    nz = F.shape[0]
    h = float(time[1] - time[0])
    M = np.zeros((nz + 2, nz + 2))
    M[:nz, :nz] = F * h
    M[:nz, nz:] = G * h
    import scipy.linalg  # the memo's simulation, not derive

    E = scipy.linalg.expm(M)  # Van Loan: [[Phi, Gamma], [0, I]]
    Phi, Gam = E[:nz, :nz], E[:nz, nz:]
    W = np.zeros((time.size, 2))
    W[:, 0] = r
    W[time >= t_d - 1e-12 * max(1.0, t_d), 1] = dist
    Z = np.zeros((time.size, nz))
    stopped = False
    with np.errstate(over="ignore", invalid="ignore"):
        for k in range(time.size - 1):
            Z[k + 1] = Phi @ Z[k] + Gam @ W[k]
            if not np.all(np.abs(Z[k + 1]) <= STATE_LIMIT):
                Z, W, time = Z[: k + 1], W[: k + 1], time[: k + 1]
                stopped = True
                break
    eig = np.linalg.eigvals(F)
    stable = bool(np.max(eig.real) < -1e-10 * max(1.0, float(np.max(np.abs(eig)))))
    y, U = _output(loop, Z, W)
    finals = {}
    if stable:
        for key, w in (("before", np.array([r, 0.0])), ("after", np.array([r, dist]))):
            zs = np.linalg.solve(F, -G @ w)
            ys, _ = _output(loop, zs[np.newaxis, :], w[np.newaxis, :])
            finals[key] = float(ys[0])
    return _Trajectory(time, y, U, stable, stopped, finals)


def _slowest_rate(*matrices: np.ndarray) -> float:
    rates = [-float(np.max(np.linalg.eigvals(M).real)) for M in matrices]
    positive = [x for x in rates if x > 0]
    return min(positive) if positive else 1.0


def integral_study(
    d: Derivation,
    integral: IntegralAction | None = None,
    *,
    samples: int = 2001,
    disturbance: float | None = None,
    horizon: float | None = None,
) -> IntegralStudy:
    """Simulate the reference-gain loop and the integral loop against disturbance and mismatch.

    Parameters
    ----------
    d : Derivation
        The basic design: K, L and the reference gain N of the reference-gain loop.
    integral : IntegralAction, optional
        The integral design (default: ``d.integral``, else derived now).
    samples : int, optional
        Samples on the uniform grid (made odd so that the disturbance falls on a sample).
    disturbance : float, optional
        Size of the step input disturbance (on the first input); default
        :data:`DISTURBANCE_FRACTION` of the largest input of the reference-gain loop's
        response to the reference step alone.
    horizon : float, optional
        Total simulated time; the disturbance steps in at half of it.  Default: twice
        ``[simulation] horizon`` when given, else twice ten slowest time constants of the
        nominal loops (common practice, no source).

    Returns
    -------
    IntegralStudy
        Runs for both loops on the nominal plant and on the mismatched plants of
        :func:`mismatch_cases`; with ``[simulation] u_max``, the integral loop with a limited
        input with and without anti-windup (``solve_ivp``).

    Notes
    -----
    Both loops feed back the full-order observer's estimate (observer gain ``d.L`` designed
    on the nominal model), started at the true (zero) state.  Linear runs are stepped exactly
    (Van Loan's matrix exponential, exact at the samples); the steady-state errors are the
    exact closed-loop equilibria.  The integral loop has zero steady-state error whenever it
    is stable; the reference-gain loop keeps ``e = r - y`` from any disturbance or mismatch.
    """
    if integral is None:
        integral = getattr(d, "integral", None) or integral_action(d)
    design = d.design
    idx = integral.tracked_index
    nominal = (d.plant.A, d.plant.B, d.plant.C, d.plant.D)
    K, L = d.K.value, d.L.value
    N = d.reference.value if d.reference is not None else None
    r = float(design.simulation.reference)
    notes: list[str] = []
    if N is None:
        notes.append("no reference gain exists; the reference-gain loop runs with N = 0")

    loops = {
        "reference gain": lambda true: _loop_matrices(true, nominal, K, L, idx, N=N),
        "integral action": lambda true: _loop_matrices(
            true, nominal, integral.K, L, idx, ki=integral.integral_gain
        ),
    }
    rate = _slowest_rate(
        _linear(loops["reference gain"](nominal))[0], _linear(loops["integral action"](nominal))[0]
    )
    if horizon is None:
        half = design.simulation.horizon or 10.0 / rate
        horizon = 2.0 * half
    samples = max(int(samples), 11) | 1
    time = np.linspace(0.0, horizon, samples)
    t_d = float(time[(samples - 1) // 2])

    if disturbance is None:
        probe = _simulate_linear(loops["reference gain"](nominal), r, 0.0, np.inf, time)
        peak = float(np.max(np.abs(probe.control))) if probe.control.size else 0.0
        disturbance = DISTURBANCE_FRACTION * peak if peak > 0 else DISTURBANCE_FRACTION
        rule = (
            f"step input disturbance of {disturbance:.4g} on input"
            f" '{design.plant.inputs[0].name}' at t = {t_d:.4g}: {DISTURBANCE_FRACTION:g} times"
            " the largest input the reference-gain loop uses for the reference step (common"
            " practice, no source)"
        )
    else:
        rule = f"step input disturbance of {disturbance:.4g} at t = {t_d:.4g} (given)"

    plants = [("nominal", "nominal parameter values", nominal)]
    for label, what, values in mismatch_cases(design):
        try:
            true = tuple(evaluate_matrix(getattr(design.plant, k), values) for k in "ABCD")
        except (TypeError, ValueError, ZeroDivisionError):
            true = None
        if true is None or not all(np.all(np.isfinite(M)) for M in true):
            notes.append(f"mismatched plant '{label}' ({what}) cannot be evaluated; skipped")
            continue
        plants.append((label, what, true))

    runs = []
    for loop_name, build in loops.items():
        for label, what, true in plants:
            loop = build(true)
            tr = _simulate_linear(loop, r, disturbance, t_d, time)
            finals = tr.finals
            before = r - finals["before"] if "before" in finals else None
            after = r - finals["after"] if "after" in finals else None
            first = tr.time < t_d
            runs.append(
                DisturbanceRun(
                    loop=loop_name,
                    plant=label,
                    plant_description=what,
                    time=tr.time,
                    tracked_output=tr.output,
                    control=tr.control,
                    stable=tr.stable,
                    error_before=before,
                    error_after=after,
                    overshoot_percent=_overshoot(tr.output[first], finals.get("before")),
                    stopped_early=tr.stopped,
                )
            )
            if not tr.stable:
                notes.append(f"the {loop_name} loop is unstable on the '{label}' plant ({what})")

    windup = None
    u_max = design.simulation.u_max
    if u_max is not None:
        loop = loops["integral action"](nominal)
        tracking = 1.0 / abs(complex(integral.integral_pole))
        windup = tuple(
            _simulate_windup(loop, r, float(u_max), time, anti_windup=flag, tracking_time=tracking)
            for flag in (False, True)
        )
    return IntegralStudy(
        runs=tuple(runs),
        windup=windup,
        reference=r,
        disturbance=float(disturbance),
        disturbance_time=t_d,
        horizon=float(horizon),
        u_max=None if u_max is None else float(u_max),
        disturbance_rule=rule,
        mismatch_rule=(
            "true plant with every ranged parameter at the low / high end of its range"
            if any(p.range is not None for p in design.parameters)
            else f"true plant with every parameter × {1 - float(MISMATCH_FRACTION):g} /"
            f" × {1 + float(MISMATCH_FRACTION):g} (no ranges given; common practice, no source)"
        ),
        anti_windup_rule=ANTI_WINDUP_RULE,
        notes=tuple(notes),
    )


def _simulate_windup(
    loop: _LoopMatrices,
    r: float,
    u_max: float,
    time: np.ndarray,
    *,
    anti_windup: bool,
    tracking_time: float = 1.0,
) -> WindupRun:
    """The integral loop with ``|u| <= u_max``, reference step only, by ``solve_ivp`` (LSODA)."""
    n = loop.n
    xi = 2 * n  # index of the integrator state
    ki = -loop.Ku[:, xi]  # u = ... - k_i x_I
    # back-calculation gain: x_I' += back @ (u_d - u); d(u_d)/dt then gains -(u_d - u)/T_t
    back = np.linalg.pinv(ki.reshape(-1, 1)).ravel() / tracking_time
    F0, Bu, Er, Ku, Nr = loop.F0, loop.Bu, loop.Er[:, 0], loop.Ku, loop.Nr[:, 0]

    def control(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        demanded = Ku @ z + Nr * r
        return demanded, np.clip(demanded, -u_max, u_max)

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        demanded, u = control(z)
        dz = F0 @ z + Bu @ u + Er * r
        if anti_windup:
            dz[xi] += back @ (demanded - u)
        return dz

    span = (float(time[0]), float(time[-1]))
    scale = max(1.0, abs(r))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import scipy.integrate  # the memo's simulation, not derive

        sol = scipy.integrate.solve_ivp(
            rhs,
            span,
            np.zeros(F0.shape[0]),
            method="LSODA",
            t_eval=time,
            rtol=1e-8,
            atol=1e-10 * scale,
            max_step=(span[1] - span[0]) / 400,
        )
    Z = sol.y.T
    t = sol.t
    if sol.status != 0:
        warnings.warn(
            f"integral loop with a limited input: the integrator stopped ({sol.message})",
            GainsmithWarning,
            stacklevel=2,
        )
    U = np.array([control(z)[1] for z in Z]).reshape(len(t), -1)
    y = Z @ loop.Cy.T[:, 0] + U @ loop.Dy[0]
    return WindupRun(
        anti_windup=anti_windup,
        time=t,
        tracked_output=y,
        control=U,
        integrator=Z[:, xi],
        overshoot_percent=_overshoot(y, r),
        method=(
            "scipy.integrate.solve_ivp (LSODA, rtol 1e-8), "
            + (ANTI_WINDUP_RULE if anti_windup else "no anti-windup")
        ),
    )
