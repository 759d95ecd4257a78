"""The memo's section on loop shapes: sensitivities, input-disturbance response, noise gain.

Runs :mod:`symbolic.analysis.loop_shapes` on the shipped controller and lays the results out
as plain data for ``templates/memo_loop_shapes.*.j2`` (numbers stay numbers: the templates'
number filters typeset them); the figures are drawn by :mod:`symbolic.render.loop_shape_figures`
through :func:`symbolic.render.figure_server.render_figures`.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from ..analysis.input_disturbance import (
    DisturbanceResponse,
    disturbance_response,
    disturbance_size,
)
from ..analysis.loop_shapes import LoopShapes, loop_shapes
from ..model.results import Derivation
from ..verification.horizon import horizon_from_poles
from ..verification.shipped import ShippedController
from . import loop_shape_figures as lf
from .figure_server import render_figures
from .mathvalues import own_math

__all__ = ["SENSITIVITY_TARGET", "loop_shapes_json", "memo_loop_shapes", "ratio_unit"]

#: A peak sensitivity above this is remarked on (common practice, no source: values between
#: about 1.2 and 2 are the usual targets).
SENSITIVITY_TARGET = 2.0
#: |steady-state error| at most this times the largest deviation counts as zero (round-off).
ROUND_OFF = 1e-9


def ratio_unit(numerator: str, denominator: str) -> str:
    """The unit of a gain from ``denominator`` to ``numerator`` (``A/rad``, ``V/(N m)``)."""
    if not denominator:
        return numerator
    den = f"({denominator})" if " " in denominator or "/" in denominator else denominator
    return f"{numerator or '1'}/{den}"


def memo_loop_shapes(
    d: Derivation, ctrl: ShippedController, study=None
) -> tuple[dict | None, dict[str, bytes]]:
    """Context and figures of the section; (None, {}) when the loop has several inputs or the
    loop shapes cannot be computed (the reason is not a verdict: the margins row says it).

    ``study`` (:class:`symbolic.analysis.study.SimulationStudy`) gives the reference step's
    peak input and the horizon; without it they are computed here.
    """
    try:
        shapes = loop_shapes(ctrl)
    except (ValueError, np.linalg.LinAlgError):
        return None, {}
    design = d.design
    plant = design.plant
    u_sig, y_sig = plant.inputs[0], plant.outputs[ctrl.tracked_index]
    peak_u, horizon = _reference_run(ctrl, study, design.simulation.reference)
    size, rule = disturbance_size(peak_u)
    spec = design.controller.specifications
    band = spec.settling_band if spec is not None else 0.02
    dist = disturbance_response(ctrl, size, horizon=horizon, settling_band=band, rule=rule)
    noise_unit = ratio_unit(u_sig.unit, y_sig.unit)
    makers, captions = _figures(d, shapes, dist, noise_unit, u_sig, y_sig)
    figures = render_figures(makers)
    ctx = {
        "controller": ctrl.description,
        "same_at_both_points": shapes.same_at_both_points,
        "digital": shapes.digital,
        "nyquist": shapes.nyquist_frequency,
        "sample_time": shapes.sample_time,
        "sensitivity_rows": _sensitivity_rows(shapes),
        "crossovers": list(shapes.crossovers_rad_s),
        "bounds": _bounds(shapes.peak_S_input.value),
        "high_sensitivity": shapes.peak_S_input.value > SENSITIVITY_TARGET,
        "sensitivity_target": SENSITIVITY_TARGET,
        "noise": _noise(shapes, noise_unit),
        "disturbance": _disturbance(dist, u_sig, y_sig, peak_u, ctrl.tracking),
        "figures": captions,
    }
    return ctx, figures


def loop_shapes_json(d: Derivation, ctrl: ShippedController | None = None) -> dict | None:
    """The section's numbers for ``gainsmith robustness --json`` (None: several inputs, or the
    loop shapes cannot be computed); frequencies in rad/s, gains in the units named."""
    if ctrl is None:
        from ..verification.shipped_assembly import shipped_controller

        ctrl = shipped_controller(d)
    try:
        s = loop_shapes(ctrl)
    except (ValueError, np.linalg.LinAlgError):
        return None
    design = d.design
    peak_u, horizon = _reference_run(ctrl, None, design.simulation.reference)
    size, rule = disturbance_size(peak_u)
    spec = design.controller.specifications
    band = spec.settling_band if spec is not None else 0.02
    r = disturbance_response(ctrl, size, horizon=horizon, settling_band=band, rule=rule)
    u_sig, y_sig = design.plant.inputs[0], design.plant.outputs[ctrl.tracked_index]

    def peak(p) -> dict:
        return {"value": p.value, "db": p.db, "frequency_rad_s": p.frequency_rad_s}

    return {
        "same_at_input_and_output": s.same_at_both_points,
        "input": {"peak_S": peak(s.peak_S_input), "peak_T": peak(s.peak_T_input)},
        "output": {"peak_S": peak(s.peak_S_output), "peak_T": peak(s.peak_T_output)},
        "gain_crossovers_rad_s": list(s.crossovers_rad_s),
        "margin_bounds_from_peak_S": _bounds(s.peak_S_input.value),
        "noise_to_input": {**_noise(s, ratio_unit(u_sig.unit, y_sig.unit)), "digital": s.digital},
        "input_disturbance": _disturbance(r, u_sig, y_sig, peak_u, ctrl.tracking),
    }


def _reference_run(ctrl: ShippedController, study, reference: float) -> tuple[float, float]:
    """Peak |u| of the shipped loop's linear reference step, and the horizon of the study."""
    if study is not None and study.judged_linear is not None:
        peak = study.judged_linear.metrics.peak_control or 0.0
        return float(peak), float(study.horizon)
    from ..verification.shipped_simulation import simulate_controller

    horizon = horizon_from_poles(ctrl.closed_loop_poles, ctrl.sample_time)
    run = simulate_controller(ctrl, reference=reference, horizon=horizon)
    return float(np.max(np.abs(run.control))), float(horizon)


