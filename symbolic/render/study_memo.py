"""The memo's response section: the simulation study as plain data, and its figures.

Lays out a finished :class:`~symbolic.analysis.study.SimulationStudy` (simulated once, by
the memo or here) for the memo templates; the figures are drawn by
:mod:`symbolic.render.figures`.
"""

from __future__ import annotations

from functools import partial

import numpy as np

from ..analysis.study import SimulationStudy, simulation_study
from ..model.numbers import format_poles
from ..model.results import Derivation
from ..verification.step_cases import MISMATCH_FRACTION
from . import figures as fig
from .figure_server import render_figures
from .mathvalues import OwnMath, latex_number, own_math

__all__ = ["memo_simulation"]

#: Short column heads of the memo's metrics table, by case.
_SHORT_CASE_NAMES = {
    "state_feedback": "true state",
    "observer_matched": "shipped, matched",
    "observer_mismatched": "shipped, mismatched",
}

#: The observer-speed paragraph of the memo.
_SPEED_STUDY_TEXT = (
    "The observer poles of the shipped controller were set to a factor times the controller"
    " poles, from 0.5 to 10, the controller rebuilt numerically, and the mismatched-estimate"
    " case simulated for each. A slow observer lets the estimation error"
    " dominate the response; a fast one costs input amplitude, and passes more measurement"
    " noise to the input (not swept here; the shipped loop's gain from measurement noise to"
    " the input is given with its loop shapes)."
)


def memo_simulation(
    d: Derivation, study: SimulationStudy | None = None
) -> tuple[dict, dict[str, bytes]]:
    """Context of the memo's response section, and its figures (PDF and PNG)."""
    s = simulation_study(d) if study is None else study
    ctrl = s.controller
    out_sig = d.reference.tracked if d.reference else d.design.plant.outputs[0]
    in_sig = d.design.plant.inputs[0]
    figures = render_figures(_figure_makers(d, s, out_sig, in_sig))
    cases_ctx, table = _metrics_table(s, in_sig)
    method = (
        f"The shipped loop (plant and controller: {ctrl.description}) was simulated for a step of"
        f" {s.reference:g} on {out_sig.name} over {s.horizon:.4g} s with {s.samples} samples."
        f" Method: {s.method}."
    )
    ctx = {
        "method": method,
        "summary": _summary(s),
        "cases": cases_ctx,
        "colspec": own_math(_metrics_colspec(len(cases_ctx))),
        "table": table,
        "remarks": list(s.remarks),
        "figures": _captions(d, s, out_sig, in_sig),
        "pole_map_caption": _pole_map_caption(d, s),
        "study": _speed_study_context(s),
        "start": _start_context(d, s),
    }
    return ctx, figures


#: The label column of the metrics table, as a fraction of the text width.
_LABEL_COLUMN = 0.25
#: The memo's text width in points (A4, 2.2 cm margins) and LaTeX's column gap (2 x 6 pt).
_TEXT_WIDTH_PT, _COLUMN_GAP_PT = 471.0, 12.0


def _metrics_colspec(columns: int) -> str:
    """A label column and `columns` right-aligned number columns whose heads wrap, filling
    the text width with no column overrunning it."""
    free = 1.0 - _LABEL_COLUMN - columns * _COLUMN_GAP_PT / _TEXT_WIDTH_PT - 0.01
    width = int(1000 * free / columns) / 1000
    number = f">{{\\raggedleft\\arraybackslash}}p{{{width}\\textwidth}}"
    return (
        f"@{{}}>{{\\raggedright\\arraybackslash}}p{{{_LABEL_COLUMN}\\textwidth}}"
        + number * columns
        + "@{}"
    )


def _vector(values) -> OwnMath:
    """A state vector as a LaTeX row, four significant figures."""
    return own_math(
        "\\begin{bmatrix} "
        + " & ".join(latex_number(float(v), 4) for v in values)
        + " \\end{bmatrix}^{\\mathsf T}"
    )


def _start_context(d: Derivation, s: SimulationStudy) -> dict | None:
    """The initial state and the initial estimates of the runs, read off the simulated
    responses (the mismatched run starts from the mismatched estimate)."""
    runs = {c.response.slug: c.response for c in s.cases}
    mismatched = runs.get("observer_mismatched")
    if mismatched is None or mismatched.estimate is None or not len(mismatched.state):
        return None
    request = d.design.simulation
    return {
        "state": _vector(mismatched.state[0]),
        "estimate": _vector(mismatched.estimate[0]),
        "state_given": request.initial_state is not None,
        "estimate_given": request.initial_estimate is not None,
        "default_percent": own_math(latex_number(100 * MISMATCH_FRACTION, 3)),
    }


