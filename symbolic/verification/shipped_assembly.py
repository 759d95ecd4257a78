"""Assembling the shipped controller: from a finished derivation, or numerically for any poles.

Two ways to obtain a :class:`~symbolic.verification.shipped.ShippedController`:

* :func:`shipped_controller` assembles it from a finished :class:`~symbolic.model.results.Derivation`
  (its checked gains: those that are exported and reported);
* :func:`build_controller` computes it numerically for any choice of poles (used to refine the
  poles against the simulated response and for the observer-speed study); at the derivation's
  poles it reproduces :func:`shipped_controller` to rounding (``tests/test_shipped.py``).

:func:`template_controller` gives the record :func:`build_controller` starts from before any
derivation exists, and :func:`state_feedback_reference` the same state feedback on the true
state (the reference case of the separation principle, Luenberger [2]).  Digital controllers
place z-plane poles ``z = e^{sT}`` on the zero-order-hold model (Franklin, Powell and
Workman [1]).

References
----------
.. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998, Sec. 4.3 and 8.2 -- from memory.
.. [2] D. G. Luenberger, "An introduction to observers", IEEE Transactions on Automatic
   Control 16(6):596-602, 1971. doi:10.1109/TAC.1971.1099826
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..derivation.difference_equations import DifferenceEquations, controller_equations
from ..derivation.extensions_in_z import DiscreteIntegral
from ..derivation.numeric import numeric_ackermann, scipy_placement
from ..derivation.reduced_coordinates import coordinate_change, observer_matrices
from ..derivation.zoh import numeric_zero_order_hold
from ..model.results import Derivation, NumericPlant
from ..runtime.errors import StructureError
from .sampled_data import continuous_equations
from .shipped import ShippedController, initial_maps

__all__ = [
    "build_controller",
    "shipped_controller",
    "state_feedback_reference",
    "template_controller",
]


# --------------------------------------------------------------------------------------------
# From a derivation
# --------------------------------------------------------------------------------------------
def shipped_controller(d: Derivation) -> ShippedController:
    """The controller the design file asks for, from the derivation's checked gains."""
    design = d.design
    plant = d.plant
    n = plant.A.shape[0]
    integral = d.integral
    reduced_kind = design.observer.kind == "reduced"
    tracking = "integral action" if integral is not None else "reference gain"
    observer = "reduced-order observer" if reduced_kind else "full-order observer"
    ctrl_poles = d.controller_poles.values
    if integral is not None:
        ctrl_poles = np.append(ctrl_poles, complex(integral.integral_pole))
    obs_poles = (
        d.reduced_observer.pole_values
        if reduced_kind and d.reduced_observer is not None
        else d.observer_poles.values
    )
    idx = d.reference.tracked_index if d.reference is not None else design.tracking.output
    if d.discrete is not None:
        dc = d.discrete
        form = dc.default_form
        eq = dc.equations[form]
        P, Q = initial_maps(n, dc.reduced if form == "reduced" else None)
        return ShippedController(
            eq, dc.sample_time, tracking, observer, form, plant, ctrl_poles, obs_poles, P, Q, idx
        )
    form = "reduced" if reduced_kind and d.reduced_observer is not None else "predictor"
    eq = continuous_equations(d, form)
    P, Q = initial_maps(n, d.reduced_observer if form == "reduced" else None)
    return ShippedController(
        eq, None, tracking, observer, "continuous", plant, ctrl_poles, obs_poles, P, Q, idx
    )


def template_controller(design, plant: NumericPlant) -> ShippedController:
    """A controller record of the kind ``design`` asks for, without gains: the template of
    :func:`build_controller` before any derivation exists (pole refinement)."""
    n, m = plant.B.shape
    reduced = design.observer.kind == "reduced"
    digital = design.discrete is not None
    empty = DifferenceEquations(
        form="",
        state_matrix=np.zeros((0, 0)),
        measurement_matrix=np.zeros((0, plant.C.shape[0])),
        control_matrix=np.zeros((0, m)),
        output_state=np.zeros((m, 0)),
        output_measurement=np.zeros((m, plant.C.shape[0])),
        output_reference=np.zeros((m, 1)),
        sample_time=0.0,
        description="",
    )
    return ShippedController(
        equations=empty,
        sample_time=float(design.discrete.sample_time) if digital else None,
        tracking="integral action" if design.tracking.method == "integral" else "reference gain",
        observer="reduced-order observer" if reduced else "full-order observer",
        form=("reduced" if reduced else "current") if digital else "continuous",
        plant=plant,
        controller_poles=np.zeros(0, dtype=complex),
        observer_poles=np.zeros(0, dtype=complex),
        initial_from_estimate=np.zeros((0, n)),
        initial_from_state=np.zeros((0, n)),
        tracked_index=int(design.tracking.output),
    )


