"""Integral action against the reference gain, simulated: disturbance, mismatch and windup.

The reference-gain loop and the integral loop of :mod:`symbolic.derivation.integral` are run
on the nominal plant and on mismatched "true" plants (:func:`mismatch_cases`), each with a
reference step and, later, a step input disturbance; with ``[simulation] u_max`` the integral
loop also runs with a limited input, with and without anti-windup.

Anti-windup.  With ``[simulation] u_max`` the integrator is corrected by back-calculation
[1]: ``x_I' = (y_t - r) + (u_d - sat(u_d)) / (k_i T_t)`` with the demanded input ``u_d``, which
pulls ``u_d`` back to the limit with the time constant ``T_t`` while the input is limited and is
inactive otherwise; ``T_t = 1/|p_I|``, the integral pole's time constant (common practice, no
source).  Unlike freezing the integrator ("conditional integration") the right-hand side stays
continuous, so the ODE solver takes no chattering steps.

Caution: integral action on a machine that moves, heats or flies winds up whenever the actuator
limits; test the anti-windup scheme on the real actuator with reduced limits and an independent
emergency stop before trusting it.

References
----------
.. [1] K. J. Åström and T. Hägglund, *Advanced PID Control*, ISA, 2006, Sec. 3.5 (integrator
   windup; conditional integration and back-calculation) -- from memory.
.. [2] K. J. Åström and R. M. Murray, *Feedback Systems*, Princeton University Press, 2008,
   Sec. 10.4 (integrator windup) -- from memory.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..model.results import Derivation
from ..runtime.errors import GainsmithWarning
from .integral import IntegralAction, integral_action
from .integral_loops import (
    LoopMatrices,
    linear_loop,
    loop_matrices,
    overshoot_percent,
    simulate_linear,
    slowest_rate,
)
from .numeric import evaluate_matrix

__all__ = [
    "ANTI_WINDUP_RULE",
    "DISTURBANCE_FRACTION",
    "MISMATCH_FRACTION",
    "DisturbanceRun",
    "IntegralStudy",
    "WindupRun",
    "integral_study",
    "mismatch_cases",
]

#: Size of the step input disturbance of the study, as a fraction of the largest input the
#: reference-gain loop uses for the reference step alone (common practice, no source).
DISTURBANCE_FRACTION = 0.2

#: Without parameter ranges, the mismatched plants scale every parameter by 1 -/+ this
#: fraction (common practice, no source).
MISMATCH_FRACTION = sp.Rational(1, 5)

ANTI_WINDUP_RULE = (
    "back-calculation: x_I' = (y - r) + (u_demanded - u_applied)/(k_i T_t), which drives the"
    " demanded input back to the limit with the time constant T_t while the input is limited"
    " and changes nothing while it is not (Åström and Hägglund, Advanced PID Control, ISA,"
    " 2006, Sec. 3.5, from memory); tracking time constant T_t = 1/|integral pole|, the"
    " integral mode's own time constant (common practice, no source); the observer is fed the"
    " applied (limited) input"
)


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
# Mismatched plants and the loops
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
        "reference gain": lambda true: loop_matrices(true, nominal, K, L, idx, N=N),
        "integral action": lambda true: loop_matrices(
            true, nominal, integral.K, L, idx, ki=integral.integral_gain
        ),
    }
    horizon, time, t_d = _time_grid(design, loops, nominal, horizon, samples)
    disturbance, rule = _disturbance(design, loops, nominal, r, time, t_d, disturbance)
    plants = _plants(design, nominal, notes)
    runs = _runs(loops, plants, r, disturbance, t_d, time, notes)
    u_max = design.simulation.u_max
    return IntegralStudy(
        runs=tuple(runs),
        windup=_windup_runs(integral, loops, nominal, r, u_max, time),
        reference=r,
        disturbance=float(disturbance),
        disturbance_time=t_d,
        horizon=float(horizon),
        u_max=None if u_max is None else float(u_max),
        disturbance_rule=rule,
        mismatch_rule=_mismatch_rule(design),
        anti_windup_rule=ANTI_WINDUP_RULE,
        notes=tuple(notes),
    )


def _time_grid(design, loops: dict, nominal, horizon: float | None, samples: int):
    """``(horizon, time, t_d)``: the uniform grid (an odd number of samples) and the
    disturbance time at its middle."""
    rate = slowest_rate(
        linear_loop(loops["reference gain"](nominal))[0],
        linear_loop(loops["integral action"](nominal))[0],
    )
    if horizon is None:
        half = design.simulation.horizon or 10.0 / rate
        horizon = 2.0 * half
    samples = max(int(samples), 11) | 1
    time = np.linspace(0.0, horizon, samples)
    t_d = float(time[(samples - 1) // 2])
    return horizon, time, t_d


def _disturbance(design, loops: dict, nominal, r: float, time, t_d: float, disturbance):
    """The size of the step input disturbance and the sentence on how it was chosen."""
    if disturbance is None:
        probe = simulate_linear(loops["reference gain"](nominal), r, 0.0, np.inf, time)
        peak = float(np.max(np.abs(probe.control))) if probe.control.size else 0.0
        disturbance = DISTURBANCE_FRACTION * peak if peak > 0 else DISTURBANCE_FRACTION
        rule = (
            f"step input disturbance of {disturbance:.4g} on input"
            f" {design.plant.inputs[0].name} at t = {t_d:.4g} s: {DISTURBANCE_FRACTION:g} times"
            " the largest input the reference-gain loop uses for the reference step (common"
            " practice, no source)"
        )
    else:
        rule = f"step input disturbance of {disturbance:.4g} at t = {t_d:.4g} s (given)"
    return disturbance, rule


def _plants(design, nominal, notes: list[str]) -> list[tuple]:
    """``(label, description, (A, B, C, D))``: the nominal plant and the mismatched plants
    that can be evaluated."""
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
    return plants


def _runs(loops: dict, plants: list, r: float, disturbance: float, t_d: float, time, notes):
    """Both loops on every plant: a :class:`DisturbanceRun` each."""
    runs = []
    for loop_name, build in loops.items():
        for label, what, true in plants:
            loop = build(true)
            tr = simulate_linear(loop, r, disturbance, t_d, time)
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
                    overshoot_percent=overshoot_percent(tr.output[first], finals.get("before")),
                    stopped_early=tr.stopped,
                )
            )
            if not tr.stable:
                notes.append(f"the {loop_name} loop is unstable on the '{label}' plant ({what})")
    return runs


def _windup_runs(integral: IntegralAction, loops: dict, nominal, r: float, u_max, time):
    """The integral loop with a limited input, without then with anti-windup (None without
    ``u_max``)."""
    if u_max is None:
        return None
    loop = loops["integral action"](nominal)
    tracking = 1.0 / abs(complex(integral.integral_pole))
    return tuple(
        _simulate_windup(loop, r, float(u_max), time, anti_windup=flag, tracking_time=tracking)
        for flag in (False, True)
    )


def _mismatch_rule(design) -> str:
    """How the mismatched plants were made, in one sentence."""
    return (
        "true plant with every ranged parameter at the low / high end of its range"
        if any(p.range is not None for p in design.parameters)
        else f"true plant with every parameter × {1 - float(MISMATCH_FRACTION):g} /"
        f" × {1 + float(MISMATCH_FRACTION):g} (no ranges given; common practice, no source)"
    )


def _simulate_windup(
    loop: LoopMatrices,
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
        overshoot_percent=overshoot_percent(y, r),
        method=(
            "scipy.integrate.solve_ivp (LSODA, rtol 1e-8), "
            + (ANTI_WINDUP_RULE if anti_windup else "no anti-windup")
        ),
    )
