"""Simulation study of a finished design: cases, spec verdicts, saturation, observer speed.

Consumes a :class:`~symbolic.model.results.Derivation` (never re-derives the
gains) and the simulator of :mod:`symbolic.verification.stepping`; feeds the
``gainsmith simulate`` command, its JSON, and the memo's response section.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import partial

import numpy as np

from ..model.numbers import format_poles
from ..model.results import Derivation
from ..runtime.errors import GainsmithError
from ..verification.shipped import (
    ShippedController,
    build_controller,
    shipped_controller,
    simulate_controller,
    state_feedback_reference,
)
from ..verification.stepping import (
    MISMATCH_FRACTION,
    Response,
    StepMetrics,
    horizon_from_poles,
    step_metrics,
)

__all__ = [
    "CaseOutcome",
    "SimulationStudy",
    "SpecVerdict",
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
    measured: float | None  # the shipped loop, matched estimate (limited input when u_max bites)
    measured_mismatched: float | None  # the same, mismatched estimate
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
    #: the controller simulated (the one the design file asks for)
    controller: ShippedController | None = None
    #: the run the specifications are judged on: matched estimate, limited input when the
    #: linear loop exceeds ``u_max``
    judged: CaseOutcome | None = None
    #: the matched linear run
    judged_linear: CaseOutcome | None = None

    @property
    def passed(self) -> bool:
        """Every specification met on the shipped loop (the whole verdict is
        :func:`symbolic.analysis.verdict.requirement_table`)."""
        return all(v.passed for v in self.verdicts)


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


def mismatched_estimate(n: int, x0, reference: float, given=None) -> np.ndarray:
    """The initial estimate of the mismatched case: the design file's, or
    ``x(0) + 0.1 |r| (1, …, 1)`` (common practice, no source; see
    :func:`symbolic.verification.stepping.default_mismatch`)."""
    if given is not None:
        return np.asarray(given, dtype=float)
    start = np.zeros(n) if x0 is None else np.asarray(x0, dtype=float)
    scale = abs(reference) if reference != 0 else 1.0
    return start + MISMATCH_FRACTION * scale * np.ones(n)


_CASE_NAMES = {
    "state_feedback": "state feedback, true state",
    "observer_matched": "shipped controller, matched estimate",
    "observer_mismatched": "shipped controller, mismatched estimate",
}


def _runs(ctrl: ShippedController, reference, x0, xhat0, horizon, samples, u_max):
    """The three standard runs of a controller: true state, matched, mismatched."""
    truth = state_feedback_reference(ctrl)
    out = []
    for slug, c, est in (
        ("state_feedback", truth, None),
        ("observer_matched", ctrl, None),
        ("observer_mismatched", ctrl, xhat0),
    ):
        name = _CASE_NAMES[slug] + (", input limited" if u_max is not None else "")
        r = simulate_controller(
            c,
            reference=reference,
            x0=x0,
            xhat0=est,
            horizon=horizon,
            samples=samples,
            u_max=u_max,
            name=name,
            slug=slug,
        )
        out.append(CaseOutcome(r, step_metrics(r, reference=reference)))
    return tuple(out)


def _speed_observer_poles(ctrl: ShippedController, factor: float) -> np.ndarray:
    """Observer poles of the study: factor × the n state-feedback poles (the reduced observer
    takes its n − p poles from those by the rule of :func:`symbolic.derivation.pole_rules.reduced_observer_poles`)."""
    n = ctrl.plant.A.shape[0]
    full = factor * np.asarray(ctrl.controller_poles[:n], dtype=complex)
    if ctrl.observer != "reduced-order observer":
        return full
    import sympy as sp

    from ..derivation.pole_rules import reduced_observer_poles

    exact = tuple(sp.Float(z.real, 17) + sp.I * sp.Float(z.imag, 17) for z in full)
    chosen, _rule = reduced_observer_poles(exact, ctrl.observer_poles.size)
    return np.array([complex(z) for z in chosen])


def _speed_study(ctrl, reference, x0, xhat0, samples) -> tuple[tuple[float, StepMetrics], ...]:
    rows = []
    for factor in SPEED_FACTORS:
        try:
            c = build_controller(ctrl, ctrl.controller_poles, _speed_observer_poles(ctrl, factor))
        except GainsmithError:
            continue
        horizon = horizon_from_poles(c.closed_loop_poles, c.sample_time)
        r = simulate_controller(
            c, reference=reference, x0=x0, xhat0=xhat0, horizon=horizon, samples=samples
        )
        rows.append((factor, step_metrics(r, reference=reference)))
    return tuple(rows)


def simulation_study(
    d: Derivation, *, sweep: bool = True, controller: ShippedController | None = None
) -> SimulationStudy:
    """Simulate the shipped controller (and the true-state reference), judge the specs on it,
    run it with the actuator limit when the linear loop exceeds it, sweep the observer speed."""
    req = d.design.simulation
    ctrl = shipped_controller(d) if controller is None else controller
    reference = req.reference
    n = ctrl.plant.A.shape[0]
    xhat0 = mismatched_estimate(n, req.initial_state, reference, req.initial_estimate)
    horizon = (
        horizon_from_poles(ctrl.closed_loop_poles, ctrl.sample_time)
        if req.horizon is None
        else req.horizon
    )
    cases = _runs(ctrl, reference, req.initial_state, xhat0, horizon, req.samples, None)
    saturated = None
    peak_linear = max((c.metrics.peak_control or 0.0) for c in cases[1:])
    if req.u_max is not None and peak_linear > req.u_max:
        # only when the limit is reached: below it the limited loop is the linear one
        saturated = _runs(
            ctrl, reference, req.initial_state, xhat0, horizon, req.samples, req.u_max
        )
    zeros = plant_zeros(d)
    judged = saturated[1] if saturated else cases[1]
    judged_mm = saturated[2] if saturated else cases[2]
    verdicts, remarks = _verdicts(d, ctrl, judged, judged_mm, zeros)
    if req.u_max is not None:
        if peak_linear > req.u_max:
            remarks.append(
                f"WARNING: the shipped loop asks for a peak input of {peak_linear:.4g}, more than the actuator"
                f" limit u_max = {req.u_max:g}: the specifications are judged on the run with the"
                " input limited, and the actuator-limit requirement fails."
            )
        else:
            remarks.append(
                f"The peak input {peak_linear:.4g} stays within the actuator limit u_max = {req.u_max:g},"
                " so the limited loop behaves as the linear one (no limited run needed)."
            )
    for c in cases + (saturated or ()):
        for note in c.metrics.notes:
            remarks.append(f"{c.response.name}: {note}")
    study_rows = ()
    if sweep:
        study_rows = _speed_study(ctrl, reference, req.initial_state, xhat0, min(req.samples, 2001))
    return SimulationStudy(
        cases=cases,
        saturated=saturated,
        verdicts=tuple(verdicts),
        remarks=tuple(remarks),
        speed_study=study_rows,
        horizon=float(horizon),
        samples=int(cases[1].response.time.size),
        reference=reference,
        u_max=req.u_max,
        method=cases[1].response.method,
        plant_zeros=zeros,
        controller=ctrl,
        judged=judged,
        judged_linear=cases[1],
    )


def _meets(key: str, value: float | None, requested: float) -> bool:
    """A measured value meets an upper-bound specification (relative slack 1e-9)."""
    if value is None:
        return key == "peak_time"  # no peak means no overshoot: a peak-time spec is moot
    return value <= requested * (1 + 1e-9)


def _verdicts(d: Derivation, ctrl, judged, judged_mm, zeros) -> tuple[list[SpecVerdict], list[str]]:
    spec = d.design.controller.specifications
    pair = d.controller_poles.dominant
    verdicts: list[SpecVerdict] = []
    remarks: list[str] = []
    if spec is None:
        return verdicts, remarks
    nominal, mismatched = judged.metrics, judged_mm.metrics
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
            meas = 0.0 if meas is None and nominal.final_value is not None else meas
            meas_mm = 0.0 if meas_mm is None and mismatched.final_value is not None else meas_mm
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
                remarks.append(_approximation_remark(label, meas, pred, rel, ctrl, zeros))
    return verdicts, remarks


def _approximation_remark(label, meas, pred, rel, ctrl, zeros) -> str:
    extra = [complex(p) for p in ctrl.controller_poles][2:]
    why = []
    if extra:
        why.append("the further poles at " + format_poles(extra, 4))
    if ctrl.observer_poles.size:
        why.append("the observer")
    if len(zeros):
        why.append("the plant zeros at " + format_poles(zeros, 4))
    if ctrl.digital:
        why.append("the sampling")
    reason = (
        (
            " — "
            + ", ".join(why[:-1])
            + (" and " if len(why) > 1 else "")
            + why[-1]
            + " are not in the second-order model"
        )
        if why
        else " — the second-order formulas are approximations (settling by the exponential envelope)"
    )
    return (
        f"{label}: measured {meas:.4g} on the shipped loop against {pred:.4g} predicted by the"
        f" second-order approximation ({100 * rel:.0f} % apart){reason}."
    )


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


def simulation_json(s: SimulationStudy, table=None) -> dict:
    """The machine-readable result of ``gainsmith simulate --json``.

    With the requirements table (:class:`symbolic.analysis.verdict.RequirementTable`) ``passed`` is its
    verdict and ``requirements`` its rows; without it, ``passed`` covers the specifications.
    """
    return {
        "controller": None if s.controller is None else s.controller.description,
        "requirements": None if table is None else table.to_json(),
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
        "passed": s.passed if table is None else table.passed,
        "specifications_passed": s.passed,
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


def requirements_text(table) -> list[str]:
    """The requirements table for the terminal, with the open items and the verdict."""
    out = [f"Requirements (judged on the shipped controller: {table.controller})"]
    width = max(len(r.label) for r in table.rows)
    for r in table.rows:
        status = "pass" if r.passed else "FAIL"
        out.append(
            f"  {r.number:>3}  {status}  {r.label.ljust(width)}  {r.requested}  ->  {r.achieved}"
        )
    if table.open_items:
        out.append("")
        out.append("Open items")
        out.extend(f"  - {item}" for item in table.open_items)
    out.append("")
    out.append(table.verdict)
    return out


def simulation_text(s: SimulationStudy, d: Derivation, table=None) -> str:
    """Terminal table: the metrics of each case, pass/fail per spec, the requirements."""
    out = []
    w = out.append
    w(
        f"{d.design.title}: step of {s.reference:g} on '{d.reference.tracked.name if d.reference else '?'}',"
        f" {s.samples} samples over {s.horizon:.4g} s"
    )
    if s.controller is not None:
        w(f"controller: {s.controller.description}")
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
    allcases = list(s.cases) + ([s.saturated[1], s.saturated[2]] if s.saturated else [])
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
            "Specifications (measured on the shipped loop, matched estimate; mismatched estimate in brackets)"
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
    if table is None:
        w("all specifications met" if s.passed else "SOME SPECIFICATIONS NOT MET")
    else:
        out.extend(requirements_text(table))
    return "\n".join(out)


def run_simulate(design, as_json: bool = False) -> int:
    """The ``gainsmith simulate`` command: exit 0 when every requirement is met, 1 otherwise."""
    from ..derivation.pipeline import derive
    from ..render.report import dumps
    from .verdict import requirement_table

    d = derive(design)
    s = simulation_study(d)
    claims = None
    if design.claims is not None:
        from .claims import check_claims

        claims = check_claims(d, design.claims)
    table = requirement_table(d, s, claims=claims)
    if as_json:
        print(dumps(simulation_json(s, table)))
    else:
        print(simulation_text(s, d, table))
    return 0 if table.passed else 1


# --------------------------------------------------------------------------
# For the memo
# --------------------------------------------------------------------------
def memo_simulation(
    d: Derivation, study: SimulationStudy | None = None
) -> tuple[dict, dict[str, bytes]]:
    """Context of the memo's response section, and its figures (PDF and PNG)."""
    from ..render import figures as fig
    from ..render.mathvalues import latex_number, own_math

    s = simulation_study(d) if study is None else study
    ctrl = s.controller
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
    # figure server can draw them (symbolic.render.figures)
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
    figures = fig.render_figures({f"{name}-{stem}": make for stem, make in figs.items()})
    band = spec.settling_band if spec else 0.02
    summary = []
    for v in s.verdicts:
        summary.append(
            {
                "spec": v.label,
                "requested": own_math("\\le " + latex_number(v.requested, 4)),
                "measured": own_math(
                    latex_number(v.measured, 4) if v.measured is not None else "\\text{none}"
                ),
                "case": "shipped controller, matched estimate",
                "passed": v.passed,
            }
        )
    short = {
        "state_feedback": "true state",
        "observer_matched": "shipped, matched",
        "observer_mismatched": "shipped, mismatched",
    }
    cases_ctx = [{"short": short.get(c.response.slug, c.response.slug)} for c in s.cases]
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
    captions = [
        {
            "stem": own_math("step"),
            "caption": f"Step response of {out_sig.name}: state feedback with the true state (reference), and the shipped controller ({ctrl.description}) with a matched and with a mismatched initial estimate.",
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
    study_ctx = None
    if s.speed_study:
        study_ctx = {
            "text": (
                "The observer poles of the shipped controller were set to a factor times the controller"
                " poles, from 0.5 to 10, the controller rebuilt numerically, and the mismatched-estimate"
                " case simulated for each. A slow observer lets the estimation error"
                " dominate the response; a fast one costs input amplitude (and noise sensitivity, not modelled)."
            ),
            "rows": [
                {
                    "factor": own_math(latex_number(f, 3)),
                    "overshoot": own_math(latex_number(m.overshoot_percent or 0.0, 3)),
                    "settling": own_math(
                        "\\text{--}"
                        if m.settling_time_2pct is None
                        else latex_number(m.settling_time_2pct, 3)
                    ),
                    "peak": own_math(
                        "\\text{--}" if m.peak_control is None else latex_number(m.peak_control, 4)
                    ),
                }
                for f, m in s.speed_study
            ],
        }
        captions.append(
            {
                "stem": own_math("observer-study"),
                "caption": "Observer-speed study: overshoot, settling time and peak input against the speed factor (mismatched estimate).",
            }
        )
    method = (
        f"The shipped loop (plant and controller: {ctrl.description}) was simulated for a step of"
        f" {s.reference:g} on {out_sig.name} over {s.horizon:.4g} s with {s.samples} samples."
        f" Method: {s.method}."
    )
    del band
    ctx = {
        "method": method,
        "summary": summary,
        "cases": cases_ctx,
        "colspec": own_math("@{}p{0.3\\textwidth}" + "r" * len(cases_ctx) + "@{}"),
        "table": table,
        "remarks": list(s.remarks),
        "figures": captions,
        "study": study_ctx,
    }
    return ctx, figures
