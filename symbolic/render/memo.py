"""The design memo: LaTeX/PDF and Markdown from one finished derivation.

Flow: :func:`build_memo` takes a :class:`~symbolic.model.results.Derivation` and
the simulation study, assembles a template context (plain strings are
escaped by the template environment itself; only formulas that our own
code typeset are marked trusted, in :func:`_math`), renders
``templates/memo.tex.j2`` and ``templates/memo.md.j2`` and the figures.
:func:`write_memo` compiles the PDF (locked down, see :mod:`symbolic.render.pdf`)
and publishes every file atomically (:mod:`symbolic.runtime.publish`).
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import functools
import os
import re
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import sympy as sp

from ..derivation.pipeline import derive
from ..model.design import Design
from ..model.labels import gain_label
from ..model.results import Derivation
from ..runtime.errors import RenderError
from ..runtime.version import __version__
from .mathtex import (
    equation_lines,
    expr_latex,
    matrix_latex,
    poles_latex,
    polynomial_latex,
    symbol_latex,
)
from .mathvalues import OwnMath, latex_matrix, latex_number, own_math
from .texsafe import TrustedLatex, TrustedMarkdown, render_template

__all__ = ["MemoDocument", "assemble_memo", "build_memo", "write_memo", "memo_date"]

#: A symbolic matrix longer than this (characters of LaTeX) is shown numerically instead.
MATRIX_LIMIT = 700
#: A closed-form entry longer than this (characters of LaTeX) is not printed (see export).
FORMULA_LIMIT = 4000
#: Expressions with more operations than this are shown as they are, not factored.
FACTOR_LIMIT = 400


def _factored(expr: sp.Expr) -> sp.Expr:
    """``factor`` for display, skipped on large expressions (it can take minutes)."""
    if sp.count_ops(expr) > FACTOR_LIMIT:
        return expr
    return sp.factor(expr)


def _for_kind(obj: Any, kind: str) -> Any:
    if isinstance(obj, OwnMath):
        return TrustedLatex(str(obj)) if kind == "tex" else TrustedMarkdown(str(obj))
    if isinstance(obj, dict):
        return {k: _for_kind(v, kind) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_for_kind(v, kind) for v in obj]
    return obj


@dataclass(frozen=True)
class MemoDocument:
    """The rendered memo: sources and figure files, by file name."""

    name: str
    tex: str
    markdown: str
    figures: dict[str, bytes]
    #: the requirements table the memo's verdict shows (symbolic.analysis.verdict.RequirementTable)
    requirements: object = None


def memo_date() -> str:
    """Today's date, or the date of ``SOURCE_DATE_EPOCH`` (reproducible builds)."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch is not None:
        try:
            stamp = int(epoch)
        except ValueError as exc:
            raise RenderError(f"SOURCE_DATE_EPOCH must be an integer, got {epoch!r}") from exc
        return _dt.datetime.fromtimestamp(stamp, tz=_dt.UTC).date().isoformat()
    return _dt.datetime.now(tz=_dt.UTC).date().isoformat()


# --------------------------------------------------------------------------
# Formatting helpers
# --------------------------------------------------------------------------
def _matrix_or_numeric(M: sp.Matrix | None, value: np.ndarray) -> tuple[OwnMath, bool]:
    if M is not None:
        tex = matrix_latex(M, MATRIX_LIMIT)
        if tex is not None:
            return own_math(tex), True
    return own_math(latex_matrix(value)), False


def _gain_block(name: str, closed: sp.Matrix | None, value: np.ndarray) -> dict:
    """One gain: its closed-form entries broken over lines, and numbers."""
    rows, cols = value.shape
    lines: list[OwnMath] = []
    too_long: list[str] = []
    if closed is not None:
        for i in range(closed.shape[0]):
            for j in range(closed.shape[1]):
                label = gain_label(name, i, j, (rows, cols), "tex")
                entry = _factored(closed[i, j])
                if len(sp.latex(entry)) > FORMULA_LIMIT:
                    too_long.append(label)
                    continue
                for ln in equation_lines(label, entry):
                    lines.append(own_math(ln))
    entries = [
        {
            "label": own_math(gain_label(name, i, j, (rows, cols), "tex")),
            "value": own_math(latex_number(value[i, j])),
        }
        for i in range(rows)
        for j in range(cols)
    ]
    return {
        "name": name,
        "lines": lines,
        "numeric": own_math(f"{name} = " + latex_matrix(value, 6)),
        "entries": entries,
        "closed": closed is not None,
        "too_long": [own_math(x) for x in too_long],
    }


