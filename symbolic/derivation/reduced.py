"""Luenberger's reduced-order (minimum-order) observer.

The p measured outputs already give p combinations of the state, so only n - p states need an
observer.  A change of coordinates ``x̄ = T x`` with ``T = [[C], [W]]`` (W a selection of rows
of the identity that makes T invertible) makes the measured states explicit: ``C T⁻¹ = [I 0]``.
In the new coordinates, partitioned after the first p states,

.. math::  \\bar A = T A T^{-1} = \\begin{bmatrix} A_{aa} & A_{ab} \\\\ A_{ba} & A_{bb}
           \\end{bmatrix},\\qquad \\bar B = T B = \\begin{bmatrix} B_a \\\\ B_b \\end{bmatrix},

``x̄_a = ȳ`` is measured (``ȳ = y - D u``, equal to ``y`` when D = 0) and ``x̄_b`` is estimated
by the observer of order n - p (Ogata [2] Sec. 10-6, Eqs. (10-74)-(10-81), written without the
derivative of y):

.. math::  \\dot\\eta = \\hat A \\eta + \\hat B \\bar y + \\hat F u,\\qquad
           \\hat{\\bar x}_b = \\eta + K_e \\bar y,

    \\hat A = A_{bb} - K_e A_{ab},\\quad \\hat B = \\hat A K_e + A_{ba} - K_e A_{aa},\\quad
    \\hat F = B_b - K_e B_a,

and the estimate in the plant's coordinates is ``x̂ = T⁻¹ (Ĉ η + D̂ ȳ)`` with
``Ĉ = [0; I]``, ``D̂ = [I; K_e]``.  The estimation error ``e_b = x̄_b - x̂_b`` obeys
``e_b' = (A_bb - K_e A_ab) e_b``; ``K_e`` ((n - p) × p) places its poles.  For one output,
``K_e`` is Ackermann's formula on the dual pair ``(A_bbᵀ, A_abᵀ)`` [3]: observability of
``(A_bb, A_ab)`` is equivalent to that of ``(A, C)`` [1].

With ``u = -K x̂ + N r`` the closed loop has 2n - p states and, by the separation principle,
the characteristic polynomial ``α_c(s) α_ro(s)``; this module builds that loop from the
implementation equations above (not from the error form) and checks the factorisation exactly.

References
----------
.. [1] D. G. Luenberger, "Observers for multivariable systems", *IEEE Transactions on
   Automatic Control* 11(2):190-197, 1966. doi:10.1109/TAC.1966.1098323
.. [2] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 10-6
   (minimum-order observer; Example 10-8, from memory).
.. [3] J. Ackermann, "Der Entwurf linearer Regelungssysteme im Zustandsraum",
   *Regelungstechnik* 20(7):297-300, 1972.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..model.results import Check, Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime.budget import BoundedChild, Outcome
from ..runtime.errors import BudgetExceeded, GainsmithError, StructureError
from . import closed_form as cf
from .checks import eigenvalue_check
from .numeric import (
    evaluate_matrix,
    numeric_ackermann,
    relative_difference,
    scipy_placement,
)
from .pole_rules import reduced_poles_for
from .reduced_coordinates import (
    ReducedForms,
    closed_form_stage,
    coordinate_change,
    observer_matrices,
    transform_matrix,
)

__all__ = ["ReducedObserver", "closed_form_outcome", "reduced_observer"]


# --------------------------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ReducedObserver:
    """A reduced-order observer, its implementation equations and the closed loop.

    Numeric attributes are at the evaluated parameter values; ``*_closed_form`` attributes are
    SymPy matrices in the parameters, or None (several outputs, or over the budget).

    Attributes
    ----------
    measured, order : int
        p (outputs used as measured states) and n - p (observer order).
    T, T_inverse : ndarray
        ``x̄ = T x``; ``C T⁻¹ = [I 0]``.
    A_aa, A_ab, A_ba, A_bb, B_a, B_b : ndarray
        The partition of ``T A T⁻¹`` and ``T B``.
    Ke : ndarray, shape (n - p, p)
        Observer gain: eig(A_bb - Ke A_ab) are the reduced observer poles.
    observer_matrix, output_input, control_input : ndarray
        ``Â``, ``B̂``, ``F̂`` of ``η' = Â η + B̂ ȳ + F̂ u``.
    estimate_from_state, estimate_from_output : ndarray
        ``T⁻¹ Ĉ`` and ``T⁻¹ D̂``: ``x̂ = T⁻¹Ĉ η + T⁻¹D̂ ȳ``.
    compensator : tuple of ndarray
        ``(F_c, G_c, H_c, J_c)`` of the controller with the observer inside:
        ``η' = F_c η + G_c ȳ + F̂ N r``, ``u = H_c η + J_c ȳ + N r``; ``J_c = -K T⁻¹ D̂`` is
        the direct path from the measurement to the input.
    closed_loop : ndarray
        The (2n - p) loop in ``(x, η)``.
    closed_loop_charpoly : tuple of sympy.Expr or None
        Its characteristic polynomial, exact.
    factors_as_expected : bool or None
        True when that polynomial equals α_c(s)·α_ro(s) identically.
    closed_loop_poles : ndarray
    poles : tuple of sympy.Expr
        The reduced observer poles; ``pole_rule`` says how they were chosen.
    coefficients : tuple of sympy.Expr
        α_ro(s), ``[1, ..., a_0]``.
    method : str
    comparison : str
        Orders and noise paths against the full-order observer, for the memo.
    checks : tuple of Check
    notes : tuple of str
    """

    measured: int
    order: int
    T: np.ndarray
    T_inverse: np.ndarray
    T_closed_form: sp.Matrix
    A_aa: np.ndarray
    A_ab: np.ndarray
    A_ba: np.ndarray
    A_bb: np.ndarray
    B_a: np.ndarray
    B_b: np.ndarray
    partition_closed_form: dict[str, sp.Matrix] | None
    Ke: np.ndarray
    Ke_closed_form: sp.Matrix | None
    observer_matrix: np.ndarray
    output_input: np.ndarray
    control_input: np.ndarray
    observer_closed_form: dict[str, sp.Matrix] | None
    estimate_from_state: np.ndarray
    estimate_from_output: np.ndarray
    compensator: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]
    closed_loop: np.ndarray
    closed_loop_charpoly: tuple[sp.Expr, ...] | None
    factors_as_expected: bool | None
    closed_loop_poles: np.ndarray
    poles: tuple[sp.Expr, ...]
    pole_rule: str
    coefficients: tuple[sp.Expr, ...]
    method: str
    comparison: str
    checks: tuple[Check, ...]
    notes: tuple[str, ...]

    @property
    def pole_values(self) -> np.ndarray:
        return np.array([complex(p) for p in self.poles])


# --------------------------------------------------------------------------------------------
# The design
# --------------------------------------------------------------------------------------------
def _seconds(design, budget: float | None) -> float | None:
    seconds = design.symbolic_budget_seconds if budget is None else budget
    return None if seconds <= 0 else seconds


def _stage_arguments(design, C, K, observer_poles, controller_coefficients) -> tuple:
    poles, _ = reduced_poles_for(design, observer_poles)
    plant = design.plant
    return (
        sp.Matrix(plant.A),
        sp.Matrix(plant.B),
        sp.Matrix(plant.C),
        coordinate_change(C),
        K,
        cf.desired_coefficients(poles) if poles else (sp.Integer(1),),
        controller_coefficients,
    )


def closed_form_outcome(
    design, C: np.ndarray, observer_poles, controller_coefficients, K: sp.Matrix | None
) -> Outcome:
    """The closed-form stage run here and now, its value or error kept for
    :func:`reduced_observer` (``pending``).

    :func:`symbolic.derive` runs it in its own bounded child right after the closed-form K
    it needs, so that no second child is forked for it.  ``C`` is the numeric output matrix.
    """
    try:
        args = _stage_arguments(design, C, K, observer_poles, controller_coefficients)
        return Outcome(closed_form_stage(*args))
    except GainsmithError as exc:
        return Outcome(error=exc)


def reduced_observer(
    d: Derivation, *, budget: float | None = None, pending: BoundedChild | Outcome | None = None
) -> ReducedObserver:
    """Derive the reduced-order observer of a design, its equations and its closed loop.

    Parameters
    ----------
    d : Derivation
        The basic design (its K, reference gain and observer poles are used).
    budget : float, optional
        Seconds for the closed forms (default: the design's symbolic budget; zero or negative
        runs them in this process without a limit).
    pending : BoundedChild or Outcome, optional
        The closed forms already computed or started for this design with ``d.K``'s closed
        form (:func:`closed_form_outcome`); default: computed here.

    Returns
    -------
    ReducedObserver

    Raises
    ------
    StructureError
        Naming ``plant.C`` when C is not of full row rank at the evaluated values.

    Notes
    -----
    Poles: ``observer.poles`` with n - p entries when given so (``kind = "reduced"``),
    otherwise :func:`~symbolic.derivation.pole_rules.reduced_observer_poles` of the
    full-order observer poles.  One output:
    ``K_e`` in closed form by Ackermann's formula on ``(A_bbᵀ, A_abᵀ)``, cross-checked against
    ``scipy.signal.place_poles``; several outputs: ``place_poles`` only (not unique).

    References
    ----------
    See the module references [1]-[3].

    Examples
    --------
    >>> import symbolic
    >>> design = symbolic.parse_design(b'''
    ... [plant]
    ... A = [[0, 1, 0], [0, 0, 1], [-6, -11, -6]]
    ... B = [[0], [0], [1]]
    ... C = [[1, 0, 0]]
    ... [controller]
    ... poles = ["-2+3.46410161513775j", "-2-3.46410161513775j", "-6"]
    ... [observer]
    ... kind = "reduced"
    ... poles = ["-10", "-10"]
    ... ''')
    >>> ro = reduced_observer(symbolic.derive(design, budget=0), budget=0)
    >>> ro.Ke_closed_form.T     # (s + 10)^2 = s^2 + 20 s + 100
    Matrix([[14, 5]])
    """
    design = d.design
    notes: list[str] = []
    checks: list[Check] = []
    try:
        rows = coordinate_change(d.plant.C)
    except StructureError as exc:
        raise StructureError(exc.problem, design.path, "plant.C") from exc
    poles, rule = reduced_poles_for(design, d.observer_poles.poles)
    requested = np.array([complex(z) for z in poles])
    forms = _closed_forms(d, budget, pending, notes)
    coords = _partition(d, rows, forms, checks)
    gain = _observer_gain(d, coords, forms, requested, checks, notes)
    loop = _closed_loop(d, coords, gain["Ke"], requested, forms, checks, notes)
    return ReducedObserver(
        **coords,
        **gain,
        **loop,
        poles=poles,
        pole_rule=rule,
        coefficients=cf.desired_coefficients(poles) if poles else (sp.Integer(1),),
        checks=tuple(checks),
        notes=tuple(notes),
    )


def _closed_forms(
    d: Derivation, budget: float | None, pending: BoundedChild | Outcome | None, notes: list[str]
) -> ReducedForms | None:
    """The closed forms (started here unless ``pending``), or None past the budget."""
    design = d.design
    if pending is None:
        pending = BoundedChild(
            closed_form_stage,
            _stage_arguments(
                design,
                d.plant.C,
                d.K.closed_form,
                d.observer_poles.poles,
                d.controller_poles.coefficients,
            ),
            seconds=_seconds(design, budget),
            what="the closed form of the reduced-order observer",
        )
    try:
        return pending.result()
    except BudgetExceeded as exc:
        notes.append(f"reduced-order observer: {exc}; numeric results are given instead")
        return None
    except StructureError as exc:
        raise StructureError(exc.problem, design.path, "observer.kind") from exc


def _partition(
    d: Derivation, rows: tuple[int, ...], forms: ReducedForms | None, checks: list[Check]
) -> dict:
    """``T``, ``T⁻¹`` and the partition of ``T A T⁻¹``, ``T B`` (fields of
    :class:`ReducedObserver`), with the check ``C T⁻¹ = [I 0]``."""
    plant = d.design.plant
    A, B, C = d.plant.A, d.plant.B, d.plant.C
    n, p = plant.order, plant.n_outputs
    rest = n - p
    T = np.vstack([C] + [np.eye(n)[j : j + 1] for j in rows])
    Ti = np.linalg.inv(T)
    Ab, Bb = T @ A @ Ti, T @ B
    Aaa, Aab, Aba, Abb = Ab[:p, :p], Ab[:p, p:], Ab[p:, :p], Ab[p:, p:]
    Ba_, Bb_ = Bb[:p, :], Bb[p:, :]
    resid = float(np.max(np.abs(C @ Ti - np.hstack([np.eye(p), np.zeros((p, rest))]))))
    checks.append(
        Check("reduced observer: C T⁻¹ = [I 0] (largest entry error)", resid, 1e-9, resid <= 1e-9)
    )
    return {
        "measured": p,
        "order": rest,
        "T": T,
        "T_inverse": Ti,
        "T_closed_form": forms.T if forms is not None else transform_matrix(plant.C, rows, n),
        "A_aa": Aaa,
        "A_ab": Aab,
        "A_ba": Aba,
        "A_bb": Abb,
        "B_a": Ba_,
        "B_b": Bb_,
        "partition_closed_form": forms.partition if forms is not None else None,
    }


def _observer_gain(
    d: Derivation,
    coords: dict,
    forms: ReducedForms | None,
    requested: np.ndarray,
    checks: list[Check],
    notes: list[str],
) -> dict:
    """``K_e`` placing the reduced observer poles, how it was found, and its checks."""
    design = d.design
    values = design.values
    p = design.plant.n_outputs
    rest = design.plant.order - p
    Aab, Abb = coords["A_ab"], coords["A_bb"]
    closed_Ke = None
    if rest == 0:
        Ke = np.zeros((0, p))
        method = "all states are measured: x̂ = T⁻¹ y, no observer dynamics"
        notes.append(
            "reduced-order observer: every state is measured (p = n); no observer is needed"
        )
    else:
        reference, how = scipy_placement(Abb.T, Aab.T, requested)
        if forms is not None and forms.Ke is not None:
            closed_Ke = forms.Ke
            Ke = evaluate_matrix(closed_Ke, values)
            method = "Ackermann's formula on the dual pair (A_bbᵀ, A_abᵀ), closed form"
        elif p == 1:
            Ke = numeric_ackermann(Abb.T, Aab.T, requested).T
            method = "Ackermann's formula on the dual pair (A_bbᵀ, A_abᵀ), floating point"
        else:
            if reference is None:
                raise StructureError(
                    f"cannot place the reduced observer poles: {how}", design.path, "observer.poles"
                )
            Ke = reference.T
            method = "scipy.signal.place_poles on (A_bbᵀ, A_abᵀ) (several outputs: not unique)"
        if p == 1:
            if reference is not None:
                diff = relative_difference(Ke, reference.T)
                checks.append(
                    Check(
                        "reduced observer: Ke vs scipy.signal.place_poles on the dual pair"
                        " (relative)",
                        diff,
                        GAIN_TOLERANCE,
                        diff <= GAIN_TOLERANCE,
                    )
                )
            else:
                checks.append(
                    Check("reduced observer: Ke vs scipy.signal.place_poles", None, None, None, how)
                )
        checks.append(
            eigenvalue_check(
                "reduced observer: eigenvalues of A_bb − Ke A_ab vs requested poles (relative)",
                Abb - Ke @ Aab,
                requested,
                terms=(Abb, (Ke, Aab)),
                weights=np.abs(Abb) + np.abs(Ke) @ np.abs(Aab),
            )
        )
    return {"Ke": Ke, "Ke_closed_form": closed_Ke, "method": method}


def _closed_loop(
    d: Derivation,
    coords: dict,
    Ke: np.ndarray,
    requested: np.ndarray,
    forms: ReducedForms | None,
    checks: list[Check],
    notes: list[str],
) -> dict:
    """Â, B̂, F̂, the estimate, the compensator and the (2n − p) loop with their closed forms,
    and the comparison with the full-order observer (fields of :class:`ReducedObserver`), with
    the eigenvalue and factorisation checks."""
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    Aaa, Aab, Aba, Abb = coords["A_aa"], coords["A_ab"], coords["A_ba"], coords["A_bb"]
    Ba_, Bb_, Ti = coords["B_a"], coords["B_b"], coords["T_inverse"]
    Ahat, Bhat, Fhat, Chat, Dhat = observer_matrices(Aaa, Aab, Aba, Abb, Ba_, Bb_, Ke)
    est_eta, est_y = Ti @ Chat, Ti @ Dhat
    K = d.K.value
    K_eta, K_y = K @ est_eta, K @ est_y
    Fc = Ahat - Fhat @ K_eta
    Gc = Bhat - Fhat @ K_y
    loop = np.block([[A - B @ K_y @ C, -B @ K_eta], [Bhat @ C - Fhat @ K_y @ C, Fc]])
    loop_poles = np.linalg.eigvals(loop)
    union = np.concatenate([d.controller_poles.values, requested])
    checks.append(
        eigenvalue_check(
            "reduced observer: eigenvalues of the (2n − p) loop vs controller ∪ reduced observer"
            " poles (relative)",
            loop,
            union,
            terms=(A, (B, K_y, C), (B, K_eta), (Bhat, C), (Fhat, K_y, C), Ahat, (Fhat, K_eta)),
            achieved=loop_poles,
        )
    )
    if forms is not None and forms.factors is not None:
        checks.append(
            Check(
                "reduced observer: det(sI − M) of the (2n − p) loop = α_c(s)·α_ro(s)"
                " identically (exact, symbolic)",
                None,
                None,
                bool(forms.factors),
            )
        )
    if np.any(D != 0):
        notes.append(
            "reduced-order observer: D ≠ 0, so the observer is driven by ȳ = y − D u; with"
            " u = H_c η + J_c ȳ + N r the implementation must solve (I + J_c D) u = H_c η +"
            " J_c y + N r for u at each step"
        )
    plant = d.design.plant
    return {
        "observer_matrix": Ahat,
        "output_input": Bhat,
        "control_input": Fhat,
        "observer_closed_form": forms.observer if forms is not None else None,
        "estimate_from_state": est_eta,
        "estimate_from_output": est_y,
        "compensator": (Fc, Gc, -K_eta, -K_y),
        "closed_loop": loop,
        "closed_loop_charpoly": forms.charpoly if forms is not None else None,
        "factors_as_expected": forms.factors if forms is not None else None,
        "closed_loop_poles": loop_poles,
        "comparison": _comparison(plant.order, plant.n_outputs, plant.n_inputs, K_y),
    }


def _comparison(n: int, p: int, m: int, K_y: np.ndarray) -> str:
    direct = float(np.max(np.abs(K_y))) if K_y.size else 0.0
    return (
        f"Orders: the full-order observer has {n} states and the closed loop 2n = {2 * n}; the"
        f" reduced-order observer has n − p = {n - p} and the closed loop 2n − p = {2 * n - p}."
        " Noise: the reduced-order observer takes the measured states straight from the"
        " sensor (x̂_a = ȳ, x̂_b = η + Ke ȳ), so the control law has a direct term"
        f" u = … − K T⁻¹D̂ ȳ (largest entry {direct:.4g}): sensor noise reaches the actuator"
        " unfiltered and undiminished at high frequency.  The full-order observer passes y"
        " only through its own dynamics (its controller u/y is strictly proper and rolls off"
        " at high frequency), at the cost of p more states.  Prefer the reduced-order observer"
        " for clean measurements (encoders), the full-order one for noisy sensors"
        " (common practice, no source)."
    )
