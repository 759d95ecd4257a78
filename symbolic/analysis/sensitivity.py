"""Normalised sensitivities (p/g)·∂g/∂p of every gain entry to every parameter.

In closed form from the closed-form gains where they exist, else by central differences of
the floating-point Ackermann gains; part of the robustness study (:mod:`symbolic.analysis.robust`).

References
----------
.. [1] P. M. Frank, *Introduction to System Sensitivity Theory*, Academic
   Press, 1978, Ch. 2 (the normalised, or relative, sensitivity (p/g)·∂g/∂p).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import sympy as sp

from ..derivation.numeric import numeric_ackermann
from ..model.labels import gain_label
from ..model.results import Derivation
from ..runtime.budget import run_bounded
from ..runtime.errors import BudgetExceeded
from .parameter_grid import evaluate_on_grid
from .routh import factored

__all__ = ["GainSensitivity", "SensitivityTable", "entry_labels", "gain_sensitivities"]


@dataclass(frozen=True)
class GainSensitivity:
    """(p/g)·∂g/∂p for one gain entry g and one parameter p."""

    gain: str  # "K_2", "L_3", "N" (symbolic.model.labels.gain_label)
    parameter: str
    closed_form: sp.Expr | None
    value: float | None  # at the nominal values; None where g = 0 there


@dataclass(frozen=True)
class SensitivityTable:
    """Every sensitivity of every gain entry, with how they were computed."""

    entries: tuple[GainSensitivity, ...]
    gains: tuple[str, ...]
    parameters: tuple[str, ...]
    method: str
    notes: tuple[str, ...]

    def value(self, gain: str, parameter: str) -> float | None:
        for e in self.entries:
            if e.gain == gain and e.parameter == parameter:
                return e.value
        raise KeyError((gain, parameter))


def entry_labels(d: Derivation, style: Literal["text", "tex"] = "text") -> list[str]:
    """Labels of every entry of K, L (row-major) and N, as :func:`gain_label` writes them."""
    gains = [(g.name, g.value.shape) for g in (d.K, d.L)]
    if d.reference is not None:
        gains.append(("N", d.reference.value.shape))
    return [
        gain_label(name, i, j, shape, style)
        for name, shape in gains
        for i in range(shape[0])
        for j in range(shape[1])
    ]


def _gain_entries(d: Derivation) -> list[tuple[str, sp.Expr | None, float]]:
    """(label, closed form or None, value) of every entry, in the order of :func:`entry_labels`."""
    forms: list[tuple[sp.Expr | None, float]] = []
    for g in (d.K, d.L):
        cf = g.closed_form
        for i in range(g.value.shape[0]):
            for j in range(g.value.shape[1]):
                forms.append((None if cf is None else cf[i, j], float(g.value[i, j])))
    if d.reference is not None:
        ref = d.reference
        single = ref.value.shape[0] == 1
        for i in range(ref.value.shape[0]):
            forms.append((ref.closed_form if single else None, float(ref.value[i, 0])))
    return [(label, f, v) for label, (f, v) in zip(entry_labels(d), forms, strict=True)]


def _sensitivity_forms(
    entries: list[tuple[str, sp.Expr]], symbols: list[sp.Symbol], factor: bool = True
) -> list[list[sp.Expr]]:
    """(p/g)·∂g/∂p for each entry and symbol, factored within FACTOR_LIMIT (runs bounded)."""
    table = []
    for _label, g in entries:
        row = []
        for p in symbols:
            if p not in g.free_symbols:
                row.append(sp.Integer(0))
                continue
            expr = p * sp.diff(g, p) / g
            row.append(factored(expr) if factor else expr)
        table.append(row)
    return table


def _numeric_gains(d: Derivation, values: np.ndarray) -> np.ndarray:
    """K, L and N (flattened, the order of :func:`_gain_entries`) at one parameter point."""
    plant = d.design.plant
    syms = [p.symbol for p in d.design.parameters]
    A, B, C, D = (
        evaluate_on_grid(M, syms, values[None, :])[0] for M in (plant.A, plant.B, plant.C, plant.D)
    )
    K = numeric_ackermann(A, B, d.controller_poles.values)
    L = numeric_ackermann(A.T, C.T, d.observer_poles.values).T
    parts = [K.ravel(), L.ravel()]
    if d.reference is not None:
        i = d.reference.tracked_index
        Ct, Dt = C[i : i + 1], D[i : i + 1]
        M = (Ct - Dt @ K) @ np.linalg.solve(-(A - B @ K), B) + Dt
        parts.append(np.array([1.0 / M.item()]))
    return np.concatenate(parts)


def gain_sensitivities(
    d: Derivation, *, budget: float | None = None, factor: bool = True
) -> SensitivityTable:
    """Normalised sensitivities (p/g)·∂g/∂p of every gain entry at the nominal values.

    Closed form by differentiating the closed-form gains (``sympy.diff``),
    factored when small (``count_ops`` ≤ 400), evaluated exactly at the
    nominal values; the symbolic step runs within the design's time budget
    (``budget`` seconds; ≤ 0 runs in this process).  Without closed forms
    (over budget, or several inputs or outputs) the sensitivities of a
    single-input, single-output design come from central differences of the
    floating-point Ackermann gains instead (step 1e-6 relative).
    ``factor=False`` leaves the formulas unfactored (for callers that show
    only the numbers); the values are the same exact evaluations.

    The normalised sensitivity is the relative change of the gain per
    relative change of the parameter (P. M. Frank, *Introduction to System
    Sensitivity Theory*, 1978, Ch. 2).
    """
    params = d.design.parameters
    names = tuple(p.name for p in params)
    entries = _gain_entries(d)
    notes: list[str] = []
    forms = None
    if entries and all(e[1] is not None for e in entries) and params:
        forms = _bounded_forms(d, entries, factor, budget, notes)
    out: list[GainSensitivity] = []
    if forms is not None:
        method = (
            "closed form: (p/g)·∂g/∂p from sympy.diff of the closed-form gains, exact at nominal"
        )
        out = _exact_values(d, entries, forms)
    elif d.plant.B.shape[1] == 1 and d.plant.C.shape[0] == 1 and params:
        method = "central differences (step 1e-6 relative) of floating-point Ackermann gains"
        out = _difference_values(d, entries)
    else:
        method = "not computed"
        if params:
            notes.append(
                "sensitivities are not computed for several inputs or outputs without closed forms"
                " (the gains are not unique)"
            )
    zero = (
        sorted({e.gain for e in out if e.value is None and e.parameter == names[0]})
        if names
        else []
    )
    if zero:
        notes.append(
            "no relative sensitivity for "
            + ", ".join(zero)
            + ": the gain is zero at the nominal values"
        )
    return SensitivityTable(
        tuple(out), tuple(lab for lab, _g, _v in entries), names, method, tuple(notes)
    )


def _bounded_forms(
    d: Derivation, entries, factor: bool, budget: float | None, notes: list[str]
) -> list[list[sp.Expr]] | None:
    """The closed-form sensitivities within the time budget; None (and a note) over it."""
    symbols = [p.symbol for p in d.design.parameters]
    seconds = d.design.symbolic_budget_seconds if budget is None else budget
    try:
        return run_bounded(
            _sensitivity_forms,
            ([(lab, g) for lab, g, _v in entries], symbols, factor),
            seconds=None if seconds <= 0 else seconds,
            what="the closed-form sensitivities",
        )
    except BudgetExceeded as exc:
        notes.append(f"{exc}; the sensitivities are finite differences instead")
        return None


def _exact_values(d: Derivation, entries, forms) -> list[GainSensitivity]:
    """The closed-form sensitivities evaluated exactly at the nominal values."""
    names = [p.name for p in d.design.parameters]
    values = d.design.values
    out = []
    for (label, _g_expr, g_val), row in zip(entries, forms, strict=True):
        for name, expr in zip(names, row, strict=True):
            if g_val == 0:
                val = None
            else:
                v = sp.N(expr.xreplace(values), 30)
                val = float(v) if v.is_real and v.is_finite else None
            out.append(GainSensitivity(label, name, expr, val))
    return out


def _difference_values(d: Derivation, entries) -> list[GainSensitivity]:
    """Central differences (step 1e-6 relative) of the floating-point Ackermann gains."""
    params = d.design.parameters
    nominal = np.array([float(p.value) for p in params])
    base = _numeric_gains(d, nominal)
    cols = []
    for j in range(len(params)):
        h = 1e-6 * max(abs(nominal[j]), 1e-300)
        up, down = nominal.copy(), nominal.copy()
        up[j] += h
        down[j] -= h
        cols.append((_numeric_gains(d, up) - _numeric_gains(d, down)) / (2 * h) * nominal[j])
    out = []
    for i, (label, _g_expr, _g_val) in enumerate(entries):
        for j, p in enumerate(params):
            val = None if base[i] == 0 else float(cols[j][i] / base[i])
            out.append(GainSensitivity(label, p.name, None, val))
    return out
