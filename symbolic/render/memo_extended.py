"""Memo sections of integral action, the reduced-order observer and the digital controller.

Each section is None unless the design asks for it; the numbers and formulas come from the
result objects that :func:`symbolic.derive` attached (nothing is re-derived here).  The
studies run here (reference gain against integral action, the sampled-data loop against
the continuous design); the figures are drawn by :mod:`symbolic.render.extended_figures`
through :func:`symbolic.render.figure_server.render_figures`.
"""

from __future__ import annotations

import functools
from collections.abc import Callable

import numpy as np

from ..model.results import Derivation
from .mathtex import expr_latex
from .mathvalues import latex_matrix, latex_number, own_math
from .memo_design import unit_parts
from .memo_math import (
    closed_matrix_math,
    factored,
    matrix_math,
    metric_math,
    plain_text,
    poles_math,
)

__all__ = ["extended_sections", "memo_extended_sections"]

#: Figure makers by file stem (``functools.partial`` objects, which the figure server pickles).
Makers = dict[str, Callable]


def extended_sections(d: Derivation) -> dict:
    """Memo context of integral action, the reduced-order observer and the digital controller.

    Each entry is None unless the design asks for it; the numbers and formulas come from the
    result objects that :func:`symbolic.derive` attached (nothing is re-derived here).  The
    figures are left out (see :func:`memo_extended_sections`).
    """
    return memo_extended_sections(d, figures=False)[0]


def memo_extended_sections(d: Derivation, *, figures: bool = True) -> tuple[dict, dict[str, bytes]]:
    """Context and figures of integral action, the reduced-order observer and the digital
    controller.

    The studies run here (reference gain against integral action, the sampled-data loop
    against the continuous design); the figures are drawn by
    :mod:`symbolic.render.extended_figures` through
    :func:`symbolic.render.figure_server.render_figures`.
    """
    out: dict = {"integral": None, "reduced": None, "digital": None}
    makers: Makers = {}
    if d.integral is not None:
        out["integral"] = _integral_section(d, makers)
    if d.reduced_observer is not None:
        out["reduced"] = _reduced_section(d)
    if d.discrete is not None:
        out["digital"] = _digital_section(d, makers)
    files: dict[str, bytes] = {}
    if figures and makers:
        from .figure_server import render_figures

        name = d.design.slug
        files = render_figures({f"{name}-{stem}": make for stem, make in makers.items()})
    return out, files


# --------------------------------------------------------------------------------------
# Integral action
# --------------------------------------------------------------------------------------
def _integral_section(d: Derivation, makers: Makers) -> dict:
    """Integral action: the augmented design, and the study against the reference gain."""
    from ..derivation.integral_study import integral_study

    ia = d.integral
    study = integral_study(d, ia)
    return {
        "figures": _integral_figures(d, study, makers),
        "convention": plain_text(ia.sign_convention),
        "pole_rule": plain_text(ia.pole_rule),
        "Aa": matrix_math("A_a", ia.A_augmented_closed_form, ia.A_augmented),
        "Ba": matrix_math("B_a", ia.B_augmented_closed_form, ia.B_augmented),
        # None when the closed form is too wide for a line: the numbers alone are printed
        "gain": closed_matrix_math(r"[K,\; k_i]", ia.closed_form),
        "gain_value": own_math(r"[K,\; k_i] = " + latex_matrix(ia.K_augmented, 6)),
        "poles": poles_math(np.array([complex(p) for p in ia.poles])),
        "determinant": None
        if ia.controllability_determinant is None
        else own_math(
            r"\det \mathcal{C}_a = " + expr_latex(factored(ia.controllability_determinant))
        ),
        "conditions": [plain_text(c) for c in ia.conditions],
        "reference": own_math(latex_number(study.reference, 4)),
        "error_unit": _tracked_unit(d),
        "disturbance_rule": plain_text(study.disturbance_rule),
        "mismatch_rule": plain_text(study.mismatch_rule),
        "anti_windup_rule": plain_text(study.anti_windup_rule) if study.windup else None,
        "runs": _integral_runs(study),
        "windup": None
        if not study.windup
        else [
            {
                "label": "with anti-windup" if w.anti_windup else "without anti-windup",
                "overshoot": metric_math(w.overshoot_percent, 3),
            }
            for w in study.windup
        ],
        "notes": [plain_text(n) for n in study.notes],
    }


def _tracked_unit(d: Derivation) -> list[dict] | None:
    """The unit of the output integral action tracks, as factors (None when it has none)."""
    unit = d.design.plant.outputs[d.integral.tracked_index].unit
    return unit_parts(unit) if unit else None


