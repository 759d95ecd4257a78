"""Poles from specifications, refined until the shipped loop's simulated step meets them.

The dominant pair of :func:`symbolic.derivation.dominant.dominant_pair` meets every specification under
the second-order approximation.  The loop that is shipped has more poles (the remaining
controller poles, the observer, the integral pole), possibly plant zeros and a sample time,
so its step response can miss a specification the approximation meets (a 3-state motor:
settling in 0.02084 s against ≤ 0.02 s).  Before the symbolic derivation, gainsmith
therefore builds the shipped controller numerically (:func:`symbolic.verification.shipped_assembly.build_controller`)
for the chosen poles, simulates its step with a matched estimate (the case the specifications
are judged on, without the input limit), and, while a specification is missed,

* raises the damping ratio when the overshoot is too large (the requested overshoot is scaled
  by the ratio of requested to measured, and the damping ratio for that overshoot taken),
* scales the natural frequency by the ratio of measured to requested time when a settling,
  rise or peak time is too long (1 % farther, so that the step lands inside),

with the remaining, observer and integral poles following their rules, and rounds the pair
outward to three significant figures as :func:`~symbolic.derivation.dominant.dominant_pair` does.  It stops
when every specification is met, or after :data:`MAX_STEPS` steps with the best pair found
(the smallest relative miss), and says so.  The iteration is a fixed-point correction of the
second-order model's error (common practice, no source); convergence is not guaranteed, which
is why the miss is reported rather than hidden.

The measurement is numeric (SciPy) and runs in the SciPy sidecar when there is one.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..derivation.dominant import round_sig3
from ..derivation.specs import damping_ratio_from_overshoot
from ..runtime import sidecar as _sidecar

__all__ = [
    "MAX_STEPS",
    "Refinement",
    "measure_shipped_step",
    "refine_controller_poles",
]

#: Largest number of corrections of the dominant pair.
MAX_STEPS = 12
#: A corrected time lands this much inside its bound (relative).
TIME_MARGIN = 1.01
#: Largest damping ratio the correction goes to.
MAX_DAMPING = 0.98

_TIME_SPECS = ("settling_time", "rise_time", "peak_time")


@dataclass(frozen=True)
class Refinement:
    """What the refinement did.

    Attributes
    ----------
    steps : int
        Corrections made (0: the second-order pair met every specification as simulated).
    met : bool
        Every specification met on the simulated step of the shipped loop.
    sigma, omega_d : float
        The pair finally chosen, ``-σ ± jω_d``.
    first, final : dict of str to float or None
        Measured values (design-file keys) with the second-order pair and with the final one.
    sentence : str
        For the pole rule and the memo.
    """

    steps: int
    met: bool
    sigma: float
    omega_d: float
    first: dict
    final: dict
    sentence: str


def _field(key: str, band: float) -> str:
    if key == "settling_time":
        return "settling_time_2pct" if band >= 0.02 else "settling_time_1pct"
    return key


def measure_shipped_step(template, controller_poles, observer_poles, reference, x0, horizon):
    """The step metrics of the shipped controller placing these poles (matched estimate).

    Module level, plain arguments: runs in the SciPy sidecar.  Returns a dict of
    :class:`~symbolic.verification.step_results.StepMetrics` fields, or None when the poles cannot be placed.
    """
    from ..runtime.errors import GainsmithError
    from .horizon import horizon_from_poles
    from .metrics import step_metrics
    from .shipped_assembly import build_controller
    from .shipped_simulation import simulate_controller

    try:
        ctrl = build_controller(template, controller_poles, observer_poles)
    except (GainsmithError, np.linalg.LinAlgError, ValueError):
        return None
    if horizon is None:
        horizon = horizon_from_poles(ctrl.closed_loop_poles, ctrl.sample_time)
    resp = simulate_controller(ctrl, reference=reference, x0=x0, horizon=horizon, samples=2001)
    m = step_metrics(resp, reference=reference)
    return {
        f: getattr(m, f)
        for f in (
            "overshoot_percent",
            "settling_time_2pct",
            "settling_time_1pct",
            "rise_time",
            "peak_time",
            "final_value",
        )
    }


def _misses(spec, measured: dict | None) -> dict[str, float]:
    """Relative excess of each missed specification (inf when not measurable)."""
    if measured is None or measured.get("final_value") is None:
        return {"response": math.inf}
    out = {}
    for key in ("overshoot_percent",) + _TIME_SPECS:
        want = getattr(spec, key)
        if want is None:
            continue
        got = measured.get(_field(key, spec.settling_band))
        if got is None:
            if key == "peak_time" or key == "overshoot_percent":
                continue  # no overshoot: no peak, nothing to meet
            out[key] = math.inf
        elif got > want * (1 + 1e-9):
            out[key] = (got - want) / want if want > 0 else math.inf
    return out


def _corrected(spec, sigma: float, omega_d: float, measured: dict, misses: dict):
    wn = math.hypot(sigma, omega_d)
    zeta = sigma / wn
    if "overshoot_percent" in misses:
        got = measured["overshoot_percent"]
        target = spec.overshoot_percent * spec.overshoot_percent / got
        try:
            z_new = damping_ratio_from_overshoot(max(target, 1e-6))
        except (ValueError, ArithmeticError):
            z_new = MAX_DAMPING
        zeta = min(MAX_DAMPING, max(z_new, zeta + 0.01))
    scale = 1.0
    for key in _TIME_SPECS:
        if key in misses:
            got = measured.get(_field(key, spec.settling_band))
            want = getattr(spec, key)
            ratio = TIME_MARGIN * (got / want) if got is not None and math.isfinite(got) else 1.5
            scale = max(scale, min(ratio, 3.0))
    wn *= scale
    sigma_new = round_sig3(zeta * wn, up=True)
    omega_new = round_sig3(wn * math.sqrt(max(0.0, 1.0 - zeta * zeta)), up=False)
    if sigma_new <= sigma and omega_new == omega_d:  # rounding undid the step: force one
        sigma_new = round_sig3(sigma * 1.01, up=True)
    return sigma_new, max(omega_new, 0.0)


def _text(spec, measured: dict | None) -> str:
    if measured is None:
        return "not measurable"
    parts = []
    for key, label, unit in (
        ("overshoot_percent", "overshoot", " %"),
        ("settling_time", "settling time", " s"),
        ("rise_time", "rise time", " s"),
        ("peak_time", "peak time", " s"),
    ):
        if getattr(spec, key) is None:
            continue
        got = measured.get(_field(key, spec.settling_band))
        shown = "none" if got is None else f"{got:.4g}{unit}"
        parts.append(f"{label} {shown} (≤ {getattr(spec, key):g}{unit})")
    return ", ".join(parts)


def refine_controller_poles(design, ctrl, num, pole_sets):
    """Refine a specification-based :class:`~symbolic.model.results.PoleChoice`.

    The ``refine`` hook of :func:`symbolic.derivation.pipeline.derive`, which
    :func:`symbolic.derive` passes.

    Parameters
    ----------
    design : Design
    ctrl : PoleChoice
        From the specifications (``ctrl.dominant`` set).
    num : NumericPlant
        The plant at the evaluated values.
    pole_sets : callable
        ``pole_sets(sigma, omega_d) -> (controller_poles, shipped_observer_poles, choice)``:
        the numeric s-plane poles of the shipped controller (the integral pole last) and the
        PoleChoice of the controller, by the design's rules, for a dominant pair
        (:func:`symbolic.derivation.pole_rules.shipped_pole_sets`).

    Returns
    -------
    (PoleChoice, Refinement)
    """
    from .shipped_assembly import template_controller

    spec = design.controller.specifications
    pair = ctrl.dominant
    req = design.simulation
    template = template_controller(design, num)
    sigma, omega_d = pair.real_part, pair.damped_frequency

    def measure(s, w):
        cpoles, opoles, _choice = pole_sets(s, w)
        return _sidecar.call(
            measure_shipped_step,
            template,
            cpoles,
            opoles,
            req.reference,
            req.initial_state,
            req.horizon,
        )

    first = measure(sigma, omega_d)
    measured, misses = first, _misses(spec, first)
    best = (max(misses.values(), default=0.0), sigma, omega_d, measured)
    steps = 0
    while misses and steps < MAX_STEPS and measured is not None:
        if "response" in misses:
            break
        sigma, omega_d = _corrected(spec, sigma, omega_d, measured, misses)
        steps += 1
        measured = measure(sigma, omega_d)
        misses = _misses(spec, measured)
        score = max(misses.values(), default=0.0)
        if score < best[0]:
            best = (score, sigma, omega_d, measured)
    met = not misses
    if not met:
        _score, sigma, omega_d, measured = best
        met = best[0] == 0.0
    sentence = _sentence(spec, steps, met, first, measured, sigma, omega_d)
    refinement = Refinement(steps, met, sigma, omega_d, first or {}, measured or {}, sentence)
    _c, _o, choice = pole_sets(sigma, omega_d)
    choice = dataclasses.replace(choice, rule=choice.rule + "; dominant pair " + sentence)
    return choice, refinement


def _sentence(spec, steps: int, met: bool, first, measured, sigma: float, omega_d: float) -> str:
    """What the refinement did, in one sentence, for the pole rule and the memo."""
    if steps == 0 and met:
        return (
            "checked on the simulated step of the shipped loop (matched estimate, no input"
            f" limit): {_text(spec, first)}, every specification met"
        )
    if met:
        return (
            f"refined in {steps} step(s) on the simulated step of the shipped loop (matched"
            f" estimate, no input limit): the second-order pair gave {_text(spec, first)}; the"
            f" refined pair -{sigma:g} ± {omega_d:g}j gives {_text(spec, measured)}"
        )
    return (
        f"NOT MET on the simulated step of the shipped loop after {steps} refinement(s):"
        f" the second-order pair gave {_text(spec, first)}; the best pair found,"
        f" -{sigma:g} ± {omega_d:g}j, gives {_text(spec, measured)}"
    )