# --------------------------------------------------------------------------
# Context
# --------------------------------------------------------------------------
def _parameters(design: Design) -> list[dict]:
    out = []
    for p in design.parameters:
        out.append(
            {
                "symbol": own_math(symbol_latex(p.name)),
                "name": p.name,
                "value": own_math(latex_number(float(p.value))),
                "unit": p.unit,
                "description": p.description,
                "range": None
                if p.range is None
                else own_math(
                    f"[{latex_number(float(p.range[0]))},\\ {latex_number(float(p.range[1]))}]"
                ),
            }
        )
    return out


def _signals(design: Design) -> list[dict]:
    out = []
    plant = design.plant
    for kind, sigs in (("state", plant.states), ("input", plant.inputs), ("output", plant.outputs)):
        for i, s in enumerate(sigs):
            out.append(
                {
                    "kind": kind,
                    "symbol": own_math(f"{'x' if kind == 'state' else kind[0]}_{{{i + 1}}}"),
                    "name": s.name,
                    "unit": s.unit,
                    "description": s.description,
                }
            )
    return out


def _structure(rep, n: int, symbol: str) -> dict:
    matrix, closed = _matrix_or_numeric(rep.matrix, rep.value)
    det = None
    if rep.determinant is not None:
        det = own_math(f"\\det {symbol} = " + expr_latex(rep.determinant))
    return {
        "kind": rep.kind,
        "symbol": own_math(symbol),
        "matrix": matrix,
        "closed": closed,
        "determinant": det,
        "conditions": [own_math(_condition_latex(c)) for c in rep.conditions],
        "condition_text": list(rep.conditions),
        "rank": rep.numeric_rank,
        "order": n,
        "condition_number": own_math(latex_number(rep.condition_number, 3)),
        "adjective": rep.adjective,
    }


def _condition_latex(text: str) -> str:
    """'k = c*m/b' → LaTeX, from the factor strings the engine produced."""
    lhs, _, rhs = text.partition(" = ")
    # re-typeset through SymPy: both sides are expressions of validated names
    from ..input.expressions import parse_expression

    names = {}
    for token in set(_identifiers(text)):
        names[token] = sp.Symbol(token, real=True)
    try:
        left = parse_expression(lhs, names)
        right = parse_expression(rhs, names)
    except Exception:  # pragma: no cover - the engine writes these strings itself
        return r"\text{(see the text)}"
    return f"{expr_latex(left)} = {expr_latex(right)}"


def _identifiers(text: str) -> list[str]:
    import re

    reserved = {
        "sqrt",
        "exp",
        "log",
        "sin",
        "cos",
        "tan",
        "atan",
        "sinh",
        "cosh",
        "tanh",
        "abs",
        "pi",
    }
    return [t for t in re.findall(r"[A-Za-z][A-Za-z0-9_]*", text) if t not in reserved]


_BOUND_SYMBOL = {
    "overshoot_percent": "\\zeta",
    "settling_time": "\\sigma",
    "rise_time": "\\omega_n",
    "peak_time": "\\omega_d",
}


def _spec_rows(d: Derivation) -> list[dict]:
    pair = d.controller_poles.dominant
    if pair is None:
        return []
    rows = []
    for f in pair.formulas:
        rows.append(
            {
                "spec": f.spec.replace("_", " "),
                "requested": own_math(latex_number(f.requested, 4)),
                "formula": own_math(f.formula_latex),
                "bound": own_math(
                    _BOUND_SYMBOL.get(f.spec, "x") + " \\ge " + latex_number(f.bound_value, 4)
                ),
                "predicted": own_math(latex_number(f.predicted, 4)),
                "binding": f.binding,
                "passed": f.passed,
                "source": f.source,
            }
        )
    return rows


def _poles(values: np.ndarray) -> OwnMath:
    return own_math(poles_latex(values, 4))


