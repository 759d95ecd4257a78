"""The shipped controller on the nonlinear plant: steps of several sizes and the reach of the loop.

A design written as a ``[model]`` is designed on its linearisation at the operating point
``(x*, u*, y*)``; this module runs the controller that is shipped (observer, reference gain or
integral action, the input limit of ``[simulation] u_max``) on the nonlinear equations
themselves, with ``scipy.integrate.solve_ivp`` (a digital controller at its samples, the
plant between them by :mod:`symbolic.analysis.nonlinear_digital`):

* **steps**: reference steps of the sizes ``[model] steps`` lists (default: ¼, ½, 1 and 2
  times ``[simulation] reference``), each from rest at the operating point, beside the linear
  loop's prediction; a step passes when the run settles within the band (2 % of the step,
  common practice, no source) of the reference at the end of the horizon;
* **reach** (an estimate of the region of attraction along each state axis): the plant starts
  at ``x* + a·e_i`` with the controller's estimate at the operating point and the reference at
  zero; the largest ``|a|`` on each side for which the loop returns (state deviation at the end
  of the horizon at most 2 % of the start, in units of each state's scale) is found by
  bisection, up to a search bound (the state's ``range`` edge, else ten times the state's
  scale), and then confirmed at a quarter, a half and three quarters of it.

A run that leaves a state's declared ``range`` (where the model holds) or grows past 10⁶
times the scale counts as not converging.  This is an estimate from simulations, not a proof:
the region may have holes between the points tried, and it says nothing off the axes.

The controller acts on deviations from the operating point: it measures ``y − y*`` and its
input ``u − u*``; the limit ``|u − u*| ≤ u_max`` is applied to that deviation, as in the
linear simulation (state the actuator's true range about ``u*`` in ``u_max``).

Caution: a simulation of a model is not a test of the machine.  Before the controller drives a
machine that moves, heats or flies, test it on the real plant with reduced limits and an
independent stop, under the applicable standards, local codes and licensed practice.
"""

from __future__ import annotations

import numpy as np

from ..verification.shipped import ShippedController, initial_controller_state
from ..verification.shipped_simulation import simulate_controller
from .nonlinear_digital import GRID, digital_side, digital_steps, substep_count
from .nonlinear_loop import (
    BLOW_UP,
    AxisReach,
    NonlinearLoop,
    NonlinearStep,
    NonlinearStudy,
    step_result,
)

__all__ = [
    "AxisReach",
    "NonlinearStep",
    "NonlinearStudy",
    "SETTLING_BAND",
    "nonlinear_study",
]

#: A step settles when it ends within this fraction of the step (common practice, no source).
SETTLING_BAND = 0.02
#: A perturbed start returns when its deviation shrinks to this fraction (common practice).
RETURN_FRACTION = 0.02
#: Bisection steps of the reach search (resolution 2⁻⁸ of the bound).
BISECTIONS = 8
#: Fractions of the reach at which the estimate is confirmed.
CONFIRM = (0.25, 0.5, 0.75)
#: How each controller is run on the nonlinear plant, and how the reach is searched.
DIGITAL_METHOD = (
    "the digital controller's difference equations at the samples (T = {T:g} s), the input"
    " held between them, the nonlinear plant integrated by fixed-step Runge–Kutta (order 4,"
    " {steps} steps a sample)"
)
CONTINUOUS_REACH = (
    f"largest offset found by bisection ({BISECTIONS} halvings of the search bound: the edge"
    " of the state's range, else ten times its scale) and confirmed at "
    + ", ".join(f"{c:g}" for c in CONFIRM)
    + " of it"
)
DIGITAL_REACH = (
    f"largest offset of a grid of {GRID} up to the search bound (the edge of the state's range,"
    " else ten times its scale) from which, and from every smaller one, the loop returns"
)


