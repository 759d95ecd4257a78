"""Simulation study of a finished design: cases, spec verdicts, saturation, observer speed.

Consumes a :class:`~symbolic.model.results.Derivation` (never re-derives the
gains) and the simulator of :mod:`symbolic.verification.stepping`; feeds the
``gainsmith simulate`` command (:func:`simulation_run`), rendered by
:mod:`symbolic.render.study_pages`, and the memo's response section
(:mod:`symbolic.render.study_memo`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..model.numbers import format_poles
from ..model.results import Derivation
from ..runtime.errors import GainsmithError
from ..verification.horizon import horizon_from_poles
from ..verification.metrics import step_metrics
from ..verification.shipped import ShippedController
from ..verification.shipped_assembly import (
    build_controller,
    shipped_controller,
    state_feedback_reference,
)
from ..verification.shipped_simulation import simulate_controller
from ..verification.step_cases import MISMATCH_FRACTION
from ..verification.step_results import Response, StepMetrics
from .claims import check_claims
from .requirements import RequirementTable
from .verdict import requirement_table

__all__ = [
    "CaseOutcome",
    "SimulationRun",
    "SimulationStudy",
    "SpecVerdict",
    "simulation_run",
    "simulation_study",
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
    :func:`symbolic.verification.step_cases.default_mismatch`)."""
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


@dataclass(frozen=True)
class SimulationRun:
    """What ``gainsmith simulate`` reports: the study and the requirements judged on it."""

    derivation: Derivation
    study: SimulationStudy
    #: every requirement, judged on the shipped controller (the claims included, when the
    #: design file has a ``[claimed]`` table)
    requirements: RequirementTable

    @property
    def passed(self) -> bool:
        """Every requirement met (the command then exits with 0, else with 1)."""
        return self.requirements.passed

    def _repr_html_(self) -> str:  # Jupyter: the requirements table
        return self.requirements._repr_html_()


def simulation_run(d: Derivation) -> SimulationRun:
    """The ``gainsmith simulate`` command: simulate the derivation and judge every requirement."""
    s = simulation_study(d)
    claims = None
    if d.design.claims is not None:
        claims = check_claims(d, d.design.claims)
    return SimulationRun(d, s, requirement_table(d, s, claims=claims))