def _references(d: Derivation) -> list[str]:
    refs = [
        "J. Ackermann, \u201cDer Entwurf linearer Regelungssysteme im Zustandsraum\u201d,"
        " Regelungstechnik 20(7):297\u2013300, 1972 (Ackermann's formula).",
        "D. G. Luenberger, \u201cObserving the state of a linear system\u201d, IEEE Transactions on"
        " Military Electronics 8(2):74\u201380, 1964 (the observer; its poles by duality).",
        "D. G. Luenberger, \u201cAn introduction to observers\u201d, IEEE Transactions on Automatic"
        " Control 16(6):596\u2013602, 1971 (separation of controller and observer poles).",
        "K. Ogata, Modern Control Engineering, 5th ed., Prentice Hall, 2010, Sec. 10-2 to 10-6"
        " (pole placement, Ackermann's formula, full-order observers).",
        "G. F. Franklin, J. D. Powell, A. Emami-Naeini, Feedback Control of Dynamic Systems,"
        " 7th ed., Pearson, 2015, Sec. 7.5\u20137.9 (state feedback, reference input, estimators,"
        " the compensator).",
        "T. Kailath, Linear Systems, Prentice Hall, 1980, Sec. 2.4 and Appendix (determinant"
        " identities for transfer-function numerators).",
        "A. Varga, \u201cA Schur method for pole assignment\u201d and A. L. Tits, Y. Yang,"
        " \u201cGlobally convergent algorithms for robust pole assignment by state feedback\u201d,"
        " IEEE Transactions on Automatic Control 41(10):1432\u20131452, 1996 (the method of"
        " scipy.signal.place_poles used for the cross-check).",
        "C. F. Van Loan, \u201cComputing integrals involving the matrix exponential\u201d, IEEE"
        " Transactions on Automatic Control 23(3):395\u2013404, 1978 (exact zero-order-hold"
        " stepping of the simulation).",
    ]
    if d.integral is not None:
        refs.append(
            "H. H. Rosenbrock, State-Space and Multivariable Theory, Nelson, 1970, Ch. 3 (the"
            " system matrix; a plant zero at s = 0 forbids integral action)."
        )
        refs.append(
            "K. J. \u00c5str\u00f6m and T. H\u00e4gglund, Advanced PID Control, ISA, 2006,"
            " Sec. 3.5 (integrator windup; back-calculation)."
        )
    if d.reduced_observer is not None:
        refs.append(
            "D. G. Luenberger, \u201cObservers for multivariable systems\u201d, IEEE Transactions"
            " on Automatic Control 11(2):190\u2013197, 1966 (the reduced-order observer)."
        )
    if d.discrete is not None:
        refs.append(
            "G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic Systems,"
            " 3rd ed., Addison-Wesley, 1998, Sec. 4.3 and 8.2 (zero-order-hold equivalent;"
            " prediction and current estimators)."
        )
        if "Putzer" in d.discrete.method:
            refs.append(
                "E. J. Putzer, \u201cAvoiding the Jordan canonical form in the discussion of"
                " linear systems with constant coefficients\u201d, The American Mathematical"
                " Monthly 73(1):2\u20137, 1966 (the closed-form matrix exponential of the"
                " hold-equivalent model)."
            )
    if d.controller_poles.dominant is not None:
        refs.insert(
            4,
            "N. S. Nise, Control Systems Engineering, 7th ed., Wiley, 2015, Sec. 4.6 (damping"
            " ratio from overshoot, settling and rise time of the second-order response).",
        )
    return refs


def _shipped_gains(d: Derivation, ctrl) -> list[OwnMath]:
    """The gains of the controller the memo ships, numerically (one line each)."""
    lines = []
    dc = d.discrete if ctrl is not None and ctrl.digital else None
    integral = d.integral is not None
    reduced = d.design.observer.kind == "reduced" and d.reduced_observer is not None
    if dc is None:
        if integral:
            lines.append(r"[K\;\, k_i] = " + latex_matrix(d.integral.K_augmented, 6))
        else:
            lines.append("K = " + latex_matrix(d.K.value, 6))
        if reduced:
            lines.append("K_e = " + latex_matrix(d.reduced_observer.Ke, 6))
        else:
            lines.append("L = " + latex_matrix(d.L.value, 6))
        if not integral and d.reference is not None:
            lines.append("N = " + latex_matrix(d.reference.value, 6))
        return [own_math(x) for x in lines]
    form = ctrl.form
    if dc.integral is not None:
        lines.append(r"[K_d\;\, k_{i,d}] = " + latex_matrix(dc.integral.K_augmented, 6))
    else:
        lines.append("K_d = " + latex_matrix(dc.K, 6))
    if form == "reduced" and dc.reduced is not None:
        lines.append("L_r = " + latex_matrix(dc.reduced.L, 6))
    elif form == "current":
        lines.append("L_c = " + latex_matrix(dc.L_current, 6))
    else:
        lines.append("L_p = " + latex_matrix(dc.L_predictor, 6))
    if dc.integral is None and dc.reference_gain is not None:
        lines.append("N_d = " + latex_matrix(dc.reference_gain, 6))
    return [own_math(x) for x in lines]


def _requirements_context(table) -> dict:
    """The requirements table for the templates: its JSON form plus two counts."""
    ctx = table.to_json()
    ctx["count"] = len(ctx["rows"])
    ctx["failed"] = sum(not r["passed"] for r in ctx["rows"])
    return ctx


