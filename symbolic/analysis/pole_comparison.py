"""The optimal pole choice beside the specification rule: both loops simulated and measured.

When a design takes its controller or observer poles from the optimal rule
(:mod:`symbolic.derivation.optimal`), the memo sets the shipped loop beside the loop the
other rules would have given: the controller poles from the specifications (refined on the
simulated step, as :func:`symbolic.derive` would), when ``[controller]`` states them, and the
observer poles from the speed factor.  Both loops are of the kind the design ships (tracking,
observer kind, digital or not), built numerically
(:func:`symbolic.verification.shipped_assembly.build_controller`), stepped with the same
horizon (:func:`symbolic.verification.shipped_simulation.simulate_controller`) and broken at
the plant input for their margins (:func:`symbolic.analysis.shipped_stability.shipped_margins`).
Nothing here judges pass or fail: the requirements table does that, for the shipped loop.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..derivation.pole_rules import (
    choose,
    integral_pole_for,
    reduced_poles_for,
    select_observer_poles,
    shipped_pole_sets,
)
from ..model.results import Derivation, PoleChoice
from ..runtime.errors import GainsmithError
from ..verification.horizon import horizon_from_poles
from ..verification.metrics import step_metrics
from ..verification.shipped import ShippedController
from ..verification.shipped_assembly import build_controller
from ..verification.shipped_simulation import simulate_controller
from .margins import MarginReport
from .shipped_stability import shipped_margins
from .study import mismatched_estimate

__all__ = ["ComparedLoop", "PoleComparison", "pole_comparison"]


@dataclass(frozen=True)
class ComparedLoop:
    """One loop of the comparison: its poles, its step figures and its margins."""

    label: str
    controller_poles: np.ndarray  # s-plane, the integral pole last with integral action
    observer_poles: np.ndarray  # s-plane, of the observer shipped (n, or n − p)
    peak_input: float | None  # matched estimate
    peak_input_mismatched: float | None
    overshoot_percent: float | None
    settling_time: float | None  # in the band of the specifications (2 % without)
    rise_time: float | None
    margins: MarginReport | None
    margins_note: str
    stable: bool


@dataclass(frozen=True)
class PoleComparison:
    """The shipped loop (optimal rule) and the loop of the other rules, side by side."""

    shipped: ComparedLoop
    alternative: ComparedLoop | None
    #: how the alternative's poles were chosen, in one sentence (or why there is none)
    alternative_rule: str
    settling_band: float
    horizon: float
    reference: float


def _alternative_choices(d: Derivation) -> tuple[PoleChoice, PoleChoice, list[str]] | None:
    """The controller and observer choices of the other rules, and what changed."""
    design = d.design
    ctrl, obs = d.controller_poles, d.observer_poles
    changed: list[str] = []
    if ctrl.origin == "optimal" and design.controller.specifications is not None:
        ctrl = choose("controller", design, rule="specifications")
        if design.controller.refine:
            from ..verification.refine import refine_controller_poles

            ctrl, _refinement = refine_controller_poles(
                design, ctrl, d.plant, shipped_pole_sets(design, ctrl)
            )
        changed.append("controller poles from the specifications (" + ctrl.rule + ")")
    if obs.origin == "optimal":
        obs = choose("observer", design, ctrl, rule="speed factor")
        changed.append("observer poles by the speed factor (" + obs.rule + ")")
    elif changed:
        obs = select_observer_poles(design, ctrl)
        changed.append("observer poles by the design's own rule (" + obs.rule + ")")
    return (ctrl, obs, changed) if changed else None


def _shipped_sets(d: Derivation, ctrl: PoleChoice, obs: PoleChoice):
    """The s-plane poles a shipped controller places for these choices (integral pole last,
    the reduced observer's poles when the design asks for one)."""
    design = d.design
    cpoles = ctrl.values
    if design.tracking.method == "integral":
        cpoles = np.append(cpoles, complex(integral_pole_for(design, ctrl.poles)[0]))
    opoles = obs.values
    if design.observer.kind == "reduced":
        opoles = np.array([complex(z) for z in reduced_poles_for(design, obs.poles)[0]])
    return cpoles, opoles


def _measure(d: Derivation, c: ShippedController, label: str, horizon: float, band: float):
    req = d.design.simulation
    n = c.plant.A.shape[0]
    xhat0 = mismatched_estimate(n, req.initial_state, req.reference, req.initial_estimate)
    runs = []
    for est in (None, xhat0):
        r = simulate_controller(
            c,
            reference=req.reference,
            x0=req.initial_state,
            xhat0=est,
            horizon=horizon,
            samples=req.samples,
        )
        runs.append(step_metrics(r, reference=req.reference))
    matched, mismatched = runs
    margins, why = shipped_margins(c)
    overshoot = matched.overshoot_percent
    if overshoot is None and matched.final_value is not None:
        overshoot = 0.0
    return ComparedLoop(
        label=label,
        controller_poles=np.asarray(c.controller_poles, dtype=complex),
        observer_poles=np.asarray(c.observer_poles, dtype=complex),
        peak_input=matched.peak_control,
        peak_input_mismatched=mismatched.peak_control,
        overshoot_percent=overshoot,
        settling_time=matched.settling_time_2pct if band >= 0.02 else matched.settling_time_1pct,
        rise_time=matched.rise_time,
        margins=margins,
        margins_note=why,
        stable=c.stable,
    )


def pole_comparison(d: Derivation, controller: ShippedController) -> PoleComparison | None:
    """The shipped loop beside the loop of the other rules; None without an optimal rule.

    Parameters
    ----------
    d : Derivation
        From :func:`symbolic.derive`.
    controller : ShippedController
        The shipped controller of ``d``
        (:func:`~symbolic.verification.shipped_assembly.shipped_controller`).

    Returns
    -------
    PoleComparison or None
        ``alternative`` is None when no other rule applies (an optimal controller without
        specifications, with an observer that is not optimal); ``alternative_rule`` says so.
    """
    if d.controller_poles.origin != "optimal" and d.observer_poles.origin != "optimal":
        return None
    spec = d.design.controller.specifications
    band = spec.settling_band if spec is not None else 0.02
    req = d.design.simulation
    choices = _alternative_choices(d)
    other = None
    sentence = (
        "no other rule to compare with: state time-domain specifications in [controller]"
        " beside the weights to see the specification rule's poles here"
    )
    if choices is not None:
        ctrl, obs, changed = choices
        cpoles, opoles = _shipped_sets(d, ctrl, obs)
        try:
            other = build_controller(controller, cpoles, opoles)
            sentence = "; ".join(changed)
        except GainsmithError as exc:
            sentence = f"the loop of the other rules could not be built: {exc}"
    poles = [controller.closed_loop_poles] + ([other.closed_loop_poles] if other else [])
    horizon = req.horizon
    if horizon is None:
        horizon = max(horizon_from_poles(p, controller.sample_time) for p in poles)
    shipped = _measure(d, controller, "shipped (optimal rule)", horizon, band)
    alternative = None
    if other is not None:
        parts = []
        if d.controller_poles.origin == "optimal" and spec is not None:
            parts.append("controller by the specifications")
        if d.observer_poles.origin == "optimal":
            parts.append("observer by the speed factor")
        alternative = _measure(d, other, ", ".join(parts), horizon, band)
    return PoleComparison(shipped, alternative, sentence, band, float(horizon), req.reference)
