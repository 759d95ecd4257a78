"""The digital controller on the nonlinear plant: the difference equations run at the samples,
the input held in between (zero-order hold), the plant's equations integrated over each
sample interval.

The shipped digital controller (:class:`~symbolic.derivation.difference_equations.DifferenceEquations`)
measures ``y[k] − y*`` at ``t = kT``, computes ``u_d[k]``, applies ``u[k]`` (limited to
``±u_max`` about ``u*``) until the next sample and updates its state.  Between samples the plant
``x' = f(x, u*  + u[k])`` is integrated by the classical fourth-order Runge–Kutta method with a
fixed step: at most T/4, and at most 0.2 / ρ where ρ is the largest magnitude of the
linearised plant's eigenvalues (the stiffest mode advances by a fifth of its time constant a
step; E. Hairer, S. P. Nørsett and G. Wanner, *Solving Ordinary Differential Equations I*, 2nd
ed., Springer, 1993, Sec. II.1 -- from memory).  Runs are batched: every row of a batch is one
start (or one step size), advanced together, so the reach along an axis is read on a grid of
offsets from one batched run instead of a bisection of single runs.
"""

from __future__ import annotations

import math

import numpy as np

from .nonlinear_loop import BLOW_UP, NonlinearLoop, step_result

__all__ = ["GRID", "digital_runs", "substep_count"]

#: Offsets tried on each side of the operating point by the digital reach search.
GRID = 64


def substep_count(loop: NonlinearLoop, plant_A: np.ndarray) -> int:
    """Runge–Kutta steps per sample interval (see the module docstring)."""
    T = float(loop.ctrl.sample_time)
    rho = float(np.max(np.abs(np.linalg.eigvals(plant_A)))) if plant_A.size else 0.0
    return max(4, math.ceil(T * rho / 0.2))


def _rk4(loop: NonlinearLoop, X, U, h: float, steps: int):
    for _ in range(steps):
        k1 = loop.f_batch(X, U)
        k2 = loop.f_batch(X + 0.5 * h * k1, U)
        k3 = loop.f_batch(X + 0.5 * h * k2, U)
        k4 = loop.f_batch(X + h * k3, U)
        X = X + (h / 6.0) * (k1 + 2 * k2 + 2 * k3 + k4)
    return X


def _stopped(loop: NonlinearLoop, X, scale) -> np.ndarray:
    """Per row: '' (running), 'grew without bound' or 'left the model's range'."""
    why = np.full(X.shape[0], "", dtype=object)
    with np.errstate(invalid="ignore"):
        big = ~np.all(np.isfinite(X), axis=1) | (
            np.max(np.abs(X - loop.x_star) / scale, axis=1) > BLOW_UP
        )
    for j, bounds in enumerate(loop.ranges):
        if bounds is not None:
            outside = (X[:, j] < bounds[0]) | (X[:, j] > bounds[1])
            why[outside & (why == "")] = "left the model's range"
    why[big] = "grew without bound"
    return why


def digital_runs(loop: NonlinearLoop, X0, Xi0, r, horizon: float, u_max, scale, plant_A):
    """Batched runs from ``X0`` (B × n), ``Xi0`` (B × ξ) with references ``r`` (B).

    Returns ``(t, X, U, why)``: sample times (N + 1), states (N + 1, B, n) at the samples,
    the applied input deviation (N + 1, B, m) and, per row, why it stopped ('' when it ran to
    the end; a stopped row keeps its last state).
    """
    eq, T = loop.ctrl.equations, float(loop.ctrl.sample_time)
    count = int(math.ceil(horizon / T))
    steps = substep_count(loop, plant_A)
    B = X0.shape[0]
    r = np.asarray(r, dtype=float).reshape(B, 1)
    Bor = 0.0 if eq.reference_input is None else eq.reference_input[:, 0]
    X, Xi = np.array(X0, dtype=float), np.array(Xi0, dtype=float)
    why = np.full(B, "", dtype=object)
    states, inputs = [], []
    for k in range(count + 1):
        dy = loop.h_batch(X, np.tile(loop.u_star, (B, 1))) - loop.y_star
        ud = Xi @ eq.output_state.T + dy @ eq.output_measurement.T + r * eq.output_reference[:, 0]
        du = ud if u_max is None else np.clip(ud, -u_max, u_max)
        states.append(X.copy())
        inputs.append(du.copy())
        if k == count:
            break
        Xi_next = Xi @ eq.state_matrix.T + dy @ eq.measurement_matrix.T + du @ eq.control_matrix.T
        Xi_next = Xi_next + r * Bor
        if eq.anti_windup is not None:
            Xi_next = Xi_next + (ud - du) @ eq.anti_windup.T
        running = why == ""
        X_next = X.copy()
        with np.errstate(all="ignore"):
            X_next[running] = _rk4(loop, X[running], loop.u_star + du[running], T / steps, steps)
        X = X_next
        Xi = np.where(running[:, None], Xi_next, Xi)
        now = _stopped(loop, X, scale)
        why = np.where((why == "") & (now != ""), now, why)
    return np.arange(count + 1) * T, np.stack(states), np.stack(inputs), why


def digital_steps(loop, sizes, horizon, u_max, scale, linear, plant_A, band) -> list:
    """The reference steps, one batched run: :class:`NonlinearStep` per size."""
    from ..verification.shipped import initial_controller_state

    B = len(sizes)
    xi0 = initial_controller_state(loop.ctrl, np.zeros(loop.n))
    t, X, U, why = digital_runs(
        loop,
        np.tile(loop.x_star, (B, 1)),
        np.tile(xi0, (B, 1)),
        sizes,
        horizon,
        u_max,
        scale,
        plant_A,
    )
    tracked = loop.ctrl.tracked_index
    out = []
    for i, (r, run) in enumerate(zip(sizes, linear, strict=True)):
        y = loop.h_batch(X[:, i, :], np.tile(loop.u_star, (t.size, 1)))[:, tracked]
        y = y - loop.y_star[tracked]
        y_linear = np.interp(t, run.time, run.tracked_output)
        out.append(step_result(r, t, y, y_linear, U[:, i, 0], why[i], horizon, band))
    return out


def digital_side(loop, axis, sign, bound, horizon, u_max, scale, plant_A, fraction):
    """The largest offset ``sign·a`` on a grid of :data:`GRID` offsets up to ``bound`` such
    that the loop returns from it and from every smaller one; ``(a, note)``."""
    from ..verification.shipped import initial_controller_state

    if bound <= 0:
        return 0.0, "the operating point is on the range's edge"
    offsets = bound * np.arange(1, GRID + 1) / GRID
    dX = np.zeros((GRID, loop.n))
    dX[:, axis] = sign * offsets
    Xi0 = np.stack([initial_controller_state(loop.ctrl, dx, np.zeros(loop.n)) for dx in dX])
    _t, X, _U, why = digital_runs(
        loop, loop.x_star + dX, Xi0, np.zeros(GRID), horizon, u_max, scale, plant_A
    )
    with np.errstate(invalid="ignore"):
        left = np.max(np.abs(X[-1] - loop.x_star) / scale, axis=1)
    returned = (why == "") & (left <= fraction * offsets / scale[axis])
    failed = np.flatnonzero(~returned)
    count = GRID if failed.size == 0 else int(failed[0])
    if count == GRID:
        return float(bound), "returns from the whole search bound"
    return float(offsets[count - 1]) if count else 0.0, ""
