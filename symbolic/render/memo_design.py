"""Memo context of the design itself: front matter, plant model, structure and pole choice.

Each function turns finished result objects into the plain dicts the memo templates read;
formulas and numbers our own code typeset are :class:`~symbolic.render.mathvalues.OwnMath`.
"""

from __future__ import annotations

import datetime as _dt
import os
import re
from pathlib import Path

import sympy as sp

from ..model.design import Design
from ..model.results import Derivation
from ..runtime.errors import RenderError
from ..runtime.version import __version__
from .mathtex import expr_latex, matrix_latex, polynomial_latex, symbol_latex
from .mathvalues import latex_matrix, latex_number, own_math
from .memo_math import MATRIX_LIMIT, matrix_or_numeric, poles_math

__all__ = [
    "front_matter",
    "memo_date",
    "plant_context",
    "poles_context",
    "unit_parts",
]


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


def front_matter(design: Design) -> dict:
    """Title block: who, when, which design file (and its hash) and which gainsmith."""
    return {
        "title": design.title,
        "author": design.author or "",
        "revision": design.revision or "",
        "date": memo_date(),
        "design_file": Path(design.path).name,
        "sha256": design.sha256,
        "sha_groups": [design.sha256[i : i + 16] for i in range(0, 64, 16)],
        "version": __version__,
        "overrides": list(design.overrides),
        "revisions": [
            {"revision": r.revision, "date": r.date, "author": r.author, "change": r.change}
            for r in design.revisions
        ],
        "design_text": design_text(design.text),
    }


#: The design file is printed in the appendix up to this many lines (a longer one is cut,
#: and the memo says so; its SHA-256 on the title page identifies the whole file).
DESIGN_TEXT_LINES = 400
#: ... and up to this many characters of a line.
DESIGN_TEXT_WIDTH = 300
_MAX_INDENT = 24


def design_text(text: str) -> dict:
    """The design file's lines for the appendix: each with its indentation (spaces) and its
    text, which the templates escape like any string; tabs count as four spaces."""
    lines = text.expandtabs(4).splitlines()
    shown = []
    for line in lines[:DESIGN_TEXT_LINES]:
        body = line.rstrip()
        indent = len(body) - len(body.lstrip(" "))
        text = body[indent : indent + DESIGN_TEXT_WIDTH]
        shown.append({"indent": min(indent, _MAX_INDENT), "text": text})
    return {
        "lines": shown,
        "total": len(lines),
        "cut": len(lines) > DESIGN_TEXT_LINES
        or any(len(line.rstrip()) > DESIGN_TEXT_WIDTH for line in lines),
    }


def plant_context(d: Derivation) -> dict:
    """The plant model and its controllability and observability."""
    des = d.design
    plant = des.plant
    n = plant.order
    matrices = {}
    for name in ("A", "B", "C", "D"):
        M = getattr(plant, name)
        tex = matrix_latex(M, MATRIX_LIMIT)
        matrices[name] = own_math(tex if tex is not None else latex_matrix(getattr(d.plant, name)))
    return {
        "order": n,
        "n_inputs": plant.n_inputs,
        "n_outputs": plant.n_outputs,
        "parameters": _parameters(des),
        "signals": _signals(des),
        "matrices": matrices,
        "has_D": any(x != 0 for x in plant.D),
        "controllability": _structure(d.controllability, n, "\\mathcal{C}"),
        "observability": _structure(d.observability, n, "\\mathcal{O}"),
    }


def _parameters(design: Design) -> list[dict]:
    out = []
    for p in design.parameters:
        out.append(
            {
                "symbol": own_math(symbol_latex(p.name)),
                "name": p.name,
                "value": own_math(latex_number(float(p.value))),
                "unit": unit_parts(p.unit),
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
                    "unit": unit_parts(s.unit),
                    "description": s.description,
                }
            )
    return out


_POWER = re.compile(r"^(.+?)\^\{?([+-]?\d{1,2})\}?$")
_SUPERSCRIPT = str.maketrans("0123456789+-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁺⁻")


def unit_parts(unit: str) -> list[dict]:
    """A unit from the design file as factors, each with its exponent: ``"kg m^2"`` gives
    kg and m with the power 2 (typeset kg·m²).

    Only a caret followed by a whole number (``m^2``, ``s^-1``, ``s^{-2}``) becomes an
    exponent; the factors are separated at spaces and ``*``.  Every part stays plain
    text, escaped by the templates as any string from the design file.
    """
    parts = []
    for factor in re.split(r"[\s*]+", unit.strip()):
        if not factor:
            continue
        m = _POWER.match(factor)
        base, power = (m.group(1), m.group(2)) if m else (factor, "")
        power = power.replace("-", "\N{MINUS SIGN}").lstrip("+")
        parts.append(
            {
                "base": base,
                "power": power,
                "superscript": power.replace("\N{MINUS SIGN}", "-").translate(_SUPERSCRIPT),
            }
        )
    return parts


def _structure(rep, n: int, symbol: str) -> dict:
    matrix, closed = matrix_or_numeric(rep.matrix, rep.value)
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


_RESERVED = {
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


def _identifiers(text: str) -> list[str]:
    return [t for t in re.findall(r"[A-Za-z][A-Za-z0-9_]*", text) if t not in _RESERVED]


_BOUND_SYMBOL = {
    "overshoot_percent": "\\zeta",
    "settling_time": "\\sigma",
    "rise_time": "\\omega_n",
    "peak_time": "\\omega_d",
}


def poles_context(d: Derivation) -> dict:
    """The choice of poles: specifications, the dominant pair, both pole sets."""
    ctrl, obs = d.controller_poles, d.observer_poles
    slow_c = min(abs(z.real) for z in ctrl.values)
    slow_o = min(abs(z.real) for z in obs.values)
    pair = ctrl.dominant
    return {
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
        "controller_poles": poles_math(ctrl.values),
        "observer_poles": poles_math(obs.values),
        "controller_rule": ctrl.rule,
        "observer_rule": obs.rule,
        "controller_polynomial": own_math(_desired("\\alpha_c(s)", ctrl.coefficients)),
        "observer_polynomial": own_math(_desired("\\alpha_o(s)", obs.coefficients)),
        "speed_ratio": own_math(latex_number(slow_o / slow_c, 3)),
    }


def _desired(name: str, coefficients) -> str:
    """A desired polynomial, exact; or, when an exact coefficient runs past 12 digits (the
    rationals of poles given to many figures), ``≈`` it to 8 significant figures."""
    exact = polynomial_latex(coefficients)
    if max((len(t) for t in re.findall(r"\d+", exact)), default=0) <= 12:
        return f"{name} = {exact}"
    return f"{name} \\approx " + polynomial_latex([float(c) for c in coefficients], digits=8)


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
