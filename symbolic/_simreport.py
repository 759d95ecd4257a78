"""Simulation study of a finished design: cases, spec verdicts, saturation, observer speed.

Consumes a :class:`~symbolic._derive.Derivation` (never re-derives the
gains) and the simulator of :mod:`symbolic._simulate`; feeds the
``gainsmith simulate`` command, its JSON, and the memo's response section.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import partial

import numpy as np

from ._derive import Derivation
from ._errors import GainsmithError
from ._numbers import format_poles
from ._numeric import numeric_ackermann, scipy_placement
from ._simulate import (
    LoopModel,
    Response,
    StepMetrics,
    observer_speed_study,
    simulate_cases,
    step_metrics,
)

__all__ = [
    "CaseOutcome",
    "SimulationStudy",
    "SpecVerdict",
    "loop_model",
    "memo_simulation",
    "run_simulate",
    "simulation_json",
    "simulation_study",
    "simulation_text",
    "SPEED_FACTORS",
]

#: Observer speed factors of the study: 20 values from 0.5 to 10, evenly spaced on a log scale.
SPEED_FACTORS = tuple(float(f) for f in np.geomspace(0.5, 10.0, 20))

#: Relative difference between the second-order prediction and the measurement above which
#: the memo remarks on it (common practice, no source).
APPROXIMATION_REMARK = 0.10


@dataclass(frozen=True)
class CaseOutcome:
    response: Response
    metrics: StepMetrics


@dataclass(frozen=True)
class SpecVerdict:
    """One specification against the simulation."""

    key: str  # design-file key, e.g. "overshoot_percent"
    label: str
    requested: float
    predicted: float | None  # second-order approximation of the chosen pair
    measured: float | None  # state feedback with the true state (= observer, matched)
    measured_mismatched: float | None
    passed: bool
    passed_mismatched: bool


@dataclass(frozen=True)
class SimulationStudy:
    cases: tuple[CaseOutcome, ...]
    saturated: tuple[CaseOutcome, ...] | None
    verdicts: tuple[SpecVerdict, ...]
    remarks: tuple[str, ...]
    speed_study: tuple[tuple[float, StepMetrics], ...]
    horizon: float
    samples: int
    reference: float
    u_max: float | None
    method: str
    plant_zeros: np.ndarray

    @property
    def passed(self) -> bool:
        return all(v.passed for v in self.verdicts)


def loop_model(d: Derivation, L: np.ndarray | None = None) -> LoopModel:
    """The numeric loop of a derivation (optionally with another observer gain)."""
    N = d.reference.value if d.reference is not None else np.zeros((d.plant.B.shape[1], 1))
    return LoopModel(
        A=d.plant.A,
        B=d.plant.B,
        C=d.plant.C,
        D=d.plant.D,
        K=d.K.value,
        L=d.L.value if L is None else L,
        reference_gain=N,
        tracked=d.reference.tracked_index if d.reference is not None else d.design.tracking.output,
    )


def _observer_gain(d: Derivation, poles: np.ndarray) -> np.ndarray:
    A, C = d.plant.A, d.plant.C
    if C.shape[0] == 1:
        return numeric_ackermann(A.T, C.T, poles).T
    gain, how = scipy_placement(A.T, C.T, poles)
    if gain is None:
        raise GainsmithError(f"observer-speed study: {how}")
    return gain.T


def plant_zeros(d: Derivation) -> np.ndarray:
    """Zeros of the tracked output's transfer function (single input), numerically."""
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    if B.shape[1] != 1:
        return np.array([])
    i = d.design.tracking.output
    Ct, Dt = C[i : i + 1, :], D[i, 0]
    num = np.real(np.poly(A - B @ Ct) - np.poly(A) + Dt * np.poly(A))
    scale = max(1.0, np.abs(num).max())
    while num.size and abs(num[0]) <= 1e-10 * scale:
        num = num[1:]
    return np.roots(num) if num.size > 1 else np.array([])