def _figure_makers(d: Derivation, s: SimulationStudy, out_sig, in_sig) -> dict:
    """``{file stem: maker}`` of the section's figures.

    The makers are partials of module-level functions over plain data: they pickle, so
    the figure server can draw them (:mod:`symbolic.render.figures`).
    """
    ctrl = s.controller
    responses = [c.response for c in s.cases]
    region = d.controller_poles.dominant.region if d.controller_poles.dominant else None
    controller_label, observer_label = _pole_labels(d, ctrl)
    figs = {
        "step": partial(
            fig.step_response_figure, responses, out_sig.name, out_sig.unit, s.reference
        ),
        "estimation-error": partial(
            fig.estimation_error_figure,
            responses,
            tuple(x.unit for x in d.design.plant.states),
        ),
        "control": partial(
            fig.control_effort_figure, _control_cases(s), in_sig.name, in_sig.unit, s.u_max
        ),
        "pole-map": partial(
            fig.pole_map_figure,
            np.asarray(ctrl.controller_poles),
            np.asarray(ctrl.observer_poles),
            region,
            np.linalg.eigvals(d.plant.A),
            np.asarray(s.plant_zeros, dtype=complex),
            controller_label=controller_label,
            observer_label=observer_label,
        ),
    }
    if s.saturated:
        figs["saturation"] = partial(
            fig.step_response_figure,
            _saturation_cases(s),
            out_sig.name,
            out_sig.unit,
            s.reference,
        )
    if s.speed_study:
        f = np.array([x for x, _ in s.speed_study])

        def col(key: str) -> np.ndarray:
            return np.array(
                [np.nan if getattr(m, key) is None else getattr(m, key) for _, m in s.speed_study]
            )

        chosen, values = _chosen_speed(d, s)
        figs["observer-study"] = partial(
            fig.observer_study_figure,
            f,
            col("overshoot_percent"),
            col("settling_time_2pct"),
            col("peak_control"),
            in_sig.name,
            in_sig.unit,
            chosen,
            values,
        )
    name = d.design.slug
    return {f"{name}-{stem}": make for stem, make in figs.items()}


def _control_cases(s: SimulationStudy) -> list:
    """The runs the control-input figure draws: the three cases, and the limited run."""
    return [c.response for c in s.cases] + ([s.saturated[2].response] if s.saturated else [])


def _saturation_cases(s: SimulationStudy) -> list:
    """The runs of the saturation figure: mismatched estimate without and with the limit."""
    return [s.cases[2].response, s.saturated[2].response]


def _pole_labels(d: Derivation, ctrl) -> tuple[str, str]:
    """Legend labels of the shipped controller's poles on the pole map."""
    n = d.plant.A.shape[0]
    controller = "controller poles (A − BK)"
    if len(ctrl.controller_poles) > n:
        controller = "controller poles (A − BK, with the integral pole)"
    observer = "observer poles (A − LC)"
    if ctrl.observer == "reduced-order observer":
        observer = "reduced-order observer poles"
    return controller, observer


def _chosen_speed(d: Derivation, s: SimulationStudy):
    """Where the design sits on the observer-speed sweep: ``(lo, hi)`` and, for a design set
    by a speed factor, the shipped loop's own values (mismatched estimate) to mark there."""
    ctrl = s.controller
    obs = d.design.observer
    explicit = obs.poles is not None or (
        ctrl.observer == "reduced-order observer" and obs.reduced_poles is not None
    )
    if not explicit:
        m = s.cases[2].metrics
        f = float(obs.speed_factor)
        return (f, f), (m.overshoot_percent, m.settling_time_2pct, m.peak_control)
    n = d.plant.A.shape[0]
    c = np.abs(np.asarray(ctrl.controller_poles, dtype=complex)[:n])
    o = np.abs(np.asarray(ctrl.observer_poles, dtype=complex))
    if not (c.size and o.size and c.min() > 0):
        return None, None
    ratios = sorted((float(o.min() / c.min()), float(o.max() / c.max())))
    return (ratios[0], ratios[1]), None


def _summary(s: SimulationStudy) -> list[dict]:
    """One row per specification: requested, measured on the shipped loop, verdict."""
    return [
        {
            "spec": v.label,
            "requested": own_math("\\le " + latex_number(v.requested, 4)),
            "measured": own_math(
                latex_number(v.measured, 4) if v.measured is not None else "\\text{none}"
            ),
            "case": "shipped controller, matched estimate",
            "passed": v.passed,
        }
        for v in s.verdicts
    ]