def state_feedback_reference(ctrl: ShippedController) -> ShippedController:
    """The same state feedback and tracking on the *true* state, continuous: the reference case
    of the separation principle (no observer, no sampling).

    Needs the gains of the continuous design, so it is built by :func:`build_controller`'s
    pieces from the controller poles of ``ctrl``.
    """
    p = ctrl.plant
    n, m = p.B.shape
    integral = ctrl.tracking == "integral action"
    gains = _continuous_state_feedback(p, ctrl.controller_poles, integral, ctrl.tracked_index)
    eye = np.eye(n)
    eq = controller_equations(
        "predictor",
        p.A,
        p.B,
        eye,
        np.zeros((n, m)),
        gains.K,
        np.zeros((n, n)),
        None,
        gains.N,
        1.0,
        integral=gains.integral,
        tracked=ctrl.tracked_index,
    )
    # ξ holds no estimate: x̂ = y = x.  Remove the observer states, keep the integrator.
    keep = [eq.integrator_index] if eq.integrator_index is not None else []
    if integral:
        # the integrator integrates the tracked output C_t x, not x_t: its row uses C_t
        Ct = p.C[ctrl.tracked_index : ctrl.tracked_index + 1, :]
        By = Ct.copy()
    else:
        By = np.zeros((0, n))
    Ao = eq.state_matrix[np.ix_(keep, keep)]
    Ao[...] = 0.0
    Cc = eq.output_state[:, keep]
    eq2 = DifferenceEquations(
        form="state",
        state_matrix=Ao,
        measurement_matrix=By,
        control_matrix=np.zeros((len(keep), m)),
        output_state=Cc,
        output_measurement=-gains.K,
        output_reference=eq.output_reference,
        sample_time=0.0,
        description="state feedback on the true state",
        reference_input=None if not integral else -np.ones((1, 1)),
        anti_windup=None if eq.anti_windup is None else eq.anti_windup[keep, :],
        integrator_index=0 if integral else None,
        state_names=("x_I",) if integral else (),
    )
    return ShippedController(
        eq2,
        None,
        ctrl.tracking,
        "true state",
        "continuous",
        p,
        ctrl.controller_poles,
        np.zeros(0, dtype=complex),
        np.zeros((0, n)),
        np.zeros((0, n)),
        ctrl.tracked_index,
        measurement=(eye, np.zeros((n, m))),
    )


# --------------------------------------------------------------------------------------------
# Numerically, for any poles
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _StateFeedback:
    K: np.ndarray
    N: np.ndarray
    integral: DiscreteIntegral | None


def _placement(M: np.ndarray, G: np.ndarray, poles, what: str) -> np.ndarray:
    if G.shape[1] == 1:
        return numeric_ackermann(M, G, poles)
    gain, how = scipy_placement(M, G, poles)
    if gain is None:
        raise StructureError(f"cannot place the {what} poles: {how}")
    return gain


def _reference_value(Mdc: np.ndarray, m: int) -> np.ndarray:
    if np.all(np.isfinite(Mdc)) and np.linalg.norm(Mdc) > 1e-12:
        return Mdc.T / (Mdc @ Mdc.T).item()
    return np.zeros((m, 1))


def _integral_gains(M, G, Ct, Dt, poles, pole_i, T) -> DiscreteIntegral:
    """[K, k_i] on the augmented pair: continuous (T None) or the running sum in z."""
    n, m = G.shape
    if T is None:
        Ma = np.block([[M, np.zeros((n, 1))], [Ct, np.zeros((1, 1))]])
        Ga = np.vstack([G, Dt])
        targets = np.asarray(poles, dtype=complex)
    else:
        Ma = np.block([[M, np.zeros((n, 1))], [T * Ct, np.ones((1, 1))]])
        Ga = np.vstack([G, T * Dt])
        targets = np.exp(np.asarray(poles, dtype=complex) * T)
    Ka = _placement(Ma, Ga, targets, "integral-action")
    ki = Ka[:, n:]
    tracking = 1.0 / abs(complex(pole_i))
    return DiscreteIntegral(
        Phi_augmented=Ma,
        Gamma_augmented=Ga,
        K=Ka[:, :n],
        integral_gain=ki,
        K_augmented=Ka,
        integral_pole=complex(pole_i),
        integral_pole_z=complex(np.exp(pole_i * T)) if T is not None else complex(pole_i),
        pole_rule="",
        tracking_time=tracking,
        back_calculation=np.linalg.pinv(ki) / tracking,
        method="",
    )