_SPECS = (
    ("overshoot_percent", "overshoot [%]", "overshoot_percent"),
    ("settling_time", "settling time [s]", None),  # band-dependent, resolved below
    ("rise_time", "rise time 10-90 % [s]", "rise_time"),
    ("peak_time", "peak time [s]", "peak_time"),
)


def _measure(m: StepMetrics, field: str | None, band: float) -> float | None:
    if field is None:
        field = "settling_time_2pct" if band >= 0.02 else "settling_time_1pct"
    return getattr(m, field)


def simulation_study(d: Derivation, *, sweep: bool = True) -> SimulationStudy:
    """Simulate the three cases (and saturated ones), compare with the specs, sweep the observer."""
    req = d.design.simulation
    model = loop_model(d)
    reference = req.reference
    cases_linear = simulate_cases(
        model,
        reference=reference,
        x0=req.initial_state,
        xhat0_mismatch=req.initial_estimate,
        horizon=req.horizon,
        samples=req.samples,
    )
    horizon = float(cases_linear[0].horizon) if req.horizon is None else req.horizon
    cases = tuple(CaseOutcome(r, step_metrics(r, reference=reference)) for r in cases_linear)
    saturated = None
    peak_linear = max((c.metrics.peak_control or 0.0) for c in cases)
    if req.u_max is not None and peak_linear > req.u_max:
        # only when the limit is reached: below it the limited loop is the linear one
        sat = simulate_cases(
            model,
            reference=reference,
            x0=req.initial_state,
            xhat0_mismatch=req.initial_estimate,
            horizon=horizon,
            samples=req.samples,
            u_max=req.u_max,
        )
        saturated = tuple(CaseOutcome(r, step_metrics(r, reference=reference)) for r in sat)
    zeros = plant_zeros(d)
    verdicts, remarks = _verdicts(d, cases, zeros)
    if req.u_max is not None:
        peak = max((c.metrics.peak_control or 0.0) for c in cases)
        if peak > req.u_max:
            remarks.append(
                f"WARNING: the linear design asks for a peak input of {peak:.4g}, more than the actuator"
                f" limit u_max = {req.u_max:g}; the saturated simulation shows the degradation"
                " (the linear design relies on more actuator than exists)."
            )
        else:
            remarks.append(
                f"The peak input {peak:.4g} stays within the actuator limit u_max = {req.u_max:g},"
                " so the limited loop behaves as the linear one (no saturated run needed)."
            )
    for c in cases:
        for note in c.metrics.notes:
            remarks.append(f"{c.response.name}: {note}")
    study_rows: tuple[tuple[float, StepMetrics], ...] = ()
    if sweep:
        ctrl = d.controller_poles.values

        def model_for(factor: float) -> LoopModel:
            return loop_model(d, _observer_gain(d, factor * ctrl))

        study_rows = tuple(
            observer_speed_study(
                model_for,
                SPEED_FACTORS,
                reference=reference,
                x0=req.initial_state,
                xhat0_mismatch=req.initial_estimate,
                samples=min(req.samples, 2001),
            )
        )
    return SimulationStudy(
        cases=cases,
        saturated=saturated,
        verdicts=tuple(verdicts),
        remarks=tuple(remarks),
        speed_study=study_rows,
        horizon=horizon,
        samples=int(cases_linear[0].time.size),
        reference=reference,
        u_max=req.u_max,
        method=cases_linear[0].method,
        plant_zeros=zeros,
    )


def _meets(key: str, value: float | None, requested: float) -> bool:
    """A measured value meets an upper-bound specification (relative slack 1e-9)."""
    if value is None:
        return key == "peak_time"  # no peak means no overshoot: a peak-time spec is moot
    return value <= requested * (1 + 1e-9)