def _metrics_table(s: SimulationStudy, in_sig) -> tuple[list[dict], list[dict]]:
    """The column heads (one per case) and the rows of the metrics table."""
    cases_ctx = [
        {"short": _SHORT_CASE_NAMES.get(c.response.slug, c.response.slug)} for c in s.cases
    ]
    if s.saturated:
        cases_ctx += [{"short": "matched, limited"}, {"short": "mismatched, limited"}]
    rows_src = list(s.cases) + ([s.saturated[1], s.saturated[2]] if s.saturated else [])
    table = []
    for label, key in (
        ("overshoot [%]", "overshoot_percent"),
        ("settling time, 2 % band [s]", "settling_time_2pct"),
        ("settling time, 1 % band [s]", "settling_time_1pct"),
        ("rise time 10-90 % [s]", "rise_time"),
        ("peak time [s]", "peak_time"),
        ("steady-state error", "steady_state_error"),
        (f"peak |{in_sig.name}|" + (f" [{in_sig.unit}]" if in_sig.unit else ""), "peak_control"),
        ("estimation error within 2 % [s]", "estimation_settling_time"),
    ):
        vals = []
        for c in rows_src:
            v = getattr(c.metrics, key)
            if v is not None and key == "steady_state_error" and abs(v) < 1e-9 * abs(s.reference):
                v = 0.0  # round-off of an exact zero: keep the memo reproducible
            vals.append(own_math("\\text{--}" if v is None else latex_number(v, 4)))
        table.append({"label": label, "cells": vals})
    return cases_ctx, table


def _captions(d: Derivation, s: SimulationStudy, out_sig, in_sig) -> list[dict]:
    """The captions of the section's figures, in the order they are shown, each built from
    what its figure draws (the same planning functions of :mod:`symbolic.render.figures`)."""
    responses = [c.response for c in s.cases]
    step = (
        f"Step response of {out_sig.name}: state feedback with the true state (reference), and"
        f" the shipped controller ({s.controller.description}) with a matched and with a"
        " mismatched initial estimate."
        + fig.curves_coincidence(responses, fig.output_curves(responses))
    )
    control_runs = _control_cases(s)
    control = f"Control input {in_sig.name} of each case" + (
        f", with the actuator limit ±{s.u_max:g}" if s.u_max is not None else ""
    )
    if s.saturated:
        control += "; the dash-dotted curve is the run with the input limited"
    elif s.u_max is not None:
        control += " (the linear runs stay within it, so no limited run is drawn)"
    control += "." + fig.curves_coincidence(control_runs, fig.input_curves(control_runs))
    captions = [
        {"stem": own_math("step"), "caption": step},
        {
            "stem": own_math("estimation-error"),
            "caption": _estimation_caption(responses, s.controller.sample_time),
        },
        {"stem": own_math("control"), "caption": control},
    ]
    if s.saturated:
        runs = _saturation_cases(s)
        captions.append(
            {
                "stem": own_math("saturation"),
                "caption": "Shipped controller, mismatched estimate, without and with the"
                " actuator limit (nonlinear simulation)."
                + fig.curves_coincidence(runs, fig.output_curves(runs)),
            }
        )
    if s.speed_study:
        captions.append({"stem": own_math("observer-study"), "caption": _speed_caption(d, s)})
    return captions


#: How the captions name the observer cases.
_ESTIMATE_NAMES = {
    "observer_matched": "the matched estimate",
    "observer_mismatched": "the mismatched estimate",
}


def _estimation_caption(responses: list, sample_time: float | None) -> str:
    """The estimation-error caption: what is drawn, and what is zero to rounding."""
    plan = fig.estimation_plan(responses)

    def name(k: int) -> str:
        return _ESTIMATE_NAMES.get(responses[k].slug, responses[k].name)

    drawn = [name(k) for k in plan["drawn"]]
    text = "Norm of the estimation error (true state minus estimate; log scale)"
    text += (" for " + " and ".join(drawn) + ".") if drawn else "."
    if plan["initial"] is not None:
        text += f" The dotted line is 2 % of the initial error of {name(plan['initial'])}."
    zero = [name(k) for k in plan["zero"]]
    floor = f"{fig.ROUNDOFF_FLOOR:g} of the largest state norm, {plan['floor']:.2g}"
    if zero:
        text += (
            " With " + " and ".join(zero) + " the error is zero to rounding (below"
            f" {floor}) and is not drawn"
        )
        text += "; nor are values of the other curves below that floor." if drawn else "."
    elif drawn:
        text += f" Values below round-off ({floor}) are not drawn."
    if sample_time:
        text += (
            f" The controller is digital (T = {sample_time:g} s): its observer state is updated"
            " at the samples only, so the error rises between the samples and falls back at"
            " each one."
        )
    return text


