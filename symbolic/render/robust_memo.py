"""The memo's robustness section: the robustness study as plain data, and its figures.

Runs :func:`symbolic.analysis.robust.robustness_study` and lays the report out for the memo
templates; the figures are drawn by :mod:`symbolic.render.robust_figures`.
"""

from __future__ import annotations

import functools
import re

from ..analysis.robust import CAUTION, RobustnessReport, robustness_study
from ..analysis.routh import StateFeedbackStability, rounded
from ..analysis.sensitivity import SensitivityTable, entry_labels
from ..model.results import Derivation
from . import robust_figures as rf
from .figure_server import render_figures
from .mathtex import equation_lines, latex_of
from .robust_pages import (
    check_json,
    margin_json,
    margin_rows,
    pair_text,
    point_text,
    sensitivity_values,
)

__all__ = ["memo_robustness"]

#: What the margins table of the memo means.
_MARGIN_DEFINITIONS = (
    "The loop is broken at the plant input and multiplied by a gain factor k; the"
    " closed loop is stable for k between the two limits (confirmed by its eigenvalues"
    " on both sides of each limit). Upper gain margin 20 log10(k_high), lower"
    " 20 log10(1/k_low). Phase margin arg L(jω_c) + 180° at each gain crossover ω_c (the"
    " one of least magnitude is shown); delay margin min((arg L(jω_c) + π) mod 2π)/ω_c."
    " The Nyquist criterion (encirclements of −1 = open-loop unstable poles) is"
    " verified for both loops."
)


def memo_robustness(
    d: Derivation, points: int = 5, *, budget: float | None = None
) -> tuple[dict, dict[str, bytes]]:
    """Plain data of the memo's robustness section, and its figures (PDF and PNG).

    Returns
    -------
    context : dict
        Strings, numbers, lists and dicts only (no LaTeX markup except in
        keys ending in ``_latex``, which hold ``sympy.latex`` output of our
        own expressions); the memo escapes and lays it out.
    figures : dict
        ``{file name: bytes}`` from :func:`symbolic.render.figures.figure_files`.
    """
    # the memo shows the sensitivities as numbers: the same exact derivatives as the
    # robustness command, only their formulas are not factored
    r = robustness_study(d, points, budget=budget, factor=False)
    m = r.mismatch
    makers, captions = _figures_and_captions(d, r)
    figures = render_figures(makers)  # drawn in parallel, same bytes
    ctx = {
        "points": r.points,
        "grid_size": m.grid.size,
        "varied": list(m.grid.varied),
        "all_stable": m.all_stable,
        "unstable_count": m.unstable_count,
        "unstable_points": [point_text(p, m.grid.varied) for p in m.unstable_points],
        "worst_damping_ratio": m.worst_damping_ratio,
        "worst_damping_at": point_text(m.worst_damping_at, m.grid.varied),
        "least_stable_pole": pair_text(m.least_stable_pole),
        "least_stable_parts": [
            float(complex(m.least_stable_pole).real),
            abs(float(complex(m.least_stable_pole).imag)),
        ],
        "least_stable_at": point_text(m.least_stable_at, m.grid.varied),
        "stability_changes": [c.text() for c in m.changes],
        "routh_hurwitz": _statements(r.stability),
        "routh_hurwitz_conditions": _conditions(r.stability),
        "routh_polynomial_latex": _polynomial_shape(r.stability.order),
        "sensitivity_method": r.sensitivities.method,
        "sensitivities": sensitivity_values(r.sensitivities),
        "sensitivity_headers": ["gain", *r.sensitivities.parameters],
        "sensitivity_gains_latex": entry_labels(d, "tex"),
        "sensitivity_rows": _sensitivity_rows(r.sensitivities),
        "margins": None if r.margins is None else _margins_context(r),
        "checks": [check_json(c) for c in r.checks],
        "notes": list(r.notes),
        "caution": CAUTION,
        "figures": captions,
        "passed": r.passed,
    }
    return ctx, figures


