"""The controller that is actually shipped, as one realisation, and the loop it closes.

A design file asks for one controller: a full-order or reduced-order observer, a reference
gain or integral action, in continuous time or sampled at ``[discrete] sample_time``.  Every
verdict of gainsmith (the simulated specifications, the actuator limit, stability over the
parameter ranges, the margins) is computed on *that* controller, written in one layout
(:class:`symbolic.derivation.difference_equations.DifferenceEquations`)

.. math::  u_d = C_c \\xi + D_{cy} y + D_{cr} r,\\qquad u = \\mathrm{sat}(u_d),

.. math::  \\xi^{+} = A_o \\xi + B_{oy} y + B_{ou} u + B_{or} r + B_{aw} (u_d - u),

where ``ξ⁺`` is ``ξ'`` in continuous time and ``ξ[k+1]`` for the digital controller, which
runs at the samples ``t = kT`` and holds ``u`` in between (zero-order hold).  The controller
also forms the estimate ``x̂ = E_ξ ξ + E_y y + E_u u`` (for the estimation error).

The loop of plant and controller, state ``w = [x; ξ]``, is stepped exactly between samples
(matrix exponentials, Van Loan [1]); with an input limit the continuous loop is integrated
with ``solve_ivp`` (see :func:`symbolic.verification.stepping.integrate_saturated`).

Two ways to obtain a controller:

* :func:`shipped_controller` assembles it from a finished :class:`~symbolic.model.results.Derivation`
  (its checked gains: those that are exported and reported);
* :func:`build_controller` computes it numerically for any choice of poles (used to refine the
  poles against the simulated response and for the observer-speed study); at the derivation's
  poles it reproduces :func:`shipped_controller` to rounding (``tests/test_shipped.py``).

Caution: a simulated response is a model result.  Before the controller drives a machine that
moves, heats or flies, test it on the real plant with reduced limits and an independent stop.

References
----------
.. [1] C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE
   Transactions on Automatic Control 23(3):395-404, 1978. doi:10.1109/TAC.1978.1101743
.. [2] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998, Sec. 4.3 and 8.2 -- from memory.
.. [3] D. G. Luenberger, "An introduction to observers", IEEE Transactions on Automatic
   Control 16(6):596-602, 1971. doi:10.1109/TAC.1971.1099826
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..derivation.difference_equations import DifferenceEquations, controller_equations
from ..derivation.extensions_in_z import DiscreteIntegral
from ..derivation.numeric import numeric_ackermann, scipy_placement
from ..derivation.reduced_coordinates import coordinate_change, observer_matrices
from ..derivation.zoh import numeric_zero_order_hold
from ..model.results import Derivation, NumericPlant
from ..runtime.errors import StructureError
from .sampled_data import continuous_equations

if TYPE_CHECKING:  # the simulator loads SciPy: imported where a run needs it
    from .stepping import Response

__all__ = [
    "ShippedController",
    "batch_loop_poles",
    "build_controller",
    "closed_loop",
    "initial_controller_state",
    "shipped_controller",
    "simulate_controller",
    "state_feedback_reference",
    "template_controller",
]

#: A run stops when the stacked state grows past this size (as in :mod:`symbolic.verification.stepping`).
STATE_LIMIT = 1e12
#: Plant steps per sample of the digital controller (inter-sample resolution), at least.
SUBSTEPS = 20
#: Largest number of samples of a digital run.
MAX_DIGITAL_SAMPLES = 200_000


@dataclass(frozen=True, eq=False)
class ShippedController:
    """One controller, as implemented, with the plant model it was designed for.

    Attributes
    ----------
    equations : DifferenceEquations
        The controller (continuous: ``ξ' = …``; digital: ``ξ[k+1] = …``).
    sample_time : float or None
        None for the continuous controller.
    tracking : str
        ``"reference gain"`` or ``"integral action"``.
    observer : str
        ``"full-order observer"``, ``"reduced-order observer"`` or ``"true state"`` (the
        state-feedback reference, which measures every state).
    form : str
        ``"continuous"``, or the digital form (``"current"``, ``"predictor"``, ``"reduced"``).
    plant : NumericPlant
        The continuous plant (A, B, C, D) at the evaluated parameter values.
    controller_poles, observer_poles : ndarray
        s-plane poles the controller was designed to place: state feedback (with the integral
        pole last under integral action) and the observer that is shipped (n − p poles for the
        reduced one, none for the true state).
    initial_from_estimate, initial_from_state : ndarray
        ``ξ_o(0) = P x̂(0) + Q x(0)`` (observer part of ξ; the integrator starts at zero).
    measurement : tuple of ndarray or None
        ``(C_m, D_m)`` of what the controller measures when it is not the plant output
        (``(I, 0)`` for the true-state reference); None: the plant's C, D.
    tracked_index : int
        Row of C of the tracked output.
    """

    equations: DifferenceEquations
    sample_time: float | None
    tracking: str
    observer: str
    form: str
    plant: NumericPlant
    controller_poles: np.ndarray
    observer_poles: np.ndarray
    initial_from_estimate: np.ndarray
    initial_from_state: np.ndarray
    tracked_index: int
    measurement: tuple[np.ndarray, np.ndarray] | None = None

    @property
    def digital(self) -> bool:
        return self.sample_time is not None

    @property
    def description(self) -> str:
        """Plain words, e.g. ``integral action, reduced-order observer, digital (T = 0.05 s)``."""
        words = f"{self.tracking}, {self.observer}"
        if self.digital:
            form = {"current": "current estimator", "predictor": "predictor observer"}.get(
                self.form, "reduced-order form"
            )
            return f"{words}, digital controller at T = {self.sample_time:g} s ({form})"
        return f"{words}, continuous"

    @property
    def requested_poles(self) -> np.ndarray:
        """The closed-loop poles the design asks for: s-plane, or z = e^{sT} when digital."""
        s = np.concatenate([self.controller_poles, self.observer_poles])
        return np.exp(s * self.sample_time) if self.digital else s

    @property
    def sampled_plant(self) -> tuple[np.ndarray, np.ndarray]:
        """(Φ, Γ) of the ZOH model (digital controllers only)."""
        if not self.digital:
            raise ValueError("a continuous controller has no sampled plant")
        return numeric_zero_order_hold(self.plant.A, self.plant.B, float(self.sample_time))

    @property
    def closed_loop_poles(self) -> np.ndarray:
        """Eigenvalues of the loop with the nominal plant (z-plane when digital)."""
        F, _G = closed_loop(self)
        return np.linalg.eigvals(F)

    @property
    def stable(self) -> bool:
        return poles_stable(self.closed_loop_poles, self.digital)


def poles_stable(poles: np.ndarray, digital: bool) -> bool:
    """All poles strictly inside the stability region (relative margin 1e-10)."""
    poles = np.asarray(poles)
    if poles.size == 0:
        return True
    if digital:
        return bool(np.max(np.abs(poles)) < 1.0 - 1e-10)
    scale = max(1.0, float(np.max(np.abs(poles))))
    return bool(np.max(poles.real) < -1e-10 * scale)


# --------------------------------------------------------------------------------------------
# The loop
# --------------------------------------------------------------------------------------------
def _measured(ctrl: ShippedController, C: np.ndarray, D: np.ndarray):
    if ctrl.measurement is not None:
        return ctrl.measurement
    return C, D


def closed_loop(
    ctrl: ShippedController,
    A: np.ndarray | None = None,
    B: np.ndarray | None = None,
    C: np.ndarray | None = None,
    D: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """``(F, G)`` of the linear loop ``w⁺ = F w + G r``, state ``[x; ξ]``.

    With A, B, C, D of another (true) plant the controller is kept and the plant replaced:
    the loop of a plant that differs from the model.  Digital: A, B are the plant's continuous
    matrices, sampled here with the controller's sample time.  Leading batch dimensions of
    A, B, C, D (the same for all four) give a batch of loops.
    """
    p = ctrl.plant
    A = p.A if A is None else np.asarray(A, dtype=float)
    B = p.B if B is None else np.asarray(B, dtype=float)
    C = p.C if C is None else np.asarray(C, dtype=float)
    D = p.D if D is None else np.asarray(D, dtype=float)
    if ctrl.digital:
        A, B = _batch_zoh(A, B, float(ctrl.sample_time))
    Cm, Dm = _measured(ctrl, C, D)
    return _interconnect(ctrl.equations, A, B, Cm, Dm)


def _batch_zoh(A: np.ndarray, B: np.ndarray, T: float) -> tuple[np.ndarray, np.ndarray]:
    if A.ndim == 2:
        return numeric_zero_order_hold(A, B, T)
    import scipy.linalg  # the verdict's loops; derive never comes here

    n, m = A.shape[-1], B.shape[-1]
    M = np.zeros(A.shape[:-2] + (n + m, n + m))
    M[..., :n, :n] = A * T
    M[..., :n, n:] = B * T
    E = scipy.linalg.expm(M)
    return E[..., :n, :n], E[..., :n, n:]


def _interconnect(eq: DifferenceEquations, A, B, C, D) -> tuple[np.ndarray, np.ndarray]:
    """The loop matrices for (possibly batched) plant matrices; see ``loop_matrices``."""
    m = B.shape[-1]
    Dcy = eq.output_measurement
    Mi = np.linalg.inv(np.eye(m) - Dcy @ D)
    Ux = Mi @ Dcy @ C
    Uxi = Mi @ eq.output_state
    Ur = Mi @ eq.output_reference
    Bxi = eq.measurement_matrix @ D + eq.control_matrix
    top = np.concatenate([A + B @ Ux, B @ Uxi], axis=-1)
    bottom = np.concatenate(
        [eq.measurement_matrix @ C + Bxi @ Ux, eq.state_matrix + Bxi @ Uxi], axis=-1
    )
    F = np.concatenate([top, bottom], axis=-2)
    Gxi = Bxi @ Ur
    if eq.reference_input is not None:
        Gxi = Gxi + eq.reference_input
    G = np.concatenate([B @ Ur, Gxi], axis=-2)
    return F, G


def batch_loop_poles(ctrl: ShippedController, A, B, C, D) -> np.ndarray:
    """Eigenvalues of the loop for a batch of true plants, shape (P, n + n_ξ)."""
    F, _G = closed_loop(ctrl, A, B, C, D)
    return np.linalg.eigvals(F)


def initial_controller_state(
    ctrl: ShippedController, x0: np.ndarray, xhat0: np.ndarray | None = None
) -> np.ndarray:
    """ξ(0) for a plant at ``x0`` and an initial estimate ``xhat0`` (default: matched).

    A reduced-order observer takes the measured part of the estimate from the measurement
    itself, so only the unmeasured part of ``xhat0`` matters.  The integrator starts at zero.
    """
    x0 = np.asarray(x0, dtype=float)
    xhat0 = x0 if xhat0 is None else np.asarray(xhat0, dtype=float)
    xi = ctrl.initial_from_estimate @ xhat0 + ctrl.initial_from_state @ x0
    if ctrl.equations.integrator_index is not None:
        xi = np.append(xi, 0.0)
    return xi


# --------------------------------------------------------------------------------------------
# Simulation
# --------------------------------------------------------------------------------------------
def simulate_controller(
    ctrl: ShippedController,
    *,
    reference: float = 1.0,
    x0: Sequence[float] | np.ndarray | None = None,
    xhat0: Sequence[float] | np.ndarray | None = None,
    horizon: float,
    samples: int = 2001,
    u_max: float | None = None,
    name: str = "",
    slug: str = "",
) -> Response:
    """Step response of the loop of this controller on its plant model.

    Parameters
    ----------
    ctrl : ShippedController
    reference : float
        Height of the reference step at t = 0.
    x0, xhat0 : array_like, optional
        Initial plant state (default zero) and initial estimate (default: ``x0``, matched).
    horizon : float
        Simulated time, seconds.
    samples : int
        Grid points of a continuous run (a digital run has ``SUBSTEPS`` or more points per
        sample, about ``samples`` in all).
    u_max : float, optional
        Input limit ``|u| <= u_max`` (with the anti-windup of integral action).

    Returns
    -------
    Response
        ``estimate`` is the controller's ``x̂``; ``control`` the applied input.

    Notes
    -----
    With a limit and a plant feedthrough D, the demanded input is computed from the
    measurement the unlimited input would give (exact when D = 0, as in every worked design).
    """
    n = ctrl.plant.A.shape[0]
    x0v = np.zeros(n) if x0 is None else np.asarray(x0, dtype=float).reshape(n)
    xi0 = initial_controller_state(ctrl, x0v, None if xhat0 is None else np.asarray(xhat0))
    r = float(reference)
    limit = None if u_max is None else np.full(ctrl.plant.B.shape[1], float(u_max))
    if ctrl.digital:
        return _simulate_digital(ctrl, r, x0v, xi0, horizon, samples, limit, name, slug)
    return _simulate_continuous(ctrl, r, x0v, xi0, horizon, samples, limit, name, slug)


def _control_map(ctrl: ShippedController):
    """u_d = Ku w + Nr r for the stacked state w = [x; ξ] (D solved once)."""
    eq = ctrl.equations
    C, D = _measured(ctrl, ctrl.plant.C, ctrl.plant.D)
    m = ctrl.plant.B.shape[1]
    Mi = np.linalg.inv(np.eye(m) - eq.output_measurement @ D)
    Ku = Mi @ np.hstack([eq.output_measurement @ C, eq.output_state])
    return Ku, (Mi @ eq.output_reference)[:, 0]


def _estimate(ctrl: ShippedController, xi: np.ndarray, ymeas: np.ndarray, u: np.ndarray):
    eq = ctrl.equations
    if eq.estimate_state is None:
        return None
    return xi @ eq.estimate_state.T + ymeas @ eq.estimate_measurement.T + u @ eq.estimate_control.T


def _final_value(ctrl: ShippedController, F, G, r, Ku, Nr, limit) -> tuple[float | None, str]:
    """Exact steady state of the tracked output, or None (unstable, or beyond the limit)."""
    poles = np.linalg.eigvals(F)
    if not poles_stable(poles, ctrl.digital):
        return None, ""
    size = F.shape[0]
    lhs = np.eye(size) - F if ctrl.digital else -F
    w = np.linalg.solve(lhs, G[:, 0] * r)
    u = Ku @ w + Nr * r
    if limit is not None and np.any(np.abs(u) > limit * (1 + 1e-12)):
        return None, (
            "holding the reference needs |u| = "
            + ", ".join(f"{abs(v):.4g}" for v in u)
            + " beyond the limit; no final value"
        )
    n = ctrl.plant.A.shape[0]
    y = ctrl.plant.C @ w[:n] + ctrl.plant.D @ u
    return float(y[ctrl.tracked_index]), ""


def _response(ctrl, name, slug, time, W, U, r, limit, final, stable, method, stopped, notes):
    from .stepping import Response

    n = ctrl.plant.A.shape[0]
    X, XI = W[:, :n], W[:, n:]
    Y = X @ ctrl.plant.C.T + U @ ctrl.plant.D.T
    Cm, Dm = _measured(ctrl, ctrl.plant.C, ctrl.plant.D)
    est = _estimate(ctrl, XI, X @ Cm.T + U @ Dm.T, U)
    err = None if est is None else np.linalg.norm(X - est, axis=1)
    return Response(
        name=name,
        slug=slug,
        time=time,
        output=Y,
        tracked_output=Y[:, ctrl.tracked_index],
        control=U,
        state=X,
        estimate=est,
        estimation_error_norm=err,
        saturated=limit is not None,
        reference=r,
        stable=stable,
        final_value=final,
        horizon=float(time[-1]) if time.size else 0.0,
        method=method,
        stopped_early=stopped,
        u_max=limit,
        notes=tuple(notes),
    )


def _simulate_continuous(ctrl, r, x0, xi0, horizon, samples, limit, name, slug) -> Response:
    eq = ctrl.equations
    F, G = closed_loop(ctrl)
    Ku, Nr = _control_map(ctrl)
    time = np.linspace(0.0, float(horizon), int(samples))
    w0 = np.concatenate([x0, xi0])
    notes: list[str] = []
    from .stepping import integrate_saturated, step_linear

    if limit is None:
        W, stopped = step_linear(F, G[:, 0], r, w0, time)
        method = (
            "exact zero-order-hold stepping of the linear loop of plant and controller"
            " (one matrix exponential, Van Loan 1978)"
        )
        note = ""
    else:
        A, B = ctrl.plant.A, ctrl.plant.B
        Cm, Dm = _measured(ctrl, ctrl.plant.C, ctrl.plant.D)
        n, nxi = A.shape[0], eq.state_matrix.shape[0]
        F0 = np.block([[A, np.zeros((n, nxi))], [eq.measurement_matrix @ Cm, eq.state_matrix]])
        Bz = np.vstack([B, eq.measurement_matrix @ Dm + eq.control_matrix])
        drive = np.concatenate(
            [
                np.zeros(n),
                np.zeros(nxi) if eq.reference_input is None else eq.reference_input[:, 0] * r,
            ]
        )
        if eq.anti_windup is not None:
            Baw = np.vstack([np.zeros((n, Bz.shape[1])), eq.anti_windup])
            F0, Bz, drive = F0 + Baw @ Ku, Bz - Baw, drive + Baw @ (Nr * r)
        W, stopped, note = integrate_saturated(F0, Bz, Ku, Nr * r, drive, w0, time, limit, r)
        method = (
            "scipy.integrate.solve_ivp (LSODA) of the loop with the input limited to ±u_max"
            + (" and back-calculation anti-windup" if eq.anti_windup is not None else "")
        )
    if note:
        notes.append(note)
    time = time[: W.shape[0]]
    U = W @ Ku.T + Nr * r
    if limit is not None:
        U = np.clip(U, -limit, limit)
    final, why = _final_value(ctrl, F, G, r, Ku, Nr, limit)
    if why:
        notes.append(why)
    stable = poles_stable(np.linalg.eigvals(F), False)
    if stopped and not note:
        notes.append(f"the run stopped at t = {time[-1]:.4g} because the state passed 1e12")
    return _response(ctrl, name, slug, time, W, U, r, limit, final, stable, method, stopped, notes)


def _simulate_digital(ctrl, r, x0, xi0, horizon, samples, limit, name, slug) -> Response:
    eq = ctrl.equations
    T = float(ctrl.sample_time)
    A, B = ctrl.plant.A, ctrl.plant.B
    Cm, Dm = _measured(ctrl, ctrl.plant.C, ctrl.plant.D)
    count = min(MAX_DIGITAL_SAMPLES, max(2, int(math.ceil(float(horizon) / T - 1e-9))))
    substeps = max(SUBSTEPS, int(math.ceil(samples / count)))
    h = T / substeps
    Ph, Gh = numeric_zero_order_hold(A, B, h)
    Ku, Nr = _control_map(ctrl)
    n = A.shape[0]
    x, xi = x0.copy(), xi0.copy()
    rows_w, rows_u = [], []
    stopped = False
    for _k in range(count):
        ud = Ku @ np.concatenate([x, xi]) + Nr * r
        u = ud if limit is None else np.clip(ud, -limit, limit)
        y = Cm @ x + Dm @ u
        for _j in range(substeps):
            rows_w.append(np.concatenate([x, xi]))
            rows_u.append(u)
            x = Ph @ x + Gh @ u
        nxt = eq.state_matrix @ xi + eq.measurement_matrix @ y + eq.control_matrix @ u
        if eq.reference_input is not None:
            nxt = nxt + eq.reference_input[:, 0] * r
        if eq.anti_windup is not None and limit is not None:
            nxt = nxt + eq.anti_windup @ (ud - u)
        xi = nxt
        if not (np.all(np.abs(x) < STATE_LIMIT) and np.all(np.abs(xi) < STATE_LIMIT)):
            stopped = True
            break
    rows_w.append(np.concatenate([x, xi]))
    rows_u.append(rows_u[-1])
    W = np.array(rows_w)
    U = np.array(rows_u).reshape(W.shape[0], B.shape[1])
    time = np.arange(W.shape[0]) * h
    # the estimate is formed at the samples; between them it is held (as the controller does)
    held = W.copy()
    held[:, n:] = W[(np.arange(W.shape[0]) // substeps) * substeps, n:]
    F, G = closed_loop(ctrl)
    final, why = _final_value(ctrl, F, G, r, Ku, Nr, limit)
    notes = [why] if why else []
    if stopped:
        notes.append(f"the sampled-data loop diverged at t = {time[-1]:.4g}; run stopped")
    method = (
        f"digital controller at T = {T:g} s on the continuous plant, stepped exactly with the held"
        f" input ({substeps} plant steps per sample)"
        + (", input limited to ±u_max" if limit is not None else "")
    )
    stable = poles_stable(np.linalg.eigvals(F), True)
    resp = _response(
        ctrl, name, slug, time, held, U, r, limit, final, stable, method, stopped, notes
    )
    # plant states and outputs are the fine-grid ones, not the held ones
    Y = W[:, :n] @ ctrl.plant.C.T + U @ ctrl.plant.D.T
    return dataclasses.replace(
        resp, state=W[:, :n], output=Y, tracked_output=Y[:, ctrl.tracked_index]
    )


# --------------------------------------------------------------------------------------------
# From a derivation
# --------------------------------------------------------------------------------------------
def _initial_maps(n: int, reduced) -> tuple[np.ndarray, np.ndarray]:
    """(P, Q) with ξ_o(0) = P x̂(0) + Q x(0)."""
    if reduced is None:
        return np.eye(n), np.zeros((n, n))
    T, gain = reduced.T, reduced.Ke if hasattr(reduced, "Ke") else reduced.L
    p = gain.shape[1]
    return T[p:, :], -gain @ T[:p, :]


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
        P, Q = _initial_maps(n, dc.reduced if form == "reduced" else None)
        return ShippedController(
            eq, dc.sample_time, tracking, observer, form, plant, ctrl_poles, obs_poles, P, Q, idx
        )
    form = "reduced" if reduced_kind and d.reduced_observer is not None else "predictor"
    eq = continuous_equations(d, form)
    P, Q = _initial_maps(n, d.reduced_observer if form == "reduced" else None)
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
    P, Q = _initial_maps(n, reduced)
    return dataclasses.replace(
        template,
        equations=eq,
        controller_poles=sc,
        observer_poles=so,
        initial_from_estimate=P,
        initial_from_state=Q,
    )