def build_context(
    d: Derivation, study=None, claims=None, requirements=None, controller=None
) -> dict:
    """The template context shared by the LaTeX and Markdown memos.

    ``requirements`` is the :class:`symbolic.analysis.verdict.RequirementTable` of the shipped
    ``controller`` (:class:`symbolic.verification.shipped.ShippedController`); both are computed here
    when not given.
    """
    if controller is None:
        from ..verification.shipped import shipped_controller

        controller = shipped_controller(d)
    if requirements is None:
        from ..analysis.study import simulation_study
        from ..analysis.verdict import requirement_table

        requirements = requirement_table(d, simulation_study(d, sweep=False, controller=controller))
    des = d.design
    plant = des.plant
    n = plant.order
    ctrl, obs = d.controller_poles, d.observer_poles
    slow_c = min(abs(z.real) for z in ctrl.values)
    slow_o = min(abs(z.real) for z in obs.values)
    matrices = {}
    for name in ("A", "B", "C", "D"):
        M = getattr(plant, name)
        tex = matrix_latex(M, MATRIX_LIMIT)
        matrices[name] = own_math(tex if tex is not None else latex_matrix(getattr(d.plant, name)))
    K, L = d.K, d.L
    ack = K.steps
    ackermann = None
    if ack is not None:
        w = matrix_latex(ack.last_row_of_inverse, MATRIX_LIMIT)
        phi = matrix_latex(ack.polynomial_of_A, MATRIX_LIMIT)
        ackermann = {
            "row": own_math(w) if w is not None else None,
            "phi": own_math(phi) if phi is not None else None,
        }
    ref = d.reference
    reference = None
    if ref is not None:
        zero_poly = None
        if ref.zero_polynomial is not None:
            zero_poly = own_math(
                "z(s) = "
                + expr_latex(
                    _factored(
                        sum(
                            c * sp.Symbol("s") ** (len(ref.zero_polynomial) - 1 - i)
                            for i, c in enumerate(ref.zero_polynomial)
                        )
                    )
                )
            )
        reference = {
            "output": ref.tracked.name,
            "closed": own_math("N = " + expr_latex(ref.closed_form))
            if ref.closed_form is not None and len(sp.latex(ref.closed_form)) <= FORMULA_LIMIT
            else None,
            "zero_polynomial": zero_poly,
            "value": own_math("N = " + latex_matrix(ref.value, 6)),
            "method": ref.method,
        }
    comp = None
    if d.compensator is not None and d.compensator.numerator is not None:
        c = d.compensator
        s = sp.Symbol("s")
        comp = {
            "numeric": own_math(
                "\\frac{U(s)}{Y(s)} = -\\frac{"
                + polynomial_latex(c.numerator, digits=6)
                + "}{"
                + polynomial_latex(c.denominator, digits=6)
                + "}"
            ),
            "closed_lines": None,
        }
        if c.numerator_closed_form is not None:
            lines = []
            numer = sp.Add(
                *[
                    co * s ** (len(c.numerator_closed_form) - 1 - i)
                    for i, co in enumerate(c.numerator_closed_form)
                ]
            )
            denom = sp.Add(
                *[
                    co * s ** (len(c.denominator_closed_form) - 1 - i)
                    for i, co in enumerate(c.denominator_closed_form)
                ]
            )
            for i, co in enumerate(c.numerator_closed_form):
                lines += [
                    own_math(x)
                    for x in equation_lines(
                        f"b_{{{len(c.numerator_closed_form) - 1 - i}}}", _factored(co)
                    )
                ]
            for i, co in enumerate(c.denominator_closed_form[1:]):
                lines += [
                    own_math(x)
                    for x in equation_lines(
                        f"a_{{{len(c.denominator_closed_form) - 2 - i}}}", _factored(co)
                    )
                ]
            comp["closed_lines"] = lines
            comp["closed_shape"] = own_math(
                "\\frac{U(s)}{Y(s)} = -\\frac{"
                + " + ".join(
                    f"b_{{{k}}} s^{{{k}}}"
                    if k > 1
                    else (f"b_{{{k}}} s" if k == 1 else f"b_{{{k}}}")
                    for k in range(len(c.numerator_closed_form) - 1, -1, -1)
                )
                + "}{s^{"
                + str(n)
                + "} + "
                + " + ".join(
                    f"a_{{{k}}} s^{{{k}}}"
                    if k > 1
                    else (f"a_{{{k}}} s" if k == 1 else f"a_{{{k}}}")
                    for k in range(n - 1, -1, -1)
                )
                + "}"
            )
            del numer, denom
    checks = [
        {
            "name": chk.name,
            # residuals under 1e-12 are round-off: shown as a bound so the memo is reproducible
            "value": None
            if chk.value is None
            else own_math("< 10^{-12}" if chk.value < 1e-12 else latex_number(chk.value, 2)),
            "tolerance": None
            if chk.tolerance is None
            else own_math(latex_number(chk.tolerance, 1)),
            "status": {True: "pass", False: "FAIL", None: "not run"}[chk.passed],
            "note": chk.note,
        }
        for chk in d.checks
    ]
    sep = d.separated
    sep_poly = None
    if sep.charpoly is not None:
        s = sp.Symbol("s")
        poly = sp.Add(*[c * s ** (2 * n - i) for i, c in enumerate(sep.charpoly)])
        sep_poly = own_math("\\det(sI - M) = " + sp.latex(sp.factor(poly)))
    pair = ctrl.dominant
    context = {
        "title": des.title,
        "author": des.author or "",
        "revision": des.revision or "",
        "date": memo_date(),
        "design_file": Path(des.path).name,
        "sha256": des.sha256,
        "sha_groups": [des.sha256[i : i + 16] for i in range(0, 64, 16)],
        "version": __version__,
        "overrides": list(des.overrides),
        "order": n,
        "n_inputs": plant.n_inputs,
        "n_outputs": plant.n_outputs,
        "parameters": _parameters(des),
        "signals": _signals(des),
        "matrices": matrices,
        "has_D": any(x != 0 for x in plant.D),
        "controllability": _structure(d.controllability, n, "\\mathcal{C}"),
        "observability": _structure(d.observability, n, "\\mathcal{O}"),
        "specs": _spec_rows(d),
        "pair": None
        if pair is None
        else {
            "zeta": own_math(latex_number(pair.damping_ratio, 4)),
            "wn": own_math(latex_number(pair.natural_frequency, 4)),
            "sigma": own_math(latex_number(pair.real_part, 4)),
            "wd": own_math(latex_number(pair.damped_frequency, 4)),
            "binding": ", ".join(b.replace("_", " ") for b in pair.binding),
            "defaults": list(pair.defaults_used),
        },
        "controller_poles": _poles(ctrl.values),
        "observer_poles": _poles(obs.values),
        "controller_rule": ctrl.rule,
        "observer_rule": obs.rule,
        "controller_polynomial": own_math("\\alpha_c(s) = " + polynomial_latex(ctrl.coefficients)),
        "observer_polynomial": own_math("\\alpha_o(s) = " + polynomial_latex(obs.coefficients)),
        "speed_ratio": own_math(latex_number(slow_o / slow_c, 3)),
        "K": _gain_block("K", K.closed_form, K.value),
        "L": _gain_block("L", L.closed_form, L.value),
        "K_method": K.method,
        "L_method": L.method,
        "ackermann": ackermann,
        "closed_form": d.closed_form,
        "reference": reference,
        "compensator": comp,
        "separated_matrix": own_math(latex_matrix(sep.value, 4)) if 2 * n <= 8 else None,
        "separated_polynomial": sep_poly,
        "separated_ok": sep.factors_as_expected,
        "closed_loop_poles": _poles(np.array(sorted(sep.poles, key=lambda z: (z.real, z.imag)))),
        "checks": checks,
        "passed": d.passed,
        "requirements": _requirements_context(requirements),
        "shipped_gains": _shipped_gains(d, controller),
        "shipped_controller_poles": _poles(controller.controller_poles),
        "shipped_observer_poles": _poles(controller.observer_poles)
        if controller.observer_poles.size
        else own_math("\\text{none}"),
        "notes": list(d.notes),
        "references": _references(d),
        "simulation": study,
        "claims": claims,
    }
    return context