def _integral_runs(study) -> list[dict]:
    """The rows of the disturbance table; an error that is 0 at the printed precision of
    the table (the reference step and the largest error set its scale) prints as 0."""
    errors = [abs(e) for r in study.runs for e in (r.error_before, r.error_after) if e is not None]
    scale = max([abs(study.reference), *errors])
    return [
        {
            "loop": r.loop,
            "plant": r.plant_description,
            "before": metric_math(r.error_before, 3, scale),
            "after": metric_math(r.error_after, 3, scale),
            "overshoot": metric_math(r.overshoot_percent, 3),
        }
        for r in study.runs
    ]


def _integral_figures(d: Derivation, study, makers: Makers) -> list[dict]:
    """Captions of the integral-action figures; their makers are added to `makers`."""
    from . import extended_figures as xf

    plant = d.design.plant
    tracked = plant.outputs[d.integral.tracked_index]
    first_input = plant.inputs[0]
    captions = [
        {
            "stem": own_math("integral-action"),
            "caption": (
                f"Reference step of {study.reference:g}, then a step input disturbance of"
                f" {study.disturbance:.3g} at t = {study.disturbance_time:.3g} s: the reference-gain"
                " loop against integral action, on the nominal plant (top) and on the"
                " mismatched plants (bottom)."
            ),
        }
    ]
    makers["integral-action"] = functools.partial(  # pickles: the figure server draws it
        xf.integral_action_figure, study, tracked.name, tracked.unit
    )
    if study.windup:
        captions.append(
            {
                "stem": own_math("anti-windup"),
                "caption": (
                    f"Integral action with the input limited to ±{study.u_max:g}:"
                    " without and with the back-calculation anti-windup."
                ),
            }
        )
        makers["anti-windup"] = functools.partial(
            xf.anti_windup_figure,
            study.windup,
            tracked.name,
            tracked.unit,
            first_input.name,
            first_input.unit,
            study.reference,
            study.u_max,
        )
    return captions


# --------------------------------------------------------------------------------------
# Reduced-order observer
# --------------------------------------------------------------------------------------
def _reduced_section(d: Derivation) -> dict:
    """The reduced-order observer: its transformation, gain, poles and equations."""
    ro = d.reduced_observer
    return {
        "order": ro.order,
        "measured": ro.measured,
        "T": matrix_math("T", ro.T_closed_form, ro.T),
        "Ke": matrix_math("K_e", ro.Ke_closed_form, ro.Ke),
        "Ke_value": own_math("K_e = " + latex_matrix(ro.Ke, 6)),
        "poles": poles_math(np.array([complex(p) for p in ro.poles])),
        "pole_rule": plain_text(ro.pole_rule),
        "closed_loop_poles": poles_math(
            np.array(sorted(ro.closed_loop_poles, key=lambda z: (z.real, z.imag)))
        ),
        "factors": ro.factors_as_expected,
        "comparison": plain_text(ro.comparison),
        "equations": own_math(
            r"\dot\eta = \hat A \eta + \hat B \bar y + \hat F u, \qquad"
            r" \hat x = T^{-1} \begin{bmatrix} \bar y \\ \eta + K_e \bar y \end{bmatrix},"
            r" \qquad \bar y = y - D u"
        ),
        "observer_matrices": own_math(
            ", \\quad ".join(
                matrix_math(name, (ro.observer_closed_form or {}).get(key), value)
                for name, key, value in (
                    (r"\hat A", "A_hat", ro.observer_matrix),
                    (r"\hat B", "B_hat", ro.output_input),
                    (r"\hat F", "F_hat", ro.control_input),
                )
            )
        ),
    }


# --------------------------------------------------------------------------------------
# Digital controller
# --------------------------------------------------------------------------------------
def _digital_section(d: Derivation, makers: Makers) -> dict:
    """The digital controller, and its sampled-data loop against the continuous design."""
    from ..verification.sampled_data import sampled_data_study

    dc = d.discrete
    section = _digital_design(dc)
    sampled = sampled_data_study(d, dc, form=dc.default_form)
    reference = abs(float(d.design.simulation.reference))
    plant = d.design.plant
    units = {
        "peak input": plant.inputs[0].unit,
        "steady-state error": plant.outputs[dc.tracked_index].unit,
    }
    section["comparison"] = [
        {
            "label": f"{label} [{units[label]}]" if units.get(label) else label,
            "continuous": metric_math(a, 4, _row_scale(label, a, b, reference)),
            "sampled": metric_math(b, 4, _row_scale(label, a, b, reference)),
        }
        for label, a, b in sampled.comparison()
    ]
    section["figures"] = _digital_figures(d, sampled, makers)
    return section


def _row_scale(label: str, a: float | None, b: float | None, reference: float) -> float:
    """The scale a row of the continuous-against-sampled table is printed at: its larger
    entry, and for the steady-state error the reference step it is an error of."""
    entries = [abs(x) for x in (a, b) if x is not None]
    if label.startswith("steady-state error"):
        entries.append(reference)
    return max(entries, default=0.0)


