"""The memo's pages on a nonlinear ``[model]``: the equations, the operating point and the
linearisation (``templates/memo_model.*.j2``, before the plant section), and the shipped
controller on the nonlinear plant (``templates/memo_nonlinear.*.j2``, after the robustness
section), as plain data and figure makers.

The study is :func:`symbolic.analysis.nonlinear_study.nonlinear_study`, the one whose rows the
requirements table judges.  Formulas are typeset here by our own code and marked trusted.
"""

from __future__ import annotations

import functools

import sympy as sp

from ..analysis.nonlinear_study import (
    RETURN_FRACTION,
    SETTLING_BAND,
    NonlinearStudy,
)
from ..model.results import Derivation
from .figure_server import render_figures
from .mathtex import LONG, equation_lines, expr_latex, symbol_latex
from .mathvalues import latex_number, own_math
from .memo_design import unit_parts

__all__ = ["model_context", "memo_nonlinear"]


def _value_latex(expr: sp.Expr, values) -> str:
    """``expr`` and, when it is not a plain number, ``≈`` its value at the nominal point."""
    number = float(expr.xreplace(values).evalf(17))
    if expr.is_Rational:
        return latex_number(number)
    return f"{expr_latex(expr)} \\approx {latex_number(number)}"


def model_context(d: Derivation) -> dict | None:
    """Equations, operating point and the Jacobians' meaning; None without a ``[model]``."""
    model = d.design.model
    if model is None:
        return None
    plant, values = d.design.plant, d.design.values
    point = model.operating_point
    lines = []
    for signal, f in zip(plant.states, model.state_equations, strict=True):
        lines += equation_lines(f"\\dot{{{symbol_latex(signal.name)}}}", f, LONG)
    for signal, h in zip(plant.outputs, model.output_equations, strict=True):
        lines += equation_lines(symbol_latex(signal.name), h, LONG)
    rows = []
    for kind, signals, exprs in (
        ("state", plant.states, point.states),
        ("input", plant.inputs, point.inputs),
        ("output", plant.outputs, point.outputs),
    ):
        for signal, value in zip(signals, exprs, strict=True):
            rows.append(
                {
                    "symbol": own_math(symbol_latex(signal.name) + "^{*}"),
                    "name": signal.name,
                    "kind": kind,
                    "value": own_math(_value_latex(value, values)),
                    "unit": unit_parts(signal.unit),
                    "given": signal.name in point.given,
                }
            )
    return {
        "equations": [own_math(x) for x in lines],
        "point": rows,
        "given": ", ".join(point.given),
        "closed_form": point.closed_form,
        "ranges": [
            {"name": s.name, "low": r[0], "high": r[1], "unit": unit_parts(s.unit)}
            for s, r in zip(plant.states, model.state_ranges, strict=True)
            if r is not None
        ],
    }


def memo_nonlinear(
    d: Derivation, study: NonlinearStudy | None
) -> tuple[dict | None, dict[str, bytes]]:
    """Context and figures of the nonlinear-plant section; (None, {}) without a model."""
    if study is None:
        return None, {}
    plant = d.design.plant
    y = plant.outputs[d.design.tracking.output]
    u = plant.inputs[0]
    ctx = {
        "skipped": study.skipped,
        "method": study.method,
        "horizon": study.horizon,
        "u_max": study.u_max,
        "band_percent": 100 * SETTLING_BAND,
        "return_percent": 100 * RETURN_FRACTION,
        "reach_method": study.reach_method,
        "output": y.name,
        "output_unit": unit_parts(y.unit),
        "steps": [
            {
                "size": s.size,
                "final_percent": 100 * s.final_error if s.final_error != float("inf") else None,
                "difference_percent": 100 * s.largest_difference,
                "settled": s.settled,
                "note": s.note,
            }
            for s in study.steps
        ],
        "reach": [
            {
                "state": r.state,
                "unit": unit_parts(r.unit),
                "below": r.below,
                "above": r.above,
                "bound_below": r.bound_below,
                "bound_above": r.bound_above,
                "at_bound_below": r.below >= r.bound_below * (1 - 1e-12),
                "at_bound_above": r.above >= r.bound_above * (1 - 1e-12),
                "required": r.required,
                "passed": r.passed,
                "note": r.note,
                "scale": scale,
            }
            for r, scale in zip(
                study.reach, study.scales or (None,) * len(study.reach), strict=True
            )
        ],
        "figures": [],
    }
    if study.skipped or not study.steps:
        return ctx, {}
    makers, ctx["figures"] = _figures(d, study, y, u)
    return ctx, render_figures(makers)


def _figures(d: Derivation, study: NonlinearStudy, y, u) -> tuple[dict, list[dict]]:
    """Figure makers (file stem to partial over plain data) and their captions."""
    from . import nonlinear_figures as nf

    name = d.design.slug
    makers = {
        f"{name}-nonlinear-steps": functools.partial(
            nf.nonlinear_steps_figure,
            [(s.size, s.time, s.output, s.linear_output, s.control) for s in study.steps],
            (y.name, y.unit),
            (u.name, u.unit),
            study.u_max,
        ),
        f"{name}-reach": functools.partial(
            nf.reach_figure,
            [
                (r.state, r.unit, r.below, r.above, r.bound_below, r.bound_above, r.required)
                for r in study.reach
            ],
        ),
    }
    captions = [
        {
            "stem": own_math("nonlinear-steps"),  # file names of our own: trusted
            "caption": (
                f"Reference steps on the nonlinear plant (solid) and the linear loop's prediction"
                f" (dashed), each divided by its step size: top, the tracked output {y.name};"
                f" bottom, the input deviation from the operating point, {u.name} − {u.name}*"
                + (", with the input limit dotted." if study.u_max is not None else ".")
            ),
        },
        {
            "stem": own_math("reach"),
            "caption": (
                "Estimated reach of the loop along each state axis: the bar spans the initial"
                " offsets from the operating point from which the simulated loop returned, as a"
                " fraction of the search bound on each side (1 means the whole bound); a diamond"
                " marks a required offset."
            ),
        },
    ]
    return makers, captions
