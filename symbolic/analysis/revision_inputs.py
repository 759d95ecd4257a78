"""The items of a revision comparison that the design files state: parameters, the plant's matrices and signals, and the requests.

The requests are the poles, specifications, observer, tracking, sample time, simulation
settings and hand-calculated claims; each item is a
:class:`~symbolic.analysis.revision_items.Difference`.

Exact values are compared exactly (parameter values are SymPy rationals, poles SymPy
numbers), plant entries as functions of the parameters
(:mod:`symbolic.analysis.expression_equality`), never as printed text.
"""

from __future__ import annotations

import sympy as sp

from ..model.numbers import format_number, format_pole
from ..model.specifications import SPECIFICATION_KEYS
from .expression_equality import compare_expressions
from .revision_items import Difference, text_difference

__all__ = ["parameter_differences", "plant_differences", "request_differences"]


def _value_text(value, unit: str) -> str:
    return format_number(float(value), None) + (f" {unit}" if unit else "")


def _range_text(p) -> str:
    if p.range is None:
        return "none"
    lo, hi = p.range
    return f"[{format_number(float(lo), None)}, {format_number(float(hi), None)}]"


def _changed(section: str, item: str, old, new, texts: tuple[str, str]) -> Difference:
    """An item compared by value (exact), shown as text."""
    return Difference(section, item, texts[0], texts[1], "unchanged" if old == new else "changed")


def parameter_differences(od, nd) -> list[Difference]:
    """Parameters by name: added, removed, and value, unit, range and description of each."""
    old = {p.name: p for p in od.parameters}
    new = {p.name: p for p in nd.parameters}
    out: list[Difference] = []
    for name in dict.fromkeys([*old, *new]):
        a, b = old.get(name), new.get(name)
        if a is None or b is None:
            p = a or b
            text = _value_text(p.value, p.unit)
            out.append(
                Difference(
                    "parameters", name, a and text, b and text, "added" if a is None else "removed"
                )
            )
            continue
        out.append(
            Difference(
                "parameters",
                f"{name} value",
                _value_text(a.value, a.unit),
                _value_text(b.value, b.unit),
                "unchanged" if a.value == b.value else "changed",  # exact rationals
                old_value=float(a.value),
                new_value=float(b.value),
                relative=float((b.value - a.value) / abs(a.value)) if a.value != 0 else None,
            )
        )
        out.append(text_difference("parameters", f"{name} unit", a.unit, b.unit))
        out.append(
            _changed(
                "parameters", f"{name} range", a.range, b.range, (_range_text(a), _range_text(b))
            )
        )
        out.append(
            text_difference("parameters", f"{name} description", a.description, b.description)
        )
    return out


def _signals(signals) -> str:
    return ", ".join(s.name + (f" [{s.unit}]" if s.unit else "") for s in signals)


def _count(n: int, word: str) -> str:
    return f"{n} {word}" + ("" if n == 1 else "s")


def _size(plant) -> str:
    return ", ".join(
        _count(n, w)
        for n, w in ((plant.order, "state"), (plant.n_inputs, "input"), (plant.n_outputs, "output"))
    )


def plant_differences(op, np_) -> list[Difference]:
    """The plant's size and signals, and A, B, C, D entry by entry as expressions.

    Matrices of different shapes are not compared entry by entry: one item per matrix says
    the shapes differ (and the size item that the plants differ in order).
    """
    out = [
        text_difference(
            "plant",
            "size",
            _size(op),
            _size(np_),
            "" if op.order == np_.order else "the plants differ in order",
        ),
        text_difference("plant", "states", _signals(op.states), _signals(np_.states)),
        text_difference("plant", "inputs", _signals(op.inputs), _signals(np_.inputs)),
        text_difference("plant", "outputs", _signals(op.outputs), _signals(np_.outputs)),
    ]
    for name in ("A", "B", "C", "D"):
        a, b = getattr(op, name), getattr(np_, name)
        if a.shape != b.shape:
            texts = tuple(f"{M.shape[0]}×{M.shape[1]}" for M in (a, b))
            out.append(
                Difference(
                    "plant",
                    name,
                    *texts,
                    "changed",
                    note="different shapes: not compared entry by entry",
                )
            )
            continue
        for i in range(a.shape[0]):
            for j in range(a.shape[1]):
                out.append(_entry(f"{name}[{i + 1},{j + 1}]", a[i, j], b[i, j]))
    return out


