"""The shipped loop's response to a step disturbance added to the plant input.

The loop of :func:`symbolic.verification.shipped.closed_loop` (state ``w = [x; ξ]``) with a
constant ``d`` added to the plant input: ``x⁺ = A x + B (u + d)``, the measurement
``y = C x + D (u + d)`` and the controller ``u = C_c ξ + D_cy y``, ``ξ⁺ = A_o ξ + B_oy y +
B_ou u`` (the reference set to zero: by superposition the response adds to that of any
reference).  Its transfer functions are ``y = G S_u d`` and ``u = −T_u d``
(:mod:`symbolic.analysis.loop_shapes`); the steady state comes from the loop's DC gain, so it
is exact: zero error with integral action, ``G(0) S(0) d`` with a reference gain.

Caution: a simulated response is a model result.  Before the controller drives a machine
that moves, heats or flies, test it on the real plant with reduced limits and an independent
stop.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..derivation.zoh import numeric_zero_order_hold
from ..verification.shipped import ShippedController, closed_loop
from .loop_shapes import plant_realisation

__all__ = [
    "DISTURBANCE_FRACTION",
    "DisturbanceResponse",
    "disturbance_loop",
    "disturbance_response",
    "disturbance_size",
]

#: Size of the step input disturbance, as a fraction of the largest input the shipped loop
#: uses for the reference step alone (common practice, no source; the integral-action study
#: of :mod:`symbolic.derivation.integral_study` uses the same fraction).
DISTURBANCE_FRACTION = 0.2
#: Inter-sample points per sample period of a digital disturbance response.
SUBSTEPS = 20


@dataclass(frozen=True)
class DisturbanceResponse:
    """The shipped loop at rest (r = 0) after a step ``size`` added to the plant input at t = 0.

    ``output`` is the tracked output (its deviation from the reference, by superposition the
    error added to any reference response), ``control`` the controller's input demand.
    """

    size: float
    rule: str
    time: np.ndarray
    output: np.ndarray
    control: np.ndarray
    peak_deviation: float  # signed value of the tracked output of largest magnitude
    peak_time: float
    settling_time: float | None  # None: not settled within the horizon
    settling_band: float
    steady_output: float | None  # the steady-state error; None: the loop is unstable
    steady_control: float | None
    stable: bool
    digital: bool


def disturbance_loop(ctrl: ShippedController):
    """``(F, H, Y, U)`` of the loop with a disturbance ``d`` added to the plant input:
    ``w⁺ = F w + H d``, tracked output ``Y @ [w; d]``, controller demand ``U @ [w; d]``.

    F is :func:`symbolic.verification.shipped.closed_loop`'s; state ``w = [x; ξ]``.
    """
    F, _G = closed_loop(ctrl)
    A, B, Cm, Dm = plant_realisation(ctrl)
    eq = ctrl.equations
    Dcy = eq.output_measurement
    m = B.shape[1]
    Mi = np.linalg.inv(np.eye(m) - Dcy @ Dm)
    # u = Mi (D_cy C_m x + C_c ξ + D_cy D_m d)
    U = Mi @ np.hstack([Dcy @ Cm, eq.output_state, Dcy @ Dm])
    Ud = U[:, -1:]
    Bxi = eq.measurement_matrix @ Dm + eq.control_matrix
    H = np.vstack([B @ (Ud + np.eye(m)), eq.measurement_matrix @ Dm + Bxi @ Ud])
    k = ctrl.tracked_index
    Ct, Dt = ctrl.plant.C[k : k + 1], ctrl.plant.D[k : k + 1]
    n = A.shape[0]
    Y = np.hstack([Ct, np.zeros((1, F.shape[0] - n)), np.zeros((1, 1))]) + Dt @ (
        U + np.hstack([np.zeros((m, F.shape[0])), np.eye(m)])
    )
    return F, H, Y, U


def disturbance_size(reference_peak_input: float) -> tuple[float, str]:
    """The step's size (:data:`DISTURBANCE_FRACTION` of the reference step's peak input) and the
    sentence that says so."""
    peak = abs(float(reference_peak_input))
    size = DISTURBANCE_FRACTION * peak if peak > 0 else DISTURBANCE_FRACTION
    rule = (
        f"{DISTURBANCE_FRACTION:g} times the largest input the shipped loop uses for the"
        " reference step (matched estimate, no input limit; common practice, no source)"
        if peak > 0
        else f"{DISTURBANCE_FRACTION:g} (the reference step uses no input; common practice,"
        " no source)"
    )
    return size, rule


def disturbance_response(
    ctrl: ShippedController,
    size: float,
    *,
    horizon: float,
    samples: int = 2001,
    settling_band: float = 0.02,
    rule: str = "",
) -> DisturbanceResponse:
    """Response of the shipped loop at rest to a step ``size`` added to the plant input at t = 0.

    Continuous: exact stepping of the loop (ZOH of a constant input is exact).  Digital: the
    controller at the samples and the plant between them, with the input held.  The settling
    time is the last time the tracked output is farther than ``settling_band`` times its
    largest deviation from its final value (common practice, no source).
    """
    F, H, Y, U = disturbance_loop(ctrl)
    nw = F.shape[0]
    if ctrl.digital:
        t, W, held = _digital_run(ctrl, F, H, U, size, horizon)
        Wd = np.hstack([W, np.full((W.shape[0], 1), size)])
        y = Wd @ Y[0]
        u = held
        stable = bool(np.max(np.abs(np.linalg.eigvals(F))) < 1.0 - 1e-10)
        w_ss = np.linalg.solve(np.eye(nw) - F, H[:, 0] * size) if stable else None
    else:
        t = np.linspace(0.0, horizon, samples)
        Fd, Hd = numeric_zero_order_hold(F, H, float(t[1] - t[0]))
        W = np.empty((t.size, nw))
        w = np.zeros(nw)
        for i in range(t.size):
            W[i] = w
            w = Fd @ w + Hd[:, 0] * size
        Wd = np.hstack([W, np.full((t.size, 1), size)])
        y, u = Wd @ Y[0], Wd @ U[0]
        eig = np.linalg.eigvals(F)
        stable = bool(np.max(eig.real) < -1e-10 * max(1.0, float(np.max(np.abs(eig)))))
        w_ss = -np.linalg.solve(F, H[:, 0] * size) if stable else None
    y_ss = u_ss = None
    if w_ss is not None:
        full = np.append(w_ss, size)
        y_ss, u_ss = float(full @ Y[0]), float(full @ U[0])
    i = int(np.argmax(np.abs(y)))
    return DisturbanceResponse(
        size=float(size),
        rule=rule,
        time=t,
        output=y,
        control=u,
        peak_deviation=float(y[i]),
        peak_time=float(t[i]),
        settling_time=_settling(t, y, y_ss, settling_band),
        settling_band=float(settling_band),
        steady_output=y_ss,
        steady_control=u_ss,
        stable=stable,
        digital=ctrl.digital,
    )


def _digital_run(ctrl: ShippedController, F, H, U, size: float, horizon: float):
    """Times, loop state between samples (plant part exact, controller held) and held input."""
    T = float(ctrl.sample_time)
    count = max(int(math.ceil(horizon / T)), 1)
    n = ctrl.plant.A.shape[0]
    nw = F.shape[0]
    Wk = np.empty((count, nw))
    w = np.zeros(nw)
    for k in range(count):
        Wk[k] = w
        w = F @ w + H[:, 0] * size
    uk = np.hstack([Wk, np.full((count, 1), size)]) @ U[0]
    taus = T * np.arange(SUBSTEPS) / SUBSTEPS
    # Φ(jh) = Φ(h)^j, Γ((j+1)h) = Φ(h) Γ(jh) + Γ(h): one matrix exponential for every substep
    phi, gam = numeric_zero_order_hold(ctrl.plant.A, ctrl.plant.B, T / SUBSTEPS)
    Phi, Gam = np.empty((SUBSTEPS, n, n)), np.empty((SUBSTEPS, n))
    Phi[0], Gam[0] = np.eye(n), 0.0
    for j in range(1, SUBSTEPS):
        Phi[j], Gam[j] = phi @ Phi[j - 1], phi @ Gam[j - 1] + gam[:, 0]
    X = np.einsum("mij,kj->kmi", Phi, Wk[:, :n]) + (uk + size)[:, None, None] * Gam[None]
    W = np.repeat(Wk[:, None, :], SUBSTEPS, axis=1)
    W[:, :, :n] = X
    t = (T * np.arange(count)[:, None] + taus[None]).ravel()
    return t, W.reshape(-1, nw), np.repeat(uk, SUBSTEPS)


def _settling(t, y, y_ss, band: float) -> float | None:
    """Last time |y − y_ss| exceeds ``band`` times its largest value (0 if never)."""
    if y_ss is None:
        return None
    dev = np.abs(y - y_ss)
    top = float(np.max(dev))
    if top == 0:
        return 0.0
    out = np.nonzero(dev > band * top)[0]
    if out.size == 0:
        return 0.0
    last = int(out[-1])
    if last == t.size - 1:
        return None
    return float(t[last + 1])