#: The difference equations of each observer form, typeset (the same equations as the
#: ``description`` of :class:`symbolic.derivation.difference_equations.DifferenceEquations`,
#: which the generated code carries as comments).
_FORM_EQUATIONS = {
    "current": (
        "current estimator",
        r"\hat x[k] = \bar x[k] + L_c\,\bigl(y[k] - C\bar x[k] - D u[k]\bigr)",
        r"\bar x[k+1] = \Phi\hat x[k] + \Gamma u[k]",
    ),
    "predictor": (
        "predictor observer",
        r"\hat x[k+1] = (\Phi - L_p C)\,\hat x[k] + (\Gamma - L_p D)\,u[k] + L_p y[k]",
    ),
    "reduced": (
        "reduced-order observer",
        r"\hat x[k] = T^{-1}\begin{bmatrix} \bar y[k] \\ \eta[k] + L_r \bar y[k] \end{bmatrix},"
        r" \quad \bar y[k] = y[k] - D u[k]",
        r"\eta[k+1] = \hat A \eta[k] + \hat B \bar y[k] + \hat F u[k]",
    ),
}


def _equations(dc) -> list[dict]:
    """The difference equations of each observer form of the digital controller, as
    display math: the estimate, the control law, the state update and the integrator."""
    integral = dc.integral is not None
    law = (
        r"u[k] = -K_d \hat x[k] - k_{i,d}\, x_I[k]"
        if integral
        else r"u[k] = -K_d \hat x[k] + N_d\, r[k]"
    )
    out = []
    for form in dc.equations:
        name, *lines = _FORM_EQUATIONS[form]
        lines = [lines[0], law, *lines[1:]] if form != "predictor" else [law, *lines]
        if integral:
            lines.append(r"x_I[k+1] = x_I[k] + T\,\bigl(y_t[k] - r[k]\bigr)")
        out.append({"name": name, "lines": [own_math(x) for x in lines]})
    return out


def _digital_design(dc) -> dict:
    """The hold-equivalent model, the gains in z and the sampling figures of merit."""
    return {
        "T": own_math(latex_number(dc.sample_time, 6)),
        "Phi": matrix_math(r"\Phi", dc.Phi_closed_form, dc.Phi),
        "Gamma": matrix_math(r"\Gamma", dc.Gamma_closed_form, dc.Gamma),
        "K": own_math("K_d = " + latex_matrix(dc.K, 6)),
        "Lp": own_math("L_p = " + latex_matrix(dc.L_predictor, 6)),
        "Lc": own_math("L_c = " + latex_matrix(dc.L_current, 6)),
        "N": None
        if dc.reference_gain is None
        else own_math("N_d = " + latex_matrix(dc.reference_gain, 6)),
        "controller_z": poles_math(dc.controller_poles_z),
        "observer_z": poles_math(dc.observer_poles_z),
        "bandwidth": None if dc.bandwidth is None else own_math(latex_number(dc.bandwidth, 4)),
        "ratio": None
        if dc.sampling_ratio is None
        else own_math(latex_number(dc.sampling_ratio, 3)),
        "lag": None
        if dc.hold_phase_lag is None
        else own_math(latex_number(float(np.degrees(dc.hold_phase_lag)), 3)),
        "equations": _equations(dc),
        "method": plain_text(dc.method),
        "integral": None
        if dc.integral is None
        else {
            "gain": own_math(r"[K_d,\; k_{i,d}] = " + latex_matrix(dc.integral.K_augmented, 6)),
            "pole_z": poles_math(np.array([dc.integral.integral_pole_z])),
        },
        "reduced": None
        if dc.reduced is None
        else {
            "gain": own_math("L_r = " + latex_matrix(dc.reduced.L, 6)),
            "poles_z": poles_math(dc.reduced.poles_z),
        },
        "form": dc.default_form,
        "figures": [],
        "comparison": [],
    }


def _digital_figures(d: Derivation, sampled, makers: Makers) -> list[dict]:
    """Caption of the sampled-data figure; its maker is added to `makers`."""
    from . import extended_figures as xf

    dc = d.discrete
    plant = d.design.plant
    first_input = plant.inputs[0]
    out_signal = plant.outputs[dc.tracked_index]
    makers["sampled-data"] = functools.partial(
        xf.sampled_data_figure,
        sampled,
        out_signal.name,
        out_signal.unit,
        first_input.name,
        first_input.unit,
        float(d.design.simulation.reference),
        tracked=dc.tracked_index,
    )
    return [
        {
            "stem": own_math("sampled-data"),
            "caption": (
                f"The continuous plant driven by the digital controller ({dc.default_form} form,"
                f" T = {dc.sample_time:g} s, zero-order hold) against the continuous design:"
                " the output between the samples, the samples the controller saw, and the"
                " held input."
            ),
        }
    ]