def _entry(item: str, a: sp.Expr, b: sp.Expr) -> Difference:
    verdict = compare_expressions(a, b)
    change = {"same": "unchanged", "different": "changed"}.get(verdict, "rewritten")
    note = "" if verdict in ("same", "different") else verdict
    return Difference("plant", item, str(a), str(b), change, note=note)


def _poles(poles) -> tuple[tuple, str] | None:
    """Exact poles as a sorted tuple (order in the file does not matter), and as text."""
    if poles is None:
        return None
    ordered = sorted(poles, key=lambda p: (float(sp.re(p)), float(sp.im(p))))
    return tuple(ordered), ", ".join(format_pole(complex(p), None) for p in ordered)


def _plain(value) -> tuple[object, str] | None:
    if value is None:
        return None
    if isinstance(value, bool):
        return value, str(value).lower()
    if isinstance(value, int | float | sp.Rational):
        return value, format_number(float(value), None)
    if isinstance(value, tuple):  # vectors and matrices of numbers
        return value, str(value).replace("(", "[").replace(")", "]").replace(",]", "]")
    return value, str(value)


def _requests(design) -> dict[str, tuple[object, str] | None]:
    """What a design file asks for, beyond its plant: item → (exact value, text)."""
    c, o, t, s = design.controller, design.observer, design.tracking, design.simulation
    out: dict[str, tuple[object, str] | None] = {"controller poles": _poles(c.poles)}
    specs = c.specifications
    for key in SPECIFICATION_KEYS:
        out[key] = _plain(None if specs is None else getattr(specs, key))
    if specs is not None:
        out["remaining_pole_factor"] = _plain(c.remaining_pole_factor)
        out["remaining_poles"] = _poles(c.remaining_poles)
        out["refine"] = _plain(c.refine)
    out["observer kind"] = _plain(o.kind)
    out["observer poles"] = _poles(o.poles)
    out["observer speed_factor"] = None if o.poles is not None else _plain(o.speed_factor)
    out["reduced observer poles"] = _poles(o.reduced_poles)
    out["tracking output"] = _plain(design.plant.outputs[t.output].name)
    out["tracking method"] = _plain(t.method)
    out["integral_pole"] = _poles(None if t.integral_pole is None else (t.integral_pole,))
    out["sample_time"] = _plain(None if design.discrete is None else design.discrete.sample_time)
    for key in ("reference", "u_max", "horizon", "samples", "initial_state", "initial_estimate"):
        out[f"simulation {key}"] = _plain(getattr(s, key))
    out.update(_model_requests(design))
    claims = design.claims
    for key in ("K", "L", "reference_gain", "tolerance"):
        out[f"claimed {key}"] = _plain(None if claims is None else getattr(claims, key))
    return out


def _model_requests(design) -> dict[str, tuple[object, str] | None]:
    """A nonlinear ``[model]``'s operating point as fixed, its steps and required offsets."""
    model = design.model
    if model is None:
        return {}
    plant, point = design.plant, model.operating_point
    out: dict[str, tuple[object, str] | None] = {}
    for signals, values in (
        (plant.states, point.states),
        (plant.inputs, point.inputs),
        (plant.outputs, point.outputs),
    ):
        for signal, value in zip(signals, values, strict=True):
            if signal.name in point.given and f"operating point {signal.name}" not in out:
                out[f"operating point {signal.name}"] = (value, str(value))
    out["model steps"] = _plain(model.steps or None)
    for signal, offset in zip(plant.states, model.required_offsets, strict=True):
        out[f"required offset {signal.name}"] = _plain(offset)
    return out


def request_differences(od, nd) -> list[Difference]:
    """The requested poles, specifications and settings: added, removed or changed.

    Items neither design file sets are left out.
    """
    old, new = _requests(od), _requests(nd)
    out = []
    for item in dict.fromkeys([*old, *new]):
        a, b = old.get(item), new.get(item)
        if a is None and b is None:
            continue
        if a is None or b is None:
            out.append(text_difference("requests", item, a and a[1], b and b[1]))
        else:
            out.append(_changed("requests", item, a[0], b[0], (a[1], b[1])))
    return out