def _pole_map_caption(d: Derivation, s: SimulationStudy) -> str:
    """The pole-map caption: which marker is which, and the plant zeros drawn or not."""
    ctrl = s.controller
    controller, observer = _pole_labels(d, ctrl)
    plant = np.linalg.eigvals(d.plant.A)
    shown, off = fig.split_zeros(
        np.asarray(s.plant_zeros, dtype=complex),
        *fig.pole_map_view(ctrl.controller_poles, ctrl.observer_poles, plant),
    )
    text = (
        f"Pole map of the shipped controller: {controller} as crosses (×), {observer} as plus"
        " signs (+), open-loop plant poles as open squares"
    )
    if shown.size:
        text += ", zeros of the plant's transfer function to the tracked output as open circles"
    if d.controller_poles.dominant:
        text += "; the shaded region meets the specifications"
    text += "."
    if ctrl.sample_time:
        text += (
            f" The controller is digital (T = {ctrl.sample_time:g} s): its poles are drawn in the"
            " s-plane, as designed; in z they are exp(sT)."
        )
    if off.size:
        text += (
            f" The plant {'zero' if off.size == 1 else 'zeros'} at"
            f" {format_poles(off, 3).replace('-', '−')}"
            f" {'lies' if off.size == 1 else 'lie'} outside the view (named in the legend)."
        )
    elif not shown.size:
        text += " The plant has no finite zeros."
    inset = fig.pole_map_inset(ctrl.controller_poles, ctrl.observer_poles, plant)
    if inset is not None:
        where = "upper" if inset[1][1] > 0.5 else "lower"
        text += (
            f" The inset ({where} left) enlarges the poles near the origin, out to"
            f" |s| = {inset[0]:.3g} 1/s; a grey box on the map marks its view."
        )
    return text


def _speed_caption(d: Derivation, s: SimulationStudy) -> str:
    """The observer-study caption, with where the design sits on the sweep."""
    text = (
        "Observer-speed study: overshoot, settling time and peak input against the speed"
        " factor (mismatched estimate)."
    )
    chosen, values = _chosen_speed(d, s)
    if chosen is None:
        text += " The design's observer poles are not a multiple of its controller poles."
    elif values is not None:
        text += (
            f" The dashed line marks the design's speed factor {chosen[0]:g}; the stars are the"
            " shipped loop's own values there."
        )
    elif np.isclose(chosen[0], chosen[1], rtol=1e-6):
        text += (
            " The design's observer poles are given explicitly; the dashed line marks the ratio"
            f" of their magnitude to the controller poles' ({chosen[0]:.3g})."
        )
    else:
        text += (
            " The design's observer poles are given explicitly, not as a multiple of the"
            " controller poles; the shaded band spans the ratios of their magnitudes to the"
            f" controller poles' ({chosen[0]:.3g} to {chosen[1]:.3g})."
        )
    missing = [f for f, m in s.speed_study if m.settling_time_2pct is None]
    if missing:
        text += (
            f" At {len(missing)} {'factor' if len(missing) == 1 else 'factors'} the response"
            " does not settle within the simulated time: no settling time is drawn there."
        )
    return text


#: Speed factors shown in the memo's observer-speed table (the figure shows the whole sweep).
_SHOWN_FACTORS = (0.5, 1.0, 2.0, 4.0, 10.0)


def _speed_row(factor: float, m, chosen: bool = False) -> dict:
    return {
        "factor": own_math(latex_number(factor, 3)),
        "overshoot": own_math(latex_number(m.overshoot_percent or 0.0, 3)),
        "settling": own_math(
            "\\text{--}" if m.settling_time_2pct is None else latex_number(m.settling_time_2pct, 3)
        ),
        "peak": own_math(
            "\\text{--}" if m.peak_control is None else latex_number(m.peak_control, 4)
        ),
        "chosen": chosen,
    }


def _speed_study_context(s: SimulationStudy) -> dict | None:
    """The observer-speed paragraph and a short table: the sweep's rows nearest a few
    representative factors, and the shipped observer (its own mismatched run)."""
    if not s.speed_study:
        return None
    picked = sorted(
        {
            min(range(len(s.speed_study)), key=lambda i: abs(s.speed_study[i][0] - f))
            for f in _SHOWN_FACTORS
        }
    )
    rows = [_speed_row(*s.speed_study[i]) for i in picked]
    ctrl = s.controller
    runs = {c.response.slug: c for c in s.cases}
    if ctrl is not None and ctrl.observer_poles.size and "observer_mismatched" in runs:
        ratio = min(abs(z.real) for z in ctrl.observer_poles) / min(
            abs(z.real) for z in ctrl.controller_poles
        )
        chosen = _speed_row(ratio, runs["observer_mismatched"].metrics, chosen=True)
        position = sum(1 for i in picked if s.speed_study[i][0] < ratio)
        rows.insert(position, chosen)
    return {
        "text": _SPEED_STUDY_TEXT,
        "rows": rows,
        "count": len(s.speed_study),
    }