def _verdicts(d: Derivation, cases, zeros) -> tuple[list[SpecVerdict], list[str]]:
    spec = d.design.controller.specifications
    pair = d.controller_poles.dominant
    verdicts: list[SpecVerdict] = []
    remarks: list[str] = []
    if spec is None:
        return verdicts, remarks
    nominal, mismatched = cases[0].metrics, cases[2].metrics
    predicted = {}
    if pair is not None:
        for f in pair.formulas:
            predicted[f.spec] = f.predicted
    for key, label, field in _SPECS:
        requested = getattr(spec, key)
        if requested is None:
            continue
        band = spec.settling_band
        if key == "settling_time":
            label = f"settling time ({band * 100:g} % band) [s]"
        meas = _measure(nominal, field, band)
        meas_mm = _measure(mismatched, field, band)
        if key == "overshoot_percent":
            meas = 0.0 if meas is None else meas
            meas_mm = 0.0 if meas_mm is None else meas_mm
        verdicts.append(
            SpecVerdict(
                key,
                label,
                requested,
                predicted.get(key),
                meas,
                meas_mm,
                _meets(key, meas, requested),
                _meets(key, meas_mm, requested),
            )
        )
        pred = predicted.get(key)
        if pred is not None and meas is not None and pred > 0:
            rel = abs(meas - pred) / max(abs(pred), 1e-12)
            if rel > APPROXIMATION_REMARK:
                extra = [complex(p) for p in d.controller_poles.values][2:]
                why = []
                if extra:
                    why.append("the further poles at " + format_poles(extra, 4))
                if len(zeros):
                    why.append("the plant zeros at " + format_poles(zeros, 4))
                reason = (
                    (" — " + " and ".join(why) + " are not in the second-order model")
                    if why
                    else (
                        " — the second-order formulas are approximations (settling by the exponential envelope)"
                    )
                )
                remarks.append(
                    f"{label}: measured {meas:.4g} against {pred:.4g} predicted by the second-order"
                    f" approximation ({100 * rel:.0f} % apart){reason}."
                )
    return verdicts, remarks


# --------------------------------------------------------------------------
# Output: JSON and terminal
# --------------------------------------------------------------------------
_METRIC_KEYS = (
    "overshoot_percent",
    "settling_time_2pct",
    "settling_time_1pct",
    "rise_time",
    "peak_time",
    "steady_state_error",
    "peak_control",
    "estimation_settling_time",
)