def _simulate(loop: NonlinearLoop, x0, xi0, r: float, horizon: float, u_max, scale, samples=601):
    """Integrate the loop; returns (t, X, Xi, U, why_stopped)."""
    from scipy.integrate import solve_ivp

    eq, n = loop.ctrl.equations, loop.n
    Bor = (
        np.zeros(eq.state_matrix.shape[0])
        if eq.reference_input is None
        else eq.reference_input[:, 0]
    )
    Baw = None if eq.anti_windup is None else eq.anti_windup

    def control(x, xi):
        dy = loop.h(x, loop.u_star) - loop.y_star
        ud = eq.output_state @ xi + eq.output_measurement @ dy + eq.output_reference[:, 0] * r
        du = ud if u_max is None else np.clip(ud, -u_max, u_max)
        return dy, ud, du

    def rhs(_t, z):
        x, xi = z[:n], z[n:]
        dy, ud, du = control(x, xi)
        dxi = eq.state_matrix @ xi + eq.measurement_matrix @ dy + eq.control_matrix @ du + Bor * r
        if Baw is not None:
            dxi = dxi + Baw @ (ud - du)
        return np.concatenate([loop.f(x, loop.u_star + du), dxi])

    events = [_blow_up(n, loop.x_star, scale)]
    for j, bounds in enumerate(loop.ranges):
        if bounds is not None:
            events.extend(_edges(j, bounds))
    t_eval = np.linspace(0.0, horizon, samples)
    z0 = np.concatenate([x0, xi0])
    sol = solve_ivp(
        rhs,
        (0.0, horizon),
        z0,
        method="LSODA",
        t_eval=t_eval,
        events=events,
        rtol=1e-7,
        atol=1e-9 * np.concatenate([scale, np.ones(z0.size - n)]),
    )
    why = ""
    if sol.status == 1:
        hit = next(i for i, te in enumerate(sol.t_events) if te.size)
        why = "grew without bound" if hit == 0 else "left the model's range"
    elif sol.status < 0:
        why = f"the integration failed ({sol.message})"
    X, Xi = sol.y[:n].T, sol.y[n:].T
    U = np.array([control(x, xi)[2] for x, xi in zip(X, Xi, strict=True)]).reshape(len(sol.t), -1)
    return sol.t, X, Xi, U, why


def _blow_up(n, x_star, scale):
    def event(_t, z):
        return BLOW_UP - float(np.max(np.abs(z[:n] - x_star) / scale))

    event.terminal = True
    return event


def _edges(j, bounds):
    low, high = bounds

    def below(_t, z):
        return z[j] - low

    def above(_t, z):
        return high - z[j]

    below.terminal = above.terminal = True
    return below, above


def _scales(loop: NonlinearLoop, linear_runs) -> np.ndarray:
    """Each state's scale: its size at the operating point or its peak in the linear steps."""
    peaks = np.max([np.max(np.abs(run.state), axis=0) for run in linear_runs], axis=0)
    scale = np.maximum(np.abs(loop.x_star), peaks)
    return np.where(scale > 0, scale, 1.0)


def _step(loop, r, horizon, u_max, scale, linear) -> NonlinearStep:
    n = loop.n
    xi0 = initial_controller_state(loop.ctrl, np.zeros(n))
    t, X, _Xi, U, why = _simulate(loop, loop.x_star.copy(), xi0, r, horizon, u_max, scale)
    tracked = loop.ctrl.tracked_index
    y = np.array([loop.h(x, loop.u_star + u)[tracked] for x, u in zip(X, U, strict=True)])
    y = y - loop.y_star[tracked]
    y_linear = np.interp(t, linear.time, linear.tracked_output)
    return step_result(r, t, y, y_linear, U[:, 0], why, horizon, SETTLING_BAND)


def _returns(loop, axis, offset, horizon, u_max, scale) -> bool:
    n = loop.n
    dx0 = np.zeros(n)
    dx0[axis] = offset
    xi0 = initial_controller_state(loop.ctrl, dx0, np.zeros(n))
    t, X, _Xi, _U, why = _simulate(
        loop, loop.x_star + dx0, xi0, 0.0, horizon, u_max, scale, samples=3
    )
    if why or t[-1] < horizon * (1 - 1e-12):
        return False
    start = abs(offset) / scale[axis]
    return bool(np.max(np.abs(X[-1] - loop.x_star) / scale) <= RETURN_FRACTION * start)