def _sensitivity_rows(s: LoopShapes) -> list[dict]:
    """One row per peak: its symbol, where, its value and dB, and its frequency."""
    where = "plant input and output" if s.same_at_both_points else "plant input"
    rows = [
        (r"M_s = \max_{\omega} \lvert S \rvert", where, s.peak_S_input),
        (r"M_t = \max_{\omega} \lvert T \rvert", where, s.peak_T_input),
    ]
    if not s.same_at_both_points:
        rows += [
            (r"\max_{\omega} \bar{\sigma}(S)", "plant output", s.peak_S_output),
            (r"\max_{\omega} \bar{\sigma}(T)", "plant output", s.peak_T_output),
        ]
    return [
        {
            "symbol": own_math(symbol),
            "where": place,
            "value": peak.value,
            "db": peak.db,
            "frequency": peak.frequency_rad_s,
        }
        for symbol, place, peak in rows
    ]


def _bounds(ms: float) -> dict | None:
    """Margins that M_s guarantees (Åström and Murray, Feedback Systems, 2nd ed., Sec. 10.3,
    from memory): the gain may grow by M_s/(M_s − 1), shrink by (M_s + 1)/M_s, and the phase
    margin is at least 2 arcsin(1/(2 M_s))."""
    if not (np.isfinite(ms) and ms > 1.0):
        return None
    return {
        "grow_db": 20.0 * math.log10(ms / (ms - 1.0)),
        "shrink_db": 20.0 * math.log10((ms + 1.0) / ms),
        "phase_deg": math.degrees(2.0 * math.asin(1.0 / (2.0 * ms))),
    }


def _noise(s: LoopShapes, unit: str) -> dict:
    direct = float(np.linalg.norm(s.direct_term, ord=2))
    return {
        "unit": unit,
        "peak": s.peak_noise.value,
        "peak_frequency": s.peak_noise.frequency_rad_s,
        "crossover": s.crossovers_rad_s[0] if s.crossovers_rad_s else None,
        "at_crossover": s.noise_at_crossover,
        "high": s.noise_high_frequency,
        "direct": direct,
        "rolls_off": (not s.digital) and direct == 0.0,
    }