def _continuous_state_feedback(p: NumericPlant, poles, integral: bool, idx: int) -> _StateFeedback:
    A, B, C, D = p.A, p.B, p.C, p.D
    m = B.shape[1]
    Ct, Dt = C[idx : idx + 1, :], D[idx : idx + 1, :]
    if integral:
        gains = _integral_gains(A, B, Ct, Dt, poles, poles[-1], None)
        return _StateFeedback(gains.K, np.zeros((m, 1)), gains)
    K = _placement(A, B, poles, "controller")
    try:
        Mdc = (Ct - Dt @ K) @ np.linalg.solve(-(A - B @ K), B) + Dt
    except np.linalg.LinAlgError:
        Mdc = np.full((1, m), np.nan)
    return _StateFeedback(K, _reference_value(Mdc, m), None)


@dataclass(frozen=True)
class _ReducedMaps:
    """The numeric pieces of a reduced-order observer (continuous or in z)."""

    T: np.ndarray
    L: np.ndarray
    observer_matrix: np.ndarray
    output_input: np.ndarray
    control_input: np.ndarray
    estimate_from_state: np.ndarray
    estimate_from_output: np.ndarray


def _reduced_maps(M: np.ndarray, G: np.ndarray, C: np.ndarray, targets) -> _ReducedMaps:
    p, n = C.shape
    rows = coordinate_change(C)
    T = np.vstack([C] + [np.eye(n)[j : j + 1, :] for j in rows])
    Ti = np.linalg.inv(T)
    Mb, Gb = T @ M @ Ti, T @ G
    Aaa, Aab, Aba, Abb = Mb[:p, :p], Mb[:p, p:], Mb[p:, :p], Mb[p:, p:]
    gain = _placement(Abb.T, Aab.T, targets, "reduced observer").T
    Ahat, Bhat, Fhat, Chat, Dhat = observer_matrices(Aaa, Aab, Aba, Abb, Gb[:p], Gb[p:], gain)
    return _ReducedMaps(T, gain, Ahat, Bhat, Fhat, Ti @ Chat, Ti @ Dhat)


def build_controller(
    template: ShippedController,
    controller_poles: Sequence[complex],
    observer_poles: Sequence[complex],
) -> ShippedController:
    """A controller of the same kind as ``template`` placing other poles, numerically.

    Parameters
    ----------
    template : ShippedController
        Gives the plant, the tracking, the observer kind, the sample time and the form.
    controller_poles : sequence of complex
        s-plane state-feedback poles (n of them; n + 1 with integral action, the integral
        pole last).
    observer_poles : sequence of complex
        s-plane poles of the observer of the template's kind (n, or n − p for the reduced one).

    Raises
    ------
    StructureError
        When the poles cannot be placed (several inputs or outputs and ``place_poles`` fails).
    """
    p = template.plant
    A, B, C, D = p.A, p.B, p.C, p.D
    n, m = B.shape
    idx = template.tracked_index
    Ct, Dt = C[idx : idx + 1, :], D[idx : idx + 1, :]
    sc = np.asarray(controller_poles, dtype=complex)
    so = np.asarray(observer_poles, dtype=complex)
    integral_asked = template.tracking == "integral action"
    reduced_asked = template.observer == "reduced-order observer"
    T = template.sample_time
    if T is None:
        M, G, targets_c, targets_o, Tn = A, B, sc, so, 1.0
    else:
        M, G = numeric_zero_order_hold(A, B, T)
        targets_c, targets_o, Tn = np.exp(sc * T), np.exp(so * T), T
    integral = None
    Lp = Lc = np.zeros((n, C.shape[0]))
    reduced = None
    if integral_asked:
        integral = _integral_gains(M, G, Ct, Dt, sc, sc[-1], T)
        K, N = integral.K, np.zeros((m, 1))
    else:
        K = _placement(M, G, targets_c, "controller")
        lhs = np.eye(n) - M + G @ K if T is not None else -(M - G @ K)
        try:
            Mdc = (Ct - Dt @ K) @ np.linalg.solve(lhs, G) + Dt
        except np.linalg.LinAlgError:
            Mdc = np.full((1, m), np.nan)
        N = _reference_value(Mdc, m)
    if reduced_asked:
        reduced = _reduced_maps(M, G, C, targets_o)
        form = "reduced"
    else:
        Lp = _placement(M.T, C.T, targets_o, "observer").T
        Lc = np.linalg.solve(M, Lp) if T is not None else Lp
        form = template.form if T is not None else "predictor"
    eq = controller_equations(
        form, M, G, C, D, K, Lp, Lc, N, Tn, reduced=reduced, integral=integral, tracked=idx
    )
    if T is None:
        if eq.integrator_index is not None:
            Ao = eq.state_matrix.copy()
            Ao[eq.integrator_index, eq.integrator_index] = 0.0
            eq = dataclasses.replace(eq, state_matrix=Ao)
        eq = dataclasses.replace(eq, sample_time=0.0)
    P, Q = initial_maps(n, reduced)
    return dataclasses.replace(
        template,
        equations=eq,
        controller_poles=sc,
        observer_poles=so,
        initial_from_estimate=P,
        initial_from_state=Q,
    )