def _figures_and_captions(d: Derivation, r: RobustnessReport) -> tuple[dict, list[dict]]:
    """``{file stem: maker}`` of the section's figures, and their captions in order.

    The makers are partials of module-level functions over plain data: they pickle, so the
    figure server can draw them.
    """
    m = r.mismatch
    name = d.design.slug
    makers = {
        f"{name}-mismatch-poles": functools.partial(
            rf.mismatch_pole_figure,
            m.poles[:-1] if m.grid.varied else m.poles,
            m.stable[:-1] if m.grid.varied else m.stable,
            d.controller_poles.values,
            d.observer_poles.values,
        )
    }
    captions = [{"stem": f"{name}-mismatch-poles", "caption": _mismatch_caption(d, r)}]
    if r.margins is None:
        return makers, captions
    loops = (r.margins.state_feedback, r.margins.observer_based)
    makers[f"{name}-loop-bode"] = functools.partial(rf.loop_magnitude_phase_figure, loops)
    makers[f"{name}-loop-nyquist"] = functools.partial(rf.loop_polar_figure, loops)
    captions.append({"stem": f"{name}-loop-bode", "caption": _bode_caption(loops)})
    captions.append(
        {
            "stem": f"{name}-loop-nyquist",
            "caption": (
                "Nyquist plot of both loops (ω from −∞ to ∞; the mirror image for negative ω"
                " is drawn thin) with the unit circle and the critical point −1 (a plus sign);"
                " left: the whole curve with its radius compressed to log10(1 + |L|); right:"
                " near −1, true scale."
            ),
        }
    )
    return makers, captions


def _mismatch_caption(d: Derivation, r: RobustnessReport) -> str:
    """The caption of the mismatch pole figure, from what it draws."""
    m = r.mismatch
    varied = m.grid.varied
    points = m.grid.values.shape[0] - (1 if varied else 0)
    text = (
        f"Closed-loop poles of the continuous loop of K with the full-order observer L at"
        f" {points} parameter {'point' if points == 1 else 'points'} (grey dots; controller and"
        " observer designed at the"
        " nominal values); the nominal point is marked by its controller poles (crosses, ×)"
        " and observer poles (plus signs, +)."
    )
    if m.unstable_count:
        count = m.unstable_count
        where = "the unstable point" if count == 1 else f"the {count} unstable points"
        text += f" Poles at {where} are red triangles."
    else:
        text += " Every point is stable."
    if d.integral is not None or d.reduced_observer is not None or d.discrete is not None:
        text += (
            " The shipped controller (integral action, reduced-order observer or digital, as"
            " the design asks) is judged separately in the requirements table."
        )
    return text


def _bode_caption(loops) -> str:
    """The Bode caption: the crossovers it marks, and which are absent."""
    gain = any(len(x.gain_crossovers_rad_s) for x in loops)
    phase = any(w > 0 for x in loops for w in x.phase_crossovers_rad_s)
    text = (
        "Bode plot of the loop broken at the plant input: state feedback with the true state"
        " (solid) and the observer-based compensator (dashed)"
    )
    marks = []
    if gain:
        marks.append("gain crossovers by circles, with the phase margin as a bar to −180°")
    if phase:
        marks.append("phase crossovers by diamonds, with the gain margin as a bar to 0 dB")
    text += "; " + " and ".join(marks) + "." if marks else "."
    if not phase:
        text += " Neither loop crosses −180° at a positive frequency."
    return text


def _margins_context(r: RobustnessReport) -> dict:
    """The side-by-side margins table of both loops, with their numbers and definitions."""
    return {
        "headers": ["Quantity", "State feedback", "Observer-based"],
        "rows": _margin_rows(r),
        "state_feedback": margin_json(r.margins.state_feedback),
        "observer_based": margin_json(r.margins.observer_based),
        "definitions": _MARGIN_DEFINITIONS,
    }


#: A gain margin the table leaves empty (None) means the loop stays stable however far
#: the gain moves that way, provided it is stable at the design gain.
_UNLIMITED = {
    "upper gain margin": ("gain_margin_db_upper", "unlimited (stable as k → ∞)"),
    "lower gain margin": ("gain_margin_db_lower", "unlimited (stable as k → 0)"),
}