def _clean(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _case_json(c: CaseOutcome) -> dict:
    out = {
        "name": c.response.name,
        "slug": c.response.slug,
        "saturated": bool(c.response.saturated),
    }
    for k in _METRIC_KEYS:
        out[k] = _clean(getattr(c.metrics, k))
    out["final_value"] = _clean(c.metrics.final_value)
    out["notes"] = list(c.metrics.notes)
    return out


def simulation_json(s: SimulationStudy) -> dict:
    """The machine-readable result of ``gainsmith simulate --json``."""
    return {
        "cases": [_case_json(c) for c in s.cases],
        "saturated_cases": None if s.saturated is None else [_case_json(c) for c in s.saturated],
        "time_horizon": s.horizon,
        "samples": s.samples,
        "reference": s.reference,
        "u_max": s.u_max,
        "method": s.method,
        "specifications": [
            {
                "key": v.key,
                "requested": v.requested,
                "predicted": _clean(v.predicted),
                "measured": _clean(v.measured),
                "measured_mismatched": _clean(v.measured_mismatched),
                "passed": v.passed,
                "passed_mismatched": v.passed_mismatched,
            }
            for v in s.verdicts
        ],
        "passed": s.passed,
        "remarks": list(s.remarks),
        "observer_speed_study": [
            {
                "factor": f,
                "overshoot_percent": _clean(m.overshoot_percent),
                "settling_time_2pct": _clean(m.settling_time_2pct),
                "peak_control": _clean(m.peak_control),
                "estimation_settling_time": _clean(m.estimation_settling_time),
            }
            for f, m in s.speed_study
        ],
        "plant_zeros": [[float(z.real), float(z.imag)] for z in s.plant_zeros],
    }


def _fmt(x, digits: int = 4) -> str:
    if x is None:
        return "-"
    x = float(x)
    if not math.isfinite(x):
        return "-"
    return f"{x:.{digits}g}"


def simulation_text(s: SimulationStudy, d: Derivation) -> str:
    """Terminal table: the metrics of each case, and pass/fail per spec."""
    out = []
    w = out.append
    w(
        f"{d.design.title}: step of {s.reference:g} on '{d.reference.tracked.name if d.reference else '?'}',"
        f" {s.samples} samples over {s.horizon:.4g} s"
    )
    w(f"method: {s.method}")
    w("")
    labels = [
        ("overshoot [%]", "overshoot_percent"),
        ("settling 2 % [s]", "settling_time_2pct"),
        ("settling 1 % [s]", "settling_time_1pct"),
        ("rise 10-90 % [s]", "rise_time"),
        ("peak time [s]", "peak_time"),
        ("steady-state error", "steady_state_error"),
        ("peak |u|", "peak_control"),
        ("estimate within 2 % [s]", "estimation_settling_time"),
    ]
    short = {
        "state_feedback": "true state",
        "observer_matched": "matched",
        "observer_mismatched": "mismatched",
    }
    allcases = list(s.cases) + ([s.saturated[0], s.saturated[2]] if s.saturated else [])
    heads = [
        short.get(c.response.slug, c.response.slug) + (", limited" if c.response.saturated else "")
        for c in allcases
    ]
    width = max(12, max(len(h) for h in heads))
    w("  " + "quantity".ljust(26) + "".join(h.rjust(width + 2) for h in heads))
    for label, key in labels:
        w(
            "  "
            + label.ljust(26)
            + "".join(_fmt(getattr(c.metrics, key)).rjust(width + 2) for c in allcases)
        )
    if s.verdicts:
        w("")
        w(
            "Specifications (measured on state feedback with the true state; observer with a mismatched estimate in brackets)"
        )
        for v in s.verdicts:
            status = "pass" if v.passed else "FAIL"
            w(
                f"  {status}  {v.label:34s} requested <= {_fmt(v.requested)}   predicted {_fmt(v.predicted)}"
                f"   measured {_fmt(v.measured)}  [{_fmt(v.measured_mismatched)} {'pass' if v.passed_mismatched else 'FAIL'}]"
            )
    if s.speed_study:
        w("")
        w(
            "Observer-speed study (mismatched estimate): factor, overshoot %, settling 2 % [s], peak |u|"
        )
        for f, m in s.speed_study:
            w(
                f"  {f:7.3g}  {_fmt(m.overshoot_percent):>8}  {_fmt(m.settling_time_2pct):>8}  {_fmt(m.peak_control):>10}"
            )
    if s.remarks:
        w("")
        for r in s.remarks:
            w(f"  - {r}")
    w("")
    w("all specifications met" if s.passed else "SOME SPECIFICATIONS NOT MET")
    return "\n".join(out)


def run_simulate(design, as_json: bool = False) -> int:
    """The ``gainsmith simulate`` command: exit 0 when every spec is met, 1 otherwise."""
    from ._derive import derive
    from ._report import dumps

    d = derive(design)
    s = simulation_study(d)
    if as_json:
        print(dumps(simulation_json(s)))
    else:
        print(simulation_text(s, d))
    return 0 if (s.passed and d.passed) else 1


# --------------------------------------------------------------------------
# For the memo
# --------------------------------------------------------------------------
def memo_simulation(d: Derivation) -> tuple[dict, dict[str, bytes]]:
    """Context of the memo's response section, and its figures (PDF and PNG)."""
    from . import _figures as fig
    from ._memo import _math, _num  # formatting shared with the memo

    s = simulation_study(d)
    plant = d.design.plant
    out_sig = d.reference.tracked if d.reference else plant.outputs[0]
    in_sig = plant.inputs[0]
    name = d.design.slug
    figures: dict[str, bytes] = {}
    responses = [c.response for c in s.cases]
    spec = d.design.controller.specifications
    region = d.controller_poles.dominant.region if d.controller_poles.dominant else None
    plant_poles = np.linalg.eigvals(d.plant.A)
    # makers are partials of module-level functions over plain data: they pickle, so the
    # figure server can draw them (symbolic._figures)
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
            d.controller_poles.values,
            d.observer_poles.values,
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
    figures = fig.render_figures({f"{name}-{stem}": make for stem, make in figs.items()})
    band = spec.settling_band if spec else 0.02
    summary = []
    for v in s.verdicts:
        summary.append(
            {
                "spec": v.label,
                "requested": _math("\\le " + _num(v.requested, 4)),
                "measured": _math(
                    _num(v.measured, 4) if v.measured is not None else "\\text{none}"
                ),
                "case": "state feedback, true state",
                "passed": v.passed,
            }
        )
    short = {
        "state_feedback": "true state",
        "observer_matched": "observer, matched",
        "observer_mismatched": "observer, mismatched",
    }
    cases_ctx = [{"short": short.get(c.response.slug, c.response.slug)} for c in s.cases]
    if s.saturated:
        cases_ctx.append({"short": "mismatched, limited"})
    rows_src = list(s.cases) + ([s.saturated[2]] if s.saturated else [])
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
            vals.append(_math("\\text{--}" if v is None else _num(v, 4)))
        table.append({"label": label, "cells": vals})
    captions = [
        {
            "stem": _math("step"),
            "caption": f"Step response of {out_sig.name}: state feedback with the true state, observer with a matched and with a mismatched initial estimate.",
        },
        {
            "stem": _math("estimation-error"),
            "caption": "Norm of the estimation error (log scale); the dotted line is 2 % of its initial value.",
        },
        {
            "stem": _math("control"),
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
                "stem": _math("saturation"),
                "caption": "Mismatched-estimate case without and with the actuator limit (nonlinear simulation).",
            }
        )
    study_ctx = None
    if s.speed_study:
        study_ctx = {
            "text": (
                "The observer poles were set to a factor times the controller poles, from 0.5 to 10, and"
                " the mismatched-estimate case simulated for each. A slow observer lets the estimation error"
                " dominate the response; a fast one costs input amplitude (and noise sensitivity, not modelled)."
            ),
            "rows": [
                {
                    "factor": _math(_num(f, 3)),
                    "overshoot": _math(_num(m.overshoot_percent or 0.0, 3)),
                    "settling": _math(
                        "\\text{--}"
                        if m.settling_time_2pct is None
                        else _num(m.settling_time_2pct, 3)
                    ),
                    "peak": _math(
                        "\\text{--}" if m.peak_control is None else _num(m.peak_control, 4)
                    ),
                }
                for f, m in s.speed_study
            ],
        }
        captions.append(
            {
                "stem": _math("observer-study"),
                "caption": "Observer-speed study: overshoot, settling time and peak input against the speed factor (mismatched estimate).",
            }
        )
    method = (
        f"The loop (plant, full-order observer, state feedback on the estimate, reference gain) was simulated for a step of"
        f" {s.reference:g} on {out_sig.name} over {s.horizon:.4g} s with {s.samples} samples."
        f" Method: {s.method}."
    )
    del band
    ctx = {
        "method": method,
        "summary": summary,
        "cases": cases_ctx,
        "colspec": _math("@{}p{0.3\\textwidth}" + "r" * len(cases_ctx) + "@{}"),
        "table": table,
        "remarks": list(s.remarks),
        "figures": captions,
        "study": study_ctx,
    }
    return ctx, figures
