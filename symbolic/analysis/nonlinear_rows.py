"""The requirement rows of the nonlinear check (:mod:`symbolic.analysis.nonlinear_study`).

A design written as a ``[model]`` gets a row for the reference steps on the nonlinear plant
and, when ``[model.required_offsets]`` names offsets, one for the recovery from them.  A
controller the study could not run (an output that depends on the input) gets a
failing row saying so: a verdict never passes on a check that was not made.
"""

from __future__ import annotations

from .nonlinear_study import SETTLING_BAND, NonlinearStudy

__all__ = ["nonlinear_rows"]


def _g(x: float, digits: int = 4) -> str:
    return f"{float(x):.{digits}g}"


def _unit(unit: str) -> str:
    return f" {unit}" if unit else ""


def nonlinear_rows(d, study: NonlinearStudy | None) -> list[dict]:
    """The rows (dicts for :class:`~symbolic.analysis.requirements.Requirement`)."""
    if study is None:
        return []
    unit = _unit(d.design.plant.outputs[d.design.tracking.output].unit)
    source = "[model] steps" if d.design.model.steps else "[simulation] reference (¼ to 2 times)"
    if study.skipped:
        return [
            dict(
                key="nonlinear_steps",
                label="steps on the nonlinear plant",
                requested="settle within the band",
                achieved="not checked",
                passed=False,
                shortfall=study.skipped,
                basis=study.method,
                source=source,
            )
        ]
    worst = max(study.steps, key=lambda s: s.final_error)
    sizes = ", ".join(_g(s.size) for s in study.steps)
    failed = [s for s in study.steps if not s.settled]
    rows = [
        dict(
            key="nonlinear_steps",
            label="steps on the nonlinear plant",
            requested=f"steps of {sizes}{unit} end within {100 * SETTLING_BAND:g} % of the step",
            achieved=(
                f"largest final error {100 * worst.final_error:.3g} % ({_g(worst.size)}{unit} step)"
                if not worst.note
                else f"the {_g(worst.size)}{unit} step {worst.note}"
            ),
            passed=not failed,
            shortfall=""
            if not failed
            else "; ".join(
                f"{_g(s.size)}{unit}: " + (s.note or f"ends {100 * s.final_error:.3g} % off")
                for s in failed
            ),
            basis=study.method + "; band 2 % common practice, no source",
            source=source,
            requested_value=SETTLING_BAND,
            achieved_value=float(worst.final_error),
        )
    ]
    required = [r for r in study.reach if r.required is not None]
    if required:
        short = [r for r in required if not r.passed]
        rows.append(
            dict(
                key="nonlinear_reach",
                label="recovery from an initial offset (nonlinear plant)",
                requested=", ".join(
                    f"{r.state} ±{_g(r.required)}{_unit(r.unit)}" for r in required
                ),
                achieved=", ".join(
                    f"{r.state} −{_g(r.below, 3)}/+{_g(r.above, 3)}{_unit(r.unit)}"
                    for r in required
                ),
                passed=not short,
                shortfall="; ".join(
                    f"{r.state} returns only from ±{_g(r.reach, 3)}{_unit(r.unit)}" for r in short
                ),
                basis=(
                    "along each state axis, " + study.reach_method + " (an estimate from"
                    " simulations, not a proof)"
                ),
                source="[model.required_offsets]",
            )
        )
    return rows