def _side(loop, axis, sign, bound, horizon, u_max, scale) -> tuple[float, str]:
    """The largest offset ``sign·a``, ``0 < a ≤ bound``, that returns (bisection, confirmed)."""
    if bound <= 0:
        return 0.0, "the operating point is on the range's edge"
    if _returns(loop, axis, sign * bound, horizon, u_max, scale):
        good, note = bound, "returns from the whole search bound"
    else:
        good, bad = 0.0, bound
        for _ in range(BISECTIONS):
            middle = 0.5 * (good + bad)
            if _returns(loop, axis, sign * middle, horizon, u_max, scale):
                good = middle
            else:
                bad = middle
        note = ""
    while good > 0 and not all(
        _returns(loop, axis, sign * c * good, horizon, u_max, scale) for c in CONFIRM
    ):
        good, note = 0.5 * good, "halved: a smaller offset did not return"
    return good, note


def _bounds(loop, axis, scale) -> tuple[float, float]:
    limits = loop.ranges[axis]
    wide = 10.0 * scale[axis]
    if limits is None:
        return wide, wide
    x = loop.x_star[axis]
    return min(wide, x - limits[0]), min(wide, limits[1] - x)


def nonlinear_study(d, ctrl: ShippedController, horizon: float) -> NonlinearStudy:
    """Steps and reach of the shipped controller on the nonlinear plant of ``d.design.model``."""
    model = d.design.model
    req = d.design.simulation
    method = (
        "scipy.integrate.solve_ivp (LSODA, rtol 1e-7) of the nonlinear plant with the shipped"
        " controller acting on the deviations from the operating point"
    )
    if any(e != 0 for e in d.design.plant.D):
        return NonlinearStudy(
            (),
            (),
            horizon,
            req.u_max,
            method,
            "an output that depends on the input (D ≠ 0) is not simulated on the nonlinear plant",
        )
    loop = NonlinearLoop(d, ctrl)
    sizes = model.steps or tuple(req.reference * k for k in (0.25, 0.5, 1.0, 2.0))
    linear = [
        simulate_controller(ctrl, reference=r, horizon=horizon, samples=601, u_max=req.u_max)
        for r in sizes
    ]
    scale = _scales(loop, linear)
    plant_A = np.asarray(d.plant.A, dtype=float)
    if ctrl.digital:
        steps = tuple(
            digital_steps(loop, sizes, horizon, req.u_max, scale, linear, plant_A, SETTLING_BAND)
        )
        method = DIGITAL_METHOD.format(
            T=float(ctrl.sample_time), steps=substep_count(loop, plant_A)
        )

        def side(axis, sign, bound):
            return digital_side(
                loop, axis, sign, bound, horizon, req.u_max, scale, plant_A, RETURN_FRACTION
            )

        reach_method = DIGITAL_REACH
    else:
        steps = tuple(
            _step(loop, r, horizon, req.u_max, scale, run)
            for r, run in zip(sizes, linear, strict=True)
        )

        def side(axis, sign, bound):
            return _side(loop, axis, sign, bound, horizon, req.u_max, scale)

        reach_method = CONTINUOUS_REACH
    reach = []
    for axis, signal in enumerate(d.design.plant.states):
        low, high = _bounds(loop, axis, scale)
        below, note_b = side(axis, -1.0, low)
        above, note_a = side(axis, 1.0, high)
        reach.append(
            AxisReach(
                signal.name,
                signal.unit,
                below,
                above,
                low,
                high,
                model.required_offsets[axis],
                "; ".join(dict.fromkeys(n for n in (note_b, note_a) if n)),
            )
        )
    return NonlinearStudy(
        steps,
        tuple(reach),
        horizon,
        req.u_max,
        method,
        reach_method=reach_method,
        scales=tuple(float(x) for x in scale),
    )