def _matrix_math(name: str, closed: sp.Matrix | None, value: np.ndarray) -> OwnMath:
    """``name = [closed form]`` when short, else the numbers."""
    if closed is not None:
        tex = matrix_latex(closed, MATRIX_LIMIT)
        if tex is not None:
            return own_math(f"{name} = {tex}")
    return own_math(f"{name} = " + latex_matrix(np.atleast_2d(value), 6))


_UNICODE_MATH = {
    "\u0302": "_hat",  # combining circumflex: x̂ -> x_hat
    "\u0304": "_bar",  # combining macron: ȳ -> y_bar
    "\u0233": "y_bar",  # precomposed y with macron
    "\u1d40": "^T",
    "\u207b\u00b9": "^-1",
    "\u207b": "^-",
    "\u00b9": "1",
    "\u2212": "-",
}


def _plain(text: str) -> str:
    """Our own explanatory strings with Unicode math written in ASCII (x̂ as x_hat, ᵀ as ^T)."""
    for k, v in _UNICODE_MATH.items():
        text = text.replace(k, v)
    return text


def extended_sections(d: Derivation) -> dict:
    """Memo context of integral action, the reduced-order observer and the digital controller.

    Each entry is None unless the design asks for it; the numbers and formulas come from the
    result objects that :func:`symbolic.derive` attached (nothing is re-derived here).  The
    figures are left out (see :func:`memo_extended_sections`).
    """
    return memo_extended_sections(d, figures=False)[0]


def _metric(x) -> OwnMath:
    return own_math("\\text{--}" if x is None else latex_number(x, 4))


