"""The step response of the shipped controller's loop on its plant model.

The loop of plant and controller, state ``w = [x; ξ]``, is stepped exactly between samples
(matrix exponentials, Van Loan [1]); with an input limit the continuous loop is integrated
with ``solve_ivp`` (see :func:`symbolic.verification.saturated.integrate_saturated`).  A
digital controller runs at the samples ``t = kT`` and holds its input in between (zero-order
hold, Franklin, Powell and Workman [2]); the plant is stepped exactly on a finer grid.

Caution: a simulated response is a model result.  Before the controller drives a machine that
moves, heats or flies, test it on the real plant with reduced limits and an independent stop.

References
----------
.. [1] C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE
   Transactions on Automatic Control 23(3):395-404, 1978. doi:10.1109/TAC.1978.1101743
.. [2] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998, Sec. 4.3 and 8.2 -- from memory.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from ..derivation.zoh import numeric_zero_order_hold
from .shipped import (
    ShippedController,
    closed_loop,
    initial_controller_state,
    measured,
    poles_stable,
)

if TYPE_CHECKING:  # the simulation records: imported where a run needs them
    from .step_results import Response

__all__ = ["simulate_controller"]

#: A run stops when the stacked state grows past this size (as in
#: :mod:`symbolic.verification.linear_stepping`).
STATE_LIMIT = 1e12
#: Plant steps per sample of the digital controller (inter-sample resolution), at least.
SUBSTEPS = 20
#: Largest number of samples of a digital run.
MAX_DIGITAL_SAMPLES = 200_000


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
    C, D = measured(ctrl, ctrl.plant.C, ctrl.plant.D)
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
    from .step_results import Response

    n = ctrl.plant.A.shape[0]
    X, XI = W[:, :n], W[:, n:]
    Y = X @ ctrl.plant.C.T + U @ ctrl.plant.D.T
    Cm, Dm = measured(ctrl, ctrl.plant.C, ctrl.plant.D)
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
    from .linear_stepping import step_linear
    from .saturated import integrate_saturated

    if limit is None:
        W, stopped = step_linear(F, G[:, 0], r, w0, time)
        method = (
            "exact zero-order-hold stepping of the linear loop of plant and controller"
            " (one matrix exponential, Van Loan 1978)"
        )
        note = ""
    else:
        A, B = ctrl.plant.A, ctrl.plant.B
        Cm, Dm = measured(ctrl, ctrl.plant.C, ctrl.plant.D)
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
    Cm, Dm = measured(ctrl, ctrl.plant.C, ctrl.plant.D)
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