def _margin_rows(r: RobustnessReport) -> list[list[str]]:
    """The rows of the margins table, with "unlimited" where a margin has no bound and
    "none" where the loop is unstable at the design gain."""
    loops = (r.margins.state_feedback, r.margins.observer_based)
    rows = [list(row) for row in margin_rows(r.margins)]
    for row in rows:
        for prefix, (field, unlimited) in _UNLIMITED.items():
            if not row[0].startswith(prefix):
                continue
            for column, report in enumerate(loops, start=1):
                if getattr(report, field) is None:
                    row[column] = (
                        unlimited if report.closed_loop_stable else "none (unstable at k = 1)"
                    )
        if row[0] == "stable gain factors k":
            for column, report in enumerate(loops, start=1):
                if not report.closed_loop_stable:
                    row[column] = "none (unstable at k = 1)"
    return rows


def _conditions(stability: StateFeedbackStability) -> list[dict]:
    """The closed-form Routh–Hurwitz conditions (none for n > 3), with their LaTeX.

    ``lines_latex`` are the lines of an ``align*`` block, ``name ⇔ 0 < reduced``, broken
    to fit the page (one line: the condition fits in the body).
    """
    if stability.conditions is None:
        return []
    out = []
    for c in stability.conditions:
        name = condition_name_latex(c.name)
        shown = rounded(c.reduced, 6)
        if c.reduced.is_number:
            lines = [f"{name} &\\quad \\text{{{'always' if c.reduced > 0 else 'never'} holds}}"]
        else:
            lines = equation_lines(f"{name} \\;\\Leftrightarrow\\; 0", shown, relation="<")
        out.append(
            {
                "name": c.name,
                "text": c.text(),
                "name_latex": name,
                "expression_latex": latex_of(shown) + " > 0",
                "lines_latex": [str(x) for x in lines],
                "assumption": c.assumption,
            }
        )
    return out


def _polynomial_shape(n: int) -> str:
    """``\\det(sI - (A_t - B_t K)) = s^{n} + a_{n-1} s^{n-1} + … + a_{0}``."""
    terms = [f"s^{{{n}}}"] + [
        f"a_{{{k}}} s^{{{k}}}" if k > 1 else (f"a_{{{k}}} s" if k == 1 else f"a_{{{k}}}")
        for k in range(n - 1, -1, -1)
    ]
    return r"\det\bigl(sI - (A_t - B_t K)\bigr) = " + " + ".join(terms)


_COEFFICIENT = re.compile(r"a(\d+)")


def condition_name_latex(name: str) -> str:
    """The name of a condition (our own text, ``"a2·a1 − a0 > 0"``) as LaTeX."""
    latex = _COEFFICIENT.sub(r"a_{\1}", name).replace("·", r"\,").replace("−", "-")
    if not re.fullmatch(r"[a_{}\d\\, +\-<>=]*", latex):  # never for the analysis' names
        raise ValueError(f"unexpected condition name {name!r}")
    return latex


def _statements(stability: StateFeedbackStability) -> list[str]:
    """The report's statements without the indented detail lines (the stability changes,
    listed in the mismatch part, and the conditions, typeset apart), and without the
    closed-form header (the template says it in its own words)."""
    statements = [line for line in stability.lines if not line.startswith("  ")]
    statements = statements[1:] if stability.conditions is not None else statements
    return [_sentence(line) for line in statements]


def _sentence(line: str) -> str:
    """A statement as a sentence of the memo: a capital first letter and a full stop; a
    statement whose detail lines were left out points to where they are."""
    text = line[:1].upper() + line[1:]
    if text.endswith(":"):
        return text[:-1] + " (the points are listed under the parameter mismatch above)."
    return text if text.endswith(".") else text + "."


def _sensitivity_rows(table: SensitivityTable) -> list[list[str]]:
    """One row per gain entry: its label, then its sensitivity to each parameter."""
    return [
        [g]
        + [
            "–" if table.value(g, p) is None else f"{table.value(g, p):.4g}"
            for p in table.parameters
        ]
        for g in table.gains
    ]