def memo_extended_sections(d: Derivation, *, figures: bool = True) -> tuple[dict, dict[str, bytes]]:
    """Context and figures of integral action, the reduced-order observer and the digital
    controller.

    The studies run here (reference gain against integral action, the sampled-data loop
    against the continuous design); the figures are drawn by
    :mod:`symbolic.render.extended_figures` through :func:`symbolic.render.figures.render_figures`.
    """
    out: dict = {"integral": None, "reduced": None, "digital": None}
    makers: dict = {}
    plant = d.design.plant
    tracked = plant.outputs[
        d.integral.tracked_index if d.integral is not None else d.design.tracking.output
    ]
    first_input = plant.inputs[0]
    if d.integral is not None:
        from ..derivation.integral_study import integral_study
        from . import extended_figures as xf

        ia = d.integral
        study = integral_study(d, ia)
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
        out["integral"] = {
            "figures": captions,
            "convention": _plain(ia.sign_convention),
            "pole_rule": _plain(ia.pole_rule),
            "Aa": _matrix_math("A_a", ia.A_augmented_closed_form, ia.A_augmented),
            "Ba": _matrix_math("B_a", ia.B_augmented_closed_form, ia.B_augmented),
            "gain": _matrix_math(r"[K,\; k_i]", ia.closed_form, ia.K_augmented),
            "gain_value": own_math(r"[K,\; k_i] = " + latex_matrix(ia.K_augmented, 6)),
            "poles": _poles(np.array([complex(p) for p in ia.poles])),
            "determinant": None
            if ia.controllability_determinant is None
            else own_math(
                r"\det \mathcal{C}_a = " + expr_latex(_factored(ia.controllability_determinant))
            ),
            "conditions": [_plain(c) for c in ia.conditions],
            "disturbance_rule": _plain(study.disturbance_rule),
            "mismatch_rule": _plain(study.mismatch_rule),
            "anti_windup_rule": _plain(study.anti_windup_rule) if study.windup else None,
            "runs": [
                {
                    "loop": r.loop,
                    "plant": r.plant_description,
                    "before": own_math(
                        "\\text{--}" if r.error_before is None else latex_number(r.error_before, 3)
                    ),
                    "after": own_math(
                        "\\text{--}" if r.error_after is None else latex_number(r.error_after, 3)
                    ),
                    "overshoot": own_math(
                        "\\text{--}"
                        if r.overshoot_percent is None
                        else latex_number(r.overshoot_percent, 3)
                    ),
                }
                for r in study.runs
            ],
            "windup": None
            if not study.windup
            else [
                {
                    "label": "with anti-windup" if w.anti_windup else "without anti-windup",
                    "overshoot": own_math(
                        "\\text{--}"
                        if w.overshoot_percent is None
                        else latex_number(w.overshoot_percent, 3)
                    ),
                }
                for w in study.windup
            ],
            "notes": [_plain(n) for n in study.notes],
        }
    if d.reduced_observer is not None:
        ro = d.reduced_observer
        out["reduced"] = {
            "order": ro.order,
            "measured": ro.measured,
            "T": _matrix_math("T", ro.T_closed_form, ro.T),
            "Ke": _matrix_math("K_e", ro.Ke_closed_form, ro.Ke),
            "Ke_value": own_math("K_e = " + latex_matrix(ro.Ke, 6)),
            "poles": _poles(np.array([complex(p) for p in ro.poles])),
            "pole_rule": _plain(ro.pole_rule),
            "closed_loop_poles": _poles(
                np.array(sorted(ro.closed_loop_poles, key=lambda z: (z.real, z.imag)))
            ),
            "factors": ro.factors_as_expected,
            "comparison": _plain(ro.comparison),
            "equations": own_math(
                r"\dot\eta = \hat A \eta + \hat B \bar y + \hat F u, \qquad"
                r" \hat x = T^{-1} \begin{bmatrix} \bar y \\ \eta + K_e \bar y \end{bmatrix},"
                r" \qquad \bar y = y - D u"
            ),
            "observer_matrices": own_math(
                ", \\quad ".join(
                    _matrix_math(name, (ro.observer_closed_form or {}).get(key), value)
                    for name, key, value in (
                        (r"\hat A", "A_hat", ro.observer_matrix),
                        (r"\hat B", "B_hat", ro.output_input),
                        (r"\hat F", "F_hat", ro.control_input),
                    )
                )
            ),
        }
    if d.discrete is not None:
        dc = d.discrete
        out["digital"] = {
            "T": own_math(latex_number(dc.sample_time, 6)),
            "Phi": _matrix_math(r"\Phi", dc.Phi_closed_form, dc.Phi),
            "Gamma": _matrix_math(r"\Gamma", dc.Gamma_closed_form, dc.Gamma),
            "K": own_math("K_d = " + latex_matrix(dc.K, 6)),
            "Lp": own_math("L_p = " + latex_matrix(dc.L_predictor, 6)),
            "Lc": own_math("L_c = " + latex_matrix(dc.L_current, 6)),
            "N": None
            if dc.reference_gain is None
            else own_math("N_d = " + latex_matrix(dc.reference_gain, 6)),
            "controller_z": _poles(dc.controller_poles_z),
            "observer_z": _poles(dc.observer_poles_z),
            "bandwidth": None if dc.bandwidth is None else own_math(latex_number(dc.bandwidth, 4)),
            "ratio": None
            if dc.sampling_ratio is None
            else own_math(latex_number(dc.sampling_ratio, 3)),
            "lag": None
            if dc.hold_phase_lag is None
            else own_math(latex_number(float(np.degrees(dc.hold_phase_lag)), 3)),
            "equations": [_plain(eq.description) for eq in dc.equations.values()],
            "method": _plain(dc.method),
            "integral": None
            if dc.integral is None
            else {
                "gain": own_math(r"[K_d,\; k_{i,d}] = " + latex_matrix(dc.integral.K_augmented, 6)),
                "pole_z": _poles(np.array([dc.integral.integral_pole_z])),
            },
            "reduced": None
            if dc.reduced is None
            else {
                "gain": own_math("L_r = " + latex_matrix(dc.reduced.L, 6)),
                "poles_z": _poles(dc.reduced.poles_z),
            },
            "form": dc.default_form,
            "figures": [],
            "comparison": [],
        }
        from ..verification.sampled_data import sampled_data_study
        from . import extended_figures as xf

        form = dc.default_form
        sampled = sampled_data_study(d, dc, form=form)
        out["digital"]["comparison"] = [
            {"label": label, "continuous": _metric(a), "sampled": _metric(b)}
            for label, a, b in sampled.comparison()
        ]
        out["digital"]["figures"] = [
            {
                "stem": own_math("sampled-data"),
                "caption": (
                    f"The continuous plant driven by the digital controller ({form} form,"
                    f" T = {dc.sample_time:g} s, zero-order hold) against the continuous design:"
                    " the output between the samples, the samples the controller saw, and the"
                    " held input."
                ),
            }
        ]
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
    files: dict[str, bytes] = {}
    if figures and makers:
        from .figures import render_figures

        name = d.design.slug
        files = render_figures({f"{name}-{stem}": make for stem, make in makers.items()})
    return out, files


