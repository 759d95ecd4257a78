"""Plain renderers of a :class:`~symbolic.model.results.Derivation`: JSON and the terminal summary.

Both consume finished result objects; nothing here derives or checks.
The JSON keys are a public interface (tested in ``tests/test_cli.py``).
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import sympy as sp

from ..model.labels import gain_label
from ..model.numbers import format_number, format_pole, format_poles
from ..model.results import Check, Derivation

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
    out: dict[str, Any] = {
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
    out.update(_extensions_json(d))
    if d.design.model is not None:
        out["operating_point"] = operating_point_json(d.design)
    _shipped_observer_on_top(d, out)
    return out


def operating_point_json(design) -> dict[str, Any]:
    """A nonlinear ``[model]``'s equilibrium: each signal's value at the nominal parameters,
    its exact form (a formula in Python syntax over the parameter names), and what was fixed."""
    model, plant = design.model, design.plant
    point = model.operating_point

    def signals(sigs, values):
        return {
            s.name: {
                "value": float(v.xreplace(design.values).evalf(17)),
                "formula": str(v),
            }
            for s, v in zip(sigs, values, strict=True)
        }

    return {
        "states": signals(plant.states, point.states),
        "inputs": signals(plant.inputs, point.inputs),
        "outputs": signals(plant.outputs, point.outputs),
        "fixed": list(point.given),
        "closed_form": point.closed_form,
    }


def _shipped_observer_on_top(d: Derivation, out: dict[str, Any]) -> None:
    """With ``[observer] kind = "reduced"`` the top-level observer keys describe the reduced
    observer that is shipped; the full-order one moves under ``full_order_observer``."""
    ro = d.reduced_observer
    out["observer_kind"] = "full-order"
    if d.design.observer.kind != "reduced" or ro is None:
        return
    out["observer_kind"] = "reduced-order"
    out["full_order_observer"] = {
        "note": "comparison only: not the observer that is shipped",
        "L": out["L"],
        "observer_poles": out["observer_poles"],
        "closed_loop_poles": out["closed_loop_poles"],
        "method": out["methods"]["L"],
        "formula": out["formulas"]["L"],
        "charpoly": out["formulas"]["observer_charpoly"],
        "pole_rule": out["pole_selection"]["observer"],
    }
    out["L"] = _matrix(ro.Ke) if ro.Ke.size else []
    out["observer_poles"] = complex_pairs(ro.pole_values)
    out["closed_loop_poles"] = complex_pairs(
        sorted(ro.closed_loop_poles, key=lambda z: (z.real, z.imag))
    )
    out["methods"]["L"] = ro.method
    out["formulas"]["L"] = _formula_matrix(ro.Ke_closed_form)
    out["formulas"]["observer_charpoly"] = None
    out["pole_selection"]["observer"] = ro.pole_rule


def _extensions_json(d: Derivation) -> dict[str, Any]:
    """Keys present only when the design asks for integral action, a reduced-order observer
    or a digital controller."""
    out: dict[str, Any] = {}
    ia = d.integral
    if ia is not None:
        out["integral_gain"] = _matrix(ia.integral_gain)
        out["K_augmented"] = _matrix(ia.K_augmented)
        out["integral"] = _integral_json(ia)
    if d.reduced_observer is not None:
        out["reduced_observer"] = _reduced_json(d.reduced_observer)
    if d.discrete is not None:
        out["discrete"] = _discrete_json(d.discrete)
    return out


def _integral_json(ia) -> dict[str, Any]:
    return {
        "K": _matrix(ia.K),
        "integral_pole": complex_pairs([complex(ia.integral_pole)])[0],
        "poles": complex_pairs(ia.pole_values),
        "pole_rule": ia.pole_rule,
        "sign_convention": ia.sign_convention,
        "method": ia.method,
        "formulas": {
            "K_augmented": _formula_matrix(ia.closed_form),
            "A_augmented": _formula_matrix(ia.A_augmented_closed_form),
            "B_augmented": _formula_matrix(ia.B_augmented_closed_form),
            "augmented_controllability_determinant": None
            if ia.controllability_determinant is None
            else str(ia.controllability_determinant),
            "zero_at_origin": None if ia.zero_at_origin is None else str(ia.zero_at_origin),
        },
        "conditions": list(ia.conditions),
    }


def _reduced_json(ro) -> dict[str, Any]:
    F, G, H, J = ro.compensator
    return {
        "order": ro.order,
        "measured": ro.measured,
        "T": _matrix(ro.T),
        "Ke": _matrix(ro.Ke) if ro.Ke.size else [],
        "poles": complex_pairs(ro.pole_values),
        "pole_rule": ro.pole_rule,
        "A_hat": _matrix(ro.observer_matrix) if ro.order else [],
        "B_hat": _matrix(ro.output_input) if ro.order else [],
        "F_hat": _matrix(ro.control_input) if ro.order else [],
        "compensator": {
            "state": _matrix(F) if ro.order else [],
            "measurement": _matrix(G) if ro.order else [],
            "output_state": _matrix(H) if ro.order else [],
            "output_measurement": _matrix(J),
        },
        "closed_loop_poles": complex_pairs(
            sorted(ro.closed_loop_poles, key=lambda z: (z.real, z.imag))
        ),
        "method": ro.method,
        "formulas": {"Ke": _formula_matrix(ro.Ke_closed_form)},
    }


def _discrete_json(dc) -> dict[str, Any]:
    out = {
        "sample_time": dc.sample_time,
        "Phi": _matrix(dc.Phi),
        "Gamma": _matrix(dc.Gamma),
        "K": _matrix(dc.K),
        "L": _matrix(dc.L_predictor),
        "L_current": _matrix(dc.L_current),
        "reference_gain": None if dc.reference_gain is None else _matrix(dc.reference_gain),
        "poles": complex_pairs(dc.poles_z),
        "controller_poles": complex_pairs(dc.controller_poles_z),
        "observer_poles": complex_pairs(dc.observer_poles_z),
        "bandwidth": None if dc.bandwidth is None else _finite(dc.bandwidth),
        "sampling_ratio": None if dc.sampling_ratio is None else _finite(dc.sampling_ratio),
        "hold_phase_lag": None if dc.hold_phase_lag is None else _finite(dc.hold_phase_lag),
        "method": dc.method,
        "formulas": {
            "Phi": _formula_matrix(dc.Phi_closed_form),
            "Gamma": _formula_matrix(dc.Gamma_closed_form),
            "K": _formula_matrix(dc.K_closed_form),
            "L": _formula_matrix(dc.L_closed_form),
        },
        "forms": list(dc.forms),
        "integral": None,
        "reduced_observer": None,
    }
    if dc.integral is not None:
        di = dc.integral
        out["integral"] = {
            "K_augmented": _matrix(di.K_augmented),
            "K": _matrix(di.K),
            "integral_gain": _matrix(di.integral_gain),
            "integral_pole": complex_pairs([complex(di.integral_pole)])[0],
            "integral_pole_z": complex_pairs([complex(di.integral_pole_z)])[0],
            "tracking_time": _finite(di.tracking_time),
            "method": di.method,
        }
    if dc.reduced is not None:
        dr = dc.reduced
        out["reduced_observer"] = {
            "L": _matrix(dr.L),
            "transformation": _matrix(dr.T),
            "poles": complex_pairs(dr.poles),
            "poles_z": complex_pairs(dr.poles_z),
            "observer_matrix": _matrix(dr.observer_matrix),
            "output_input": _matrix(dr.output_input),
        }
    return out


def dumps(obj: Any) -> str:
    return json.dumps(obj, indent=2, ensure_ascii=False, allow_nan=False)


def _fmt_matrix(M: np.ndarray) -> str:
    rows = ["[" + ", ".join(format_number(x) for x in row) + "]" for row in np.atleast_2d(M)]
    return "[" + ", ".join(rows) + "]" if len(rows) > 1 else rows[0]


def derivation_summary(d: Derivation) -> str:
    """A readable terminal summary: formulas pretty-printed, numbers, the checks."""
    out: list[str] = []
    w = out.append
    _design_summary(d, w)
    _structure_summary(d, w)
    _poles_summary(d, w)
    _gains_summary(d, w)
    _extensions_summary(d, w)
    _checks_summary(d, w)
    return "\n".join(out)


def _design_summary(d: Derivation, w) -> None:
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


def _structure_summary(d: Derivation, w) -> None:
    w("")
    w("Structure")
    for rep in (d.controllability, d.observability):
        line = f"  {rep.kind}: rank {rep.numeric_rank} of {rep.order}, condition number {rep.condition_number:.3g}"
        w(line)
        if rep.determinant is not None:
            w(f"    determinant = {rep.determinant}")
        if rep.conditions:
            w(f"    {rep.adjective} if " + " or ".join(rep.conditions))


def _poles_summary(d: Derivation, w) -> None:
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
    w("  controller: " + format_poles(cp.values))
    w(f"    ({cp.rule})")
    reduced = d.design.observer.kind == "reduced" and d.reduced_observer is not None
    label = "full-order observer (comparison only, not shipped): " if reduced else "observer:   "
    w("  " + label + format_poles(d.observer_poles.values))
    w(f"    ({d.observer_poles.rule})")
    if reduced:
        w("  shipped observer: the reduced-order observer (below)")


def _gains_summary(d: Derivation, w) -> None:
    w("")
    w("Gains")
    for g in (d.K, d.L):
        w(f"  {g.name} = {_fmt_matrix(g.value)}    [{g.method}]")
        if g.closed_form is not None:
            M = g.closed_form
            for i in range(M.shape[0]):
                for j in range(M.shape[1]):
                    w(f"    {gain_label(g.name, i, j, M.shape)} = {M[i, j]}")
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


def _checks_summary(d: Derivation, w) -> None:
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


def _extensions_summary(d: Derivation, w) -> None:
    """Short sections for integral action, the reduced-order observer and the digital loop."""
    ia = d.integral
    if ia is not None:
        w("")
        w("Integral action")
        w(f"  {ia.sign_convention}")
        w(f"  integral pole {format_pole(ia.integral_pole)}  ({ia.pole_rule})")
        w(f"  [K, k_i] = {_fmt_matrix(ia.K_augmented)}    [{ia.method}]")
        if ia.closed_form is not None:
            states = ia.closed_form.shape[1] - 1
            for j in range(states + 1):
                label = "k_i" if j == states else gain_label("K", 0, j, (1, states))
                w(f"    {label} = {ia.closed_form[0, j]}")
        if ia.controllability_determinant is not None:
            w(f"  det of the augmented controllability matrix = {ia.controllability_determinant}")
        if ia.conditions:
            w("    integral action impossible if " + " or ".join(ia.conditions))
    ro = d.reduced_observer
    if ro is not None:
        w("")
        w("Reduced-order observer")
        w(f"  order n − p = {ro.order}; closed loop of order {2 * ro.T.shape[0] - ro.measured}")
        if ro.order:
            w("  poles: " + format_poles(ro.pole_values))
            w(f"    ({ro.pole_rule})")
            w(f"  Ke = {_fmt_matrix(ro.Ke)}    [{ro.method}]")
            if ro.Ke_closed_form is not None:
                for i in range(ro.Ke_closed_form.shape[0]):
                    w(
                        f"    {gain_label('Ke', i, 0, ro.Ke_closed_form.shape)}"
                        f" = {ro.Ke_closed_form[i, 0]}"
                    )
            w("  η' = Â η + B̂ ȳ + F̂ u,  x̂ = T⁻¹ (Ĉ η + D̂ ȳ),  Â = A_bb − Ke A_ab")
    dc = d.discrete
    if dc is not None:
        w("")
        w(f"Digital controller (sample time {format_number(dc.sample_time)} s)")
        w(f"  {dc.method}")
        w(f"  K = {_fmt_matrix(dc.K)}")
        w(f"  L (predictor) = {_fmt_matrix(dc.L_predictor.T)}ᵀ")
        w(f"  L (current estimator) = {_fmt_matrix(dc.L_current.T)}ᵀ")
        if dc.reference_gain is not None:
            w(f"  reference gain N = {_fmt_matrix(dc.reference_gain)}")
        w("  z-plane poles: " + format_poles(dc.poles_z))
        if dc.bandwidth is not None:
            w(
                f"  closed-loop bandwidth {format_number(dc.bandwidth, 4)} rad/s; sampling at"
                f" {format_number(dc.sampling_ratio, 3)} times it; hold lag"
                f" {format_number(math.degrees(dc.hold_phase_lag), 3)}° at the bandwidth"
            )
