"""The simulation study for the terminal and as JSON (``gainsmith simulate``).

Renders a finished :class:`~symbolic.analysis.study.SimulationStudy` and its requirements
table (:class:`~symbolic.analysis.requirements.RequirementTable`); computes nothing.
"""

from __future__ import annotations

import math

from ..analysis.study import CaseOutcome, SimulationStudy
from ..model.results import Derivation

__all__ = ["requirements_text", "simulation_json", "simulation_text"]

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