def memo_robustness_section(d: Derivation) -> tuple[dict | None, dict[str, bytes]]:
    """The robustness section: mismatch study, Routh-Hurwitz, sensitivities, margins.

    The study itself lives in :mod:`symbolic.analysis.robust`; here its plain data is
    marked up (formulas our own code typeset become trusted, in one place).
    """
    from ..analysis.robust import memo_robustness

    ctx, figures = memo_robustness(d)
    prefix = d.design.slug + "-"
    for cap in ctx["figures"]:
        cap["stem"] = own_math(
            cap["stem"][len(prefix) :] if cap["stem"].startswith(prefix) else cap["stem"]
        )
    for cond in ctx["routh_hurwitz_conditions"]:
        cond["expression"] = own_math(cond.pop("expression_latex"))
    if ctx["routh_hurwitz_conditions"]:  # typeset below: drop the plain-text copies
        ctx["routh_hurwitz"] = [
            line for line in ctx["routh_hurwitz"] if not re.match(r"^\s*a\d+ > 0:", line)
        ]
    for row, label in zip(ctx["sensitivity_rows"], ctx.pop("sensitivity_gains_latex"), strict=True):
        row[0] = own_math(f"${label}$")  # the gain's label (symbolic.model.labels), typeset
    ctx["sensitivity_colspec"] = own_math(
        "@{}l" + "r" * (len(ctx["sensitivity_headers"]) - 1) + "@{}"
    )
    return ctx, figures


# --------------------------------------------------------------------------
# Rendering and writing
# --------------------------------------------------------------------------
def build_memo(
    d: Derivation,
    study_context: dict | None = None,
    figures: dict[str, bytes] | None = None,
    claims_context: dict | None = None,
    robustness_context: dict | None = None,
    extended_context: dict | None = None,
    requirements=None,
    controller=None,
) -> MemoDocument:
    """Render both memo sources from a finished derivation."""
    ctx = build_context(d, study_context, claims_context, requirements, controller)
    ctx["robustness"] = robustness_context
    ctx.update(extended_sections(d) if extended_context is None else extended_context)
    name = d.design.slug
    # file names are our own slug (letters, digits, '-'), safe to trust in both formats
    ctx["figure_prefix"] = own_math(f"figures/{name}-")
    ctx["design_name"] = own_math(name)
    ctx["figures"] = sorted({Path(f).stem[len(name) + 1 :] for f in (figures or {})})
    tex = render_template("tex", "memo.tex.j2", _for_kind(ctx, "tex"))
    md = render_template("md", "memo.md.j2", _for_kind(ctx, "md"))
    return MemoDocument(name=name, tex=tex, markdown=md, figures=dict(figures or {}))