def _disturbance(r: DisturbanceResponse, u_sig, y_sig, peak_u: float, tracking: str) -> dict:
    zero = r.steady_output is not None and abs(r.steady_output) <= ROUND_OFF * max(
        abs(r.peak_deviation), 1e-300
    )
    return {
        "size": r.size,
        "input": u_sig.name,
        "input_unit": u_sig.unit,
        "output": y_sig.name,
        "output_unit": y_sig.unit,
        "rule": r.rule,
        "reference_peak_input": peak_u,
        "peak": r.peak_deviation,
        "peak_time": r.peak_time,
        "settling_time": r.settling_time,
        "band_percent": 100.0 * r.settling_band,
        "steady_output": 0.0 if zero else r.steady_output,
        "steady_zero": zero,
        "steady_control": r.steady_control,
        "stable": r.stable,
        "integral": tracking == "integral action",
    }


def _figures(d: Derivation, s: LoopShapes, r: DisturbanceResponse, noise_unit, u_sig, y_sig):
    """``{file stem: maker}`` (partials over plain data) and the captions, stems unprefixed."""
    name = d.design.slug
    curves = [("S_input", "$|S|$", np.abs(s.S_input)), ("T_input", "$|T|$", np.abs(s.T_input))]
    peaks = [
        ("S_input", s.peak_S_input.frequency_rad_s, s.peak_S_input.value),
        ("T_input", s.peak_T_input.frequency_rad_s, s.peak_T_input.value),
    ]
    where = "at the plant input and output (the same functions: one input, one measurement)"
    if not s.same_at_both_points:
        where = "at the plant input and, as largest singular values, at the plant output"
        curves = [(k, f"{lab} at the plant input", m) for k, lab, m in curves] + [
            ("S_output", r"$\bar\sigma(S)$ at the plant output", _sigma(s.S_output)),
            ("T_output", r"$\bar\sigma(T)$ at the plant output", _sigma(s.T_output)),
        ]
        peaks += [
            ("S_output", s.peak_S_output.frequency_rad_s, s.peak_S_output.value),
            ("T_output", s.peak_T_output.frequency_rad_s, s.peak_T_output.value),
        ]
    makers = {
        f"{name}-sensitivity": functools.partial(
            lf.sensitivity_figure,
            s.frequency,
            curves,
            peaks,
            list(s.crossovers_rad_s),
            s.noise_to_input,
            s.controller_gain,
            (s.peak_noise.frequency_rad_s, s.peak_noise.value),
            noise_unit,
            s.nyquist_frequency,
        ),
        f"{name}-input-disturbance": functools.partial(
            lf.input_disturbance_figure,
            r.time,
            r.output,
            r.control,
            r.size,
            r.steady_output,
            (r.peak_time, r.peak_deviation),
            (y_sig.name, y_sig.unit),
            (u_sig.name, u_sig.unit),
            r.digital,
        ),
    }
    nyq = " The frequency axis ends at the Nyquist frequency π/T." if s.digital else ""
    captions = [
        {
            "stem": own_math("sensitivity"),  # file names of our own: trusted
            "caption": (
                f"Top: sensitivity |S| (solid) and complementary sensitivity |T| (dashed) {where},"
                " in dB, peaks marked (their values in the legend); dashed vertical lines are the gain"
                " crossovers. Bottom: gain from measurement noise to the plant input in closed"
                " loop (solid, peak circled) and the controller's own gain from measurement to"
                f" input (dashed), in {noise_unit or 'plain numbers'}.{nyq}"
            ),
        },
        {
            "stem": own_math("input-disturbance"),
            "caption": (
                f"Step input disturbance on {u_sig.name} at t = 0 (its size is given above),"
                " loop at rest: tracked output (top, largest deviation circled, steady-state"
                " value dotted) and the controller's input demand (bottom, dashed"
                + (", held between samples" if r.digital else "")
                + "), with minus the disturbance dotted."
            ),
        },
    ]
    return makers, captions


def _sigma(M: np.ndarray) -> np.ndarray:
    return np.linalg.norm(M, ord=2, axis=(1, 2))
