"""The memo's optimal-poles section: the Riccati solutions, and the optimal loop beside the other.

Plain data for ``templates/memo_optimal.*.j2`` from a finished derivation and its shipped
controller: the weights, the solution P, the optimal gain and the poles before and after
rounding (:mod:`symbolic.derivation.optimal`), and the side-by-side table of
:func:`symbolic.analysis.pole_comparison.pole_comparison`.  Formulas are typeset here and
marked trusted (:func:`~symbolic.render.mathvalues.own_math`); every sentence is plain text.
"""

from __future__ import annotations

from ..analysis.pole_comparison import ComparedLoop, pole_comparison
from ..model.results import Derivation, OptimalPoles
from .mathtex import pole_latex
from .mathvalues import OwnMath, latex_matrix, latex_number, own_math
from .memo_math import metric_math, poles_math

__all__ = ["optimal_context"]

#: The references of the section (full citations).
REFERENCES = (
    "B. D. O. Anderson and J. B. Moore, Optimal Control: Linear Quadratic Methods, Prentice"
    " Hall, 1990, Ch. 2 and 3 (the regulator and its Riccati equation)",
    "R. E. Kalman and R. S. Bucy, New results in linear filtering and prediction theory,"
    " Journal of Basic Engineering 83(1):95-108, 1961 (the steady-state filter)",
)


def _riccati_block(o: OptimalPoles, shipped) -> dict:
    """The weights, P, the optimal gain and the poles of one optimal choice, typeset."""
    if o.kind == "controller":
        names = ("Q", "R", "K_{\\mathrm{opt}} = R^{-1} B^{\\mathsf T} P", "K")
        title = "State feedback (linear-quadratic regulator)"
        equation = "A^{\\mathsf T} P + P A - P B R^{-1} B^{\\mathsf T} P + Q = 0"
    else:
        names = ("W", "V", "L_{\\mathrm{opt}} = P C^{\\mathsf T} V^{-1}", "L")
        title = "Observer (steady-state Kalman–Bucy filter)"
        equation = "A P + P A^{\\mathsf T} - P C^{\\mathsf T} V^{-1} C P + W = 0"
    weight, noise, optimal, derived = names
    return {
        "title": title,
        "equation": own_math(equation),
        "weights": own_math(
            f"{weight} = {latex_matrix(o.weight, 4)},\\quad"
            f" {noise} = {latex_matrix(o.input_weight, 4)}"
        ),
        "riccati": own_math("P = " + latex_matrix(o.riccati, 5)),
        "gain": own_math(f"{optimal} = {latex_matrix(o.gain, 6)}"),
        "derived": own_math(f"{derived} = {latex_matrix(shipped, 6)}"),
        "poles": poles_math(o.poles),
        "digits": o.digits,
        "residual": own_math(latex_number(o.residual, 2)),
    }


def _margin_cells(loop: ComparedLoop) -> tuple:
    m = loop.margins
    if m is None:
        dash = metric_math(None)
        return dash, dash, dash
    lo, hi = m.gain_margin_db_lower, m.gain_margin_db_upper
    down = own_math("\\infty" if lo is None else latex_number(lo, 3))
    up = own_math("\\infty" if hi is None else latex_number(hi, 3))
    return down, up, metric_math(m.phase_margin_deg, 3)


def _cell_poles(poles) -> OwnMath:
    """Poles for a narrow table cell: each pole one unbreakable group, a line break allowed
    only after the comma between two poles (never inside ``-26.66 + 20.92j``)."""
    return own_math(",\\allowbreak\\; ".join("{" + pole_latex(z, 4) + "}" for z in poles))


def _rows(loops: list[ComparedLoop], band: float, unit: str) -> list[dict]:
    """One row per figure, one cell per loop."""
    u = f" [{unit}]" if unit else ""
    margins = [_margin_cells(loop) for loop in loops]
    rows = [
        ("controller poles", [_cell_poles(loop.controller_poles) for loop in loops]),
        ("observer poles", [_cell_poles(loop.observer_poles) for loop in loops]),
        ("peak input, matched estimate" + u, [metric_math(loop.peak_input) for loop in loops]),
        (
            "peak input, mismatched estimate" + u,
            [metric_math(loop.peak_input_mismatched) for loop in loops],
        ),
        ("overshoot [%]", [metric_math(loop.overshoot_percent) for loop in loops]),
        (
            f"settling time ({100 * band:g} % band) [s]",
            [metric_math(loop.settling_time) for loop in loops],
        ),
        ("rise time (10-90 %) [s]", [metric_math(loop.rise_time) for loop in loops]),
        ("gain margin, gain down [dB]", [m[0] for m in margins]),
        ("gain margin, gain up [dB]", [m[1] for m in margins]),
        ("phase margin [deg]", [m[2] for m in margins]),
    ]
    return [{"label": label, "cells": cells} for label, cells in rows]


def optimal_context(d: Derivation, controller) -> dict | None:
    """The section's context, or None when neither pole set comes from the optimal rule.

    ``controller`` is the shipped controller of ``d``
    (:class:`symbolic.verification.shipped.ShippedController`).
    """
    comparison = pole_comparison(d, controller)
    if comparison is None:
        return None
    blocks = []
    if d.controller_poles.optimal is not None:
        blocks.append(_riccati_block(d.controller_poles.optimal, d.K.value))
    if d.observer_poles.optimal is not None:
        blocks.append(_riccati_block(d.observer_poles.optimal, d.L.value))
    loops = [comparison.shipped] + ([comparison.alternative] if comparison.alternative else [])
    unit = d.design.plant.inputs[0].unit if d.design.plant.inputs else ""
    notes = [
        f"{loop.label}: margins not computed ({loop.margins_note})"
        for loop in loops
        if loop.margins is None and loop.margins_note
    ]
    notes += [f"{loop.label}: the loop is not stable" for loop in loops if not loop.stable]
    return {
        "blocks": blocks,
        "columns": [loop.label for loop in loops],
        "rows": _rows(loops, comparison.settling_band, unit),
        "colspec": own_math(
            "@{}" + ">{\\raggedright\\arraybackslash}p{0.3\\textwidth}" * (1 + len(loops)) + "@{}"
        ),
        "alternative_rule": comparison.alternative_rule,
        "compared": comparison.alternative is not None,
        "horizon": own_math(latex_number(comparison.horizon, 4)),
        "reference": own_math(latex_number(comparison.reference, 4)),
        "notes": notes,
        "references": list(REFERENCES),
    }