def assemble_memo(design: Design) -> tuple[Derivation, MemoDocument]:
    """Derive, simulate, study robustness and render: everything but the PDF and the files."""
    from ..analysis.study import memo_simulation, simulation_study
    from ..analysis.verdict import requirement_table
    from ..verification.refine import refine_controller_poles
    from .figures import deferred_figures

    d = derive(design, refine=refine_controller_poles)
    with deferred_figures() as batch:  # every figure is drawn by one set of workers
        study = simulation_study(d)
        study_ctx, figures = memo_simulation(d, study)
        claims_ctx = claims = None
        if design.claims is not None:
            from ..analysis.claims import check_claims, memo_claims

            claims_ctx = memo_claims(d, design.claims)
            claims = check_claims(d, design.claims)
        table = requirement_table(d, study, claims=claims)
        robustness_ctx, robustness_figures = memo_robustness_section(d)
        extended_ctx, extended_figures = memo_extended_sections(d)
        names = {**figures, **robustness_figures, **extended_figures}  # contents come later
        batch.start()  # the figures are drawn while the templates render
        doc = build_memo(
            d, study_ctx, names, claims_ctx, robustness_ctx, extended_ctx, table, study.controller
        )
        files = batch.result()
    if set(files) != set(names):
        raise RuntimeError(f"figure files {sorted(set(files) ^ set(names))} were not expected")
    return d, dataclasses.replace(doc, figures=files, requirements=table)


def write_memo(design: Design, out_dir: str | Path, pdf: bool = True, as_json: bool = False) -> int:
    """The ``gainsmith memo`` command: derive, simulate, render, compile, publish.

    Exit code 0 when every row of the requirements table passes, 1 otherwise (the memo is
    written either way and lists the open items).  ``as_json`` prints the files written and
    the requirements table as JSON instead of the summary lines.
    """
    from ..runtime.publish import publish
    from .pdf import compile_pdf, find_tex_engine

    t0 = time.perf_counter()
    d, doc = assemble_memo(design)
    files: dict[str, bytes] = {
        f"{doc.name}.tex": doc.tex.encode("utf-8"),
        f"{doc.name}.md": doc.markdown.encode("utf-8"),
    }
    for fname, data in doc.figures.items():
        files[f"figures/{fname}"] = data
    out = Path(out_dir)
    message = ""
    if pdf:
        engine = find_tex_engine()
        if engine is None:
            message = (
                "PDF skipped: no TeX engine found (install TeX Live's pdflatex and latexmk, e.g."
                " apt-get install texlive-latex-recommended texlive-fonts-recommended latexmk)"
            )
        else:
            t1 = time.perf_counter()
            assets = {f"figures/{k}": v for k, v in doc.figures.items() if k.endswith(".pdf")}
            tex_for_pdf = doc.tex
            try:
                files[f"{doc.name}.pdf"] = compile_pdf(tex_for_pdf, assets, log_path=None)
            except RenderError as exc:
                log = out / f"{doc.name}.log"
                try:
                    out.mkdir(parents=True, exist_ok=True)
                    compile_pdf(tex_for_pdf, assets, log_path=log)
                except RenderError:
                    pass
                raise RenderError(f"PDF compile failed: {exc} (TeX log kept in {log})") from exc
            message = f"PDF compiled in {time.perf_counter() - t1:.1f} s"
    out.mkdir(parents=True, exist_ok=True)
    written = publish(files, out)
    main = [p for p in written if p.suffix in (".pdf", ".tex", ".md") and p.parent == out]
    table = doc.requirements
    if as_json:
        from .report import dumps

        if message.startswith("PDF skipped"):
            print(message, file=sys.stderr)
        print(
            dumps(
                {
                    "output": str(out),
                    "files": sorted(str(p.relative_to(out)) for p in written),
                    "pdf": f"{doc.name}.pdf" in files,
                    "requirements": table.to_json(),
                    "passed": table.passed,
                }
            )
        )
        return 0 if table.passed else 1
    print(
        f"memo written to {out}/: "
        + ", ".join(sorted(p.name for p in main))
        + f" and {len(doc.figures)} figure files ({time.perf_counter() - t0:.1f} s)"
    )
    if message:
        print(message, file=sys.stderr if message.startswith("PDF skipped") else sys.stdout)
    print(table.verdict)
    for item in table.open_items:
        print(f"  open item {item}")
    return 0 if table.passed else 1
