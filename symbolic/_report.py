"""Plain renderers of a :class:`~symbolic._derive.Derivation`: JSON and the terminal summary.

Both consume finished result objects; nothing here derives or checks.
The JSON keys are a public interface (tested in ``tests/test_cli.py``).
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import sympy as sp

from ._derive import Check, Derivation

__all__ = ["derivation_json", "derivation_summary", "complex_pairs", "format_number"]


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(float(x)) else None


def complex_pairs(values) -> list[list[float]]:
    """Complex numbers as [re, im] pairs (JSON has no complex type)."""
    return [[float(complex(v).real), float(complex(v).imag)] for v in values]


def _matrix(value: np.ndarray) -> list[list[float]]:
    return [[float(x) for x in row] for row in np.atleast_2d(value)]


def _formula_matrix(M: sp.Matrix | None) -> list[list[str]] | None:
    if M is None:
        return None
    return [[str(M[i, j]) for j in range(M.shape[1])] for i in range(M.shape[0])]


def _poly_text(coeffs) -> str:
    n = len(coeffs) - 1
    return str(sp.Add(*[c * sp.Symbol("s") ** (n - i) for i, c in enumerate(coeffs)]))


def _check_dict(c: Check) -> dict[str, Any]:
    return {
        "name": c.name,
        "value": None if c.value is None else _finite(c.value),
        "tolerance": c.tolerance,
        "passed": c.passed,
        "note": c.note,
    }


def derivation_json(d: Derivation) -> dict[str, Any]:
    """The machine-readable result of ``gainsmith derive --json``."""
    ref = d.reference
    conditions = []
    for rep in (d.controllability, d.observability):
        if rep.conditions:
            conditions.extend(f"{rep.adjective} if {c}" for c in rep.conditions)
        elif rep.determinant is not None:
            conditions.append(f"{rep.kind}: determinant {rep.determinant} never vanishes")
        else:
            conditions.append(
                f"{rep.kind}: numeric rank {rep.numeric_rank} of {rep.order} at the evaluated values"
            )
    return {
        "title": d.design.title,
        "design_file": d.design.path,
        "sha256": d.design.sha256,
        "parameters": d.parameter_values,
        "K": _matrix(d.K.value),
        "L": _matrix(d.L.value),
        "reference_gain": None if ref is None else _matrix(ref.value),
        "tracked_output": None if ref is None else ref.tracked.name,
        "controller_poles": complex_pairs(d.controller_poles.values),
        "observer_poles": complex_pairs(d.observer_poles.values),
        "closed_loop_poles": complex_pairs(
            sorted(d.separated.poles, key=lambda z: (z.real, z.imag))
        ),
        "closed_form": d.closed_form,
        "methods": {
            "K": d.K.method,
            "L": d.L.method,
            "reference_gain": None if ref is None else ref.method,
        },
        "formulas": {
            "K": _formula_matrix(d.K.closed_form),
            "L": _formula_matrix(d.L.closed_form),
            "reference_gain": None
            if ref is None or ref.closed_form is None
            else str(ref.closed_form),
            "controller_charpoly": _poly_text(d.controller_poles.coefficients),
            "observer_charpoly": _poly_text(d.observer_poles.coefficients),
            "controllability_determinant": None
            if d.controllability.determinant is None
            else str(d.controllability.determinant),
            "observability_determinant": None
            if d.observability.determinant is None
            else str(d.observability.determinant),
        },
        "conditions": conditions,
        "structure": {
            rep.kind: {
                "rank": rep.numeric_rank,
                "order": rep.order,
                "condition_number": _finite(rep.condition_number),
            }
            for rep in (d.controllability, d.observability)
        },
        "pole_selection": {
            "controller": d.controller_poles.rule,
            "observer": d.observer_poles.rule,
            "binding_specifications": list(d.controller_poles.dominant.binding)
            if d.controller_poles.dominant
            else [],
        },
        "checks": [_check_dict(c) for c in d.checks],
        "passed": d.passed,
        "notes": list(d.notes),
    }


def dumps(obj: Any) -> str:
    return json.dumps(obj, indent=2, ensure_ascii=False, allow_nan=False)


def format_number(x: float, digits: int = 6) -> str:
    """A float with ``digits`` significant figures, no trailing noise."""
    x = float(x)
    if x == 0:
        return "0"
    return f"{x:.{digits}g}"


def _fmt_complex(z: complex) -> str:
    z = complex(z)
    if abs(z.imag) < 1e-12 * max(1.0, abs(z.real)):
        return format_number(z.real)
    sign = "+" if z.imag >= 0 else "-"
    return f"{format_number(z.real)} {sign} {format_number(abs(z.imag))}j"


def _fmt_matrix(M: np.ndarray) -> str:
    rows = ["[" + ", ".join(format_number(x) for x in row) + "]" for row in np.atleast_2d(M)]
    return "[" + ", ".join(rows) + "]" if len(rows) > 1 else rows[0]


def derivation_summary(d: Derivation) -> str:
    """A readable terminal summary: formulas pretty-printed, numbers, the checks."""
    out: list[str] = []
    w = out.append
    des = d.design
    w(f"{des.title}" + (f"  (revision {des.revision})" if des.revision else ""))
    w(f"design file {des.path}  sha256 {des.sha256[:16]}…")
    if des.parameters:
        w(
            "parameters: "
            + ", ".join(
                f"{p.name} = {format_number(float(p.value))}{(' ' + p.unit) if p.unit else ''}"
                for p in des.parameters
            )
        )
    n = des.plant.order
    w(f"plant: {n} states, {des.plant.n_inputs} input(s), {des.plant.n_outputs} output(s)")
    w("")
    w("Structure")
    for rep in (d.controllability, d.observability):
        line = f"  {rep.kind}: rank {rep.numeric_rank} of {rep.order}, condition number {rep.condition_number:.3g}"
        w(line)
        if rep.determinant is not None:
            w(f"    determinant = {rep.determinant}")
        if rep.conditions:
            w(f"    {rep.adjective} if " + " or ".join(rep.conditions))
    w("")
    w("Poles")
    cp = d.controller_poles
    if cp.dominant is not None:
        pair = cp.dominant
        w(
            f"  from specifications: damping ratio {pair.damping_ratio:.4g}, natural frequency"
            f" {pair.natural_frequency:.4g} rad/s; binding: {', '.join(pair.binding)}"
        )
        for sentence in pair.defaults_used:
            w(f"  {sentence}")
    w("  controller: " + ", ".join(_fmt_complex(z) for z in cp.values))
    w(f"    ({cp.rule})")
    w("  observer:   " + ", ".join(_fmt_complex(z) for z in d.observer_poles.values))
    w(f"    ({d.observer_poles.rule})")
    w("")
    w("Gains")
    for g in (d.K, d.L):
        w(f"  {g.name} = {_fmt_matrix(g.value)}    [{g.method}]")
        if g.closed_form is not None:
            M = g.closed_form
            for i in range(M.shape[0]):
                for j in range(M.shape[1]):
                    w(f"    {g.name}[{i}][{j}] = {M[i, j]}")
    if d.reference is not None:
        r = d.reference
        w(
            f"  reference gain N = {_fmt_matrix(r.value)} for output '{r.tracked.name}'    [{r.method}]"
        )
        if r.closed_form is not None:
            w(f"    N = {r.closed_form}")
    else:
        w("  reference gain: none exists (see notes)")
    if d.compensator is not None and d.compensator.numerator is not None:
        c = d.compensator
        w(
            "  compensator u/y = -("
            + " ".join(format_number(x) for x in c.numerator)
            + ") / ("
            + " ".join(format_number(x) for x in c.denominator)
            + ")  [coefficients, descending powers of s]"
        )
    w("")
    w("Checks")
    width = max(len(c.name) for c in d.checks)
    for c in d.checks:
        status = {True: "pass", False: "FAIL", None: "n/a "}[c.passed]
        val = "" if c.value is None else f"{c.value:.2e}"
        tol = "" if c.tolerance is None else f"<= {c.tolerance:.0e}"
        w(
            f"  {status}  {c.name.ljust(width)}  {val:>9} {tol}"
            + (f"  ({c.note})" if c.note else "")
        )
    if d.notes:
        w("")
        w("Notes")
        for note in d.notes:
            w(f"  - {note}")
    w("")
    w("all checks passed" if d.passed else "SOME CHECKS FAILED")
    return "\n".join(out)
