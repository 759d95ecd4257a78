"""The memo's response section: the simulation study as plain data, and its figures.

Lays out a finished :class:`~symbolic.analysis.study.SimulationStudy` (simulated once, by
the memo or here) for the memo templates; the figures are drawn by
:mod:`symbolic.render.figures`.
"""

from __future__ import annotations

from functools import partial

import numpy as np

from ..analysis.study import SimulationStudy, simulation_study
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
    " dominate the response; a fast one costs input amplitude (and noise sensitivity, not modelled)."
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
        "figures": _captions(s, out_sig, in_sig),
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
    plant_poles = np.linalg.eigvals(d.plant.A)
    figs = {
        "step": partial(
            fig.step_response_figure, responses, out_sig.name, out_sig.unit, s.reference
        ),
        "estimation-error": partial(fig.estimation_error_figure, responses),
        "control": partial(
            fig.control_effort_figure,
            responses + ([s.saturated[2].response] if s.saturated else []),
            in_sig.name,
            in_sig.unit,
            s.u_max,
        ),
        "pole-map": partial(
            fig.pole_map_figure,
            np.asarray(ctrl.controller_poles),
            np.asarray(ctrl.observer_poles),
            region,
            plant_poles,
        ),
    }
    if s.saturated:
        figs["saturation"] = partial(
            fig.step_response_figure,
            [s.cases[2].response, s.saturated[2].response],
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

        figs["observer-study"] = partial(
            fig.observer_study_figure,
            f,
            col("overshoot_percent"),
            col("settling_time_2pct"),
            col("peak_control"),
            in_sig.name,
            in_sig.unit,
        )
    name = d.design.slug
    return {f"{name}-{stem}": make for stem, make in figs.items()}


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


def _captions(s: SimulationStudy, out_sig, in_sig) -> list[dict]:
    """The captions of the section's figures, in the order they are shown."""
    captions = [
        {
            "stem": own_math("step"),
            "caption": f"Step response of {out_sig.name}: state feedback with the true state (reference), and the shipped controller ({s.controller.description}) with a matched and with a mismatched initial estimate.",
        },
        {
            "stem": own_math("estimation-error"),
            "caption": "Norm of the estimation error (log scale); the dotted line is 2 % of its initial value.",
        },
        {
            "stem": own_math("control"),
            "caption": f"Control input {in_sig.name}"
            + (
                " with the actuator limit; the dash-dotted curve is the limited (saturated) run."
                if s.u_max is not None
                else "."
            ),
        },
    ]
    if s.saturated:
        captions.append(
            {
                "stem": own_math("saturation"),
                "caption": "Shipped controller, mismatched estimate, without and with the actuator limit (nonlinear simulation).",
            }
        )
    if s.speed_study:
        captions.append(
            {
                "stem": own_math("observer-study"),
                "caption": "Observer-speed study: overshoot, settling time and peak input against the speed factor (mismatched estimate).",
            }
        )
    return captions


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
