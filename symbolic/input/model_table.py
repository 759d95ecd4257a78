"""The ``[model]`` table: a nonlinear plant ``x' = f(x, u, p)``, ``y = h(x, u, p)``.

The table names the states, inputs and outputs (as ``[plant]`` does, a state may also carry
``range = [low, high]``, where the model holds), gives one expression per state
(``state_equations``, the time derivative of that state) and one per output
(``output_equations``), over the declared parameters, the states and the inputs, read by
the same whitelist parser as every other expression.  ``[model.operating_point]`` fixes as
many of the states, inputs and outputs as the plant has inputs; the rest of the equilibrium
is solved for (:mod:`symbolic.input.operating_point`), and the plant every later stage
designs for is the linearisation there: ``A = ∂f/∂x``, ``B = ∂f/∂u``, ``C = ∂h/∂x``,
``D = ∂h/∂u`` at ``(x*, u*)``, functions of the parameters.

``steps`` lists reference steps (output units, from ``y*``) to simulate on the nonlinear
plant, and ``[model.required_offsets]`` the initial offset along a state axis the loop must
recover from (:mod:`symbolic.analysis.nonlinear_study`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import sympy as sp

from ..model.design import NonlinearModel, Plant, Signal
from ..runtime.errors import ExpressionError
from .expressions import parse_expression
from .fields import FieldReader, key_part
from .operating_point import linearise, solve_operating_point
from .plant import MAX_ORDER, read_signals

__all__ = ["MAX_STEPS", "read_model"]

#: Reference steps simulated on the nonlinear plant, at most.
MAX_STEPS = 8

_MODEL_KEYS = (
    "states",
    "inputs",
    "outputs",
    "state_equations",
    "output_equations",
    "operating_point",
    "steps",
    "required_offsets",
)
_STATE_KEYS = ("name", "unit", "description", "range")


def read_model(
    fields: FieldReader,
    data: Any,
    symbols: Mapping[str, sp.Symbol],
    values: Mapping[sp.Symbol, sp.Rational],
    budget: float,
) -> tuple[NonlinearModel, Plant]:
    """Validate ``[model]``, solve its operating point and linearise it there.

    ``symbols`` are the declared parameters by name and ``values`` their nominal values;
    ``budget`` bounds the symbolic solution of the equilibrium (seconds).
    """
    data = fields.table(data, "model", _MODEL_KEYS)
    for key in ("states", "state_equations", "output_equations", "operating_point"):
        if key not in data:
            fields.fail(
                f"model.{key}",
                "missing: a model needs states, state_equations,"
                " output_equations and an operating_point",
            )
    states, ranges = _states(fields, data["states"])
    n = len(states)
    equations = _expressions(fields, data["state_equations"], "model.state_equations", n)
    h_items = _expressions(fields, data["output_equations"], "model.output_equations")
    p = len(h_items)
    inputs = read_signals(
        fields, data.get("inputs"), "model.inputs", _input_count(fields, data), "u"
    )
    outputs = read_signals(fields, data.get("outputs"), "model.outputs", p, "y")
    xs = tuple(sp.Symbol(s.name, real=True) for s in states)
    us = tuple(sp.Symbol(s.name, real=True) for s in inputs)
    vocabulary = _vocabulary(fields, symbols, states, inputs)
    f = tuple(_parse(fields, t, k, vocabulary) for k, t in equations)
    h = tuple(_parse(fields, t, k, vocabulary) for k, t in h_items)
    if p > n:
        fields.fail("model.output_equations", f"{p} outputs for {n} states; at most {n}")
    if len(us) > n:
        fields.fail("model.inputs", f"{len(us)} inputs for {n} states; at most {n}")
    point = solve_operating_point(
        fields,
        _given(fields, data["operating_point"], symbols, states, inputs, outputs),
        (f, h, xs, us),
        values,
        ranges,
        budget,
    )
    A, B, C, D = linearise(f, h, xs, us, point)
    model = NonlinearModel(
        state_equations=f,
        output_equations=h,
        state_symbols=xs,
        input_symbols=us,
        operating_point=point,
        state_ranges=ranges,
        steps=_steps(fields, data.get("steps")),
        required_offsets=_offsets(fields, data.get("required_offsets"), states),
    )
    return model, Plant(A=A, B=B, C=C, D=D, states=states, inputs=inputs, outputs=outputs)


def equations_list(fields: FieldReader, value: Any, key: str) -> list:
    if not isinstance(value, list) or not value:
        fields.fail(key, "expected a list of expression strings, one per signal")
    if len(value) > MAX_ORDER:
        fields.fail(key, f"{len(value)} equations; gainsmith handles at most {MAX_ORDER}")
    return value


def _input_count(fields: FieldReader, data: dict) -> int:
    inputs = data.get("inputs")
    if inputs is None:
        fields.fail("model.inputs", "missing: name the plant's inputs (the equations use them)")
    if not isinstance(inputs, list) or not inputs:
        fields.fail("model.inputs", "expected a list of names or of {name, unit} tables")
    return len(inputs)


def _states(fields: FieldReader, value: Any) -> tuple[tuple[Signal, ...], tuple]:
    """The state signals and their ranges (``range`` is read here, the rest by ``_signals``)."""
    if not isinstance(value, list) or not value:
        fields.fail("model.states", "expected a list of names or of {name, unit, range} tables")
    if len(value) > MAX_ORDER:
        fields.fail("model.states", f"{len(value)} states; gainsmith handles at most {MAX_ORDER}")
    plain, ranges = [], []
    for i, item in enumerate(value):
        key = f"model.states[{i}]"
        if isinstance(item, dict):
            fields.table(item, key, _STATE_KEYS)
            item = dict(item)
            bounds = item.pop("range", None)
            ranges.append(None if bounds is None else _range(fields, bounds, f"{key}.range"))
        else:
            ranges.append(None)
        plain.append(item)
    return read_signals(fields, plain, "model.states", len(plain), "x"), tuple(ranges)


def _range(fields: FieldReader, value: Any, key: str) -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        fields.fail(key, "expected [low, high]")
    low = fields.number(value[0], f"{key}[0]")
    high = fields.number(value[1], f"{key}[1]")
    if not low < high:
        fields.fail(key, f"low {value[0]} must be less than high {value[1]}")
    return (low, high)


def _expressions(
    fields: FieldReader, value: Any, key: str, count: int | None = None
) -> list[tuple[str, str]]:
    """``(key, text)`` of each expression of the list at ``key`` (``count`` of them, if given)."""
    items = equations_list(fields, value, key)
    if count is not None and len(items) != count:
        what = "state" if key.endswith("state_equations") else "output"
        fields.fail(key, f"has {len(items)} entries; expected {count}, one per {what}")
    out = []
    for i, text in enumerate(items):
        if not isinstance(text, str | int | float) or isinstance(text, bool):
            fields.fail(f"{key}[{i}]", f"expected an expression string, got {type(text).__name__}")
        out.append((f"{key}[{i}]", str(text)))
    return out


def _vocabulary(fields, symbols, states, inputs) -> dict[str, sp.Symbol]:
    """Parameters, states and inputs by name; a name used twice is refused."""
    vocabulary = dict(symbols)
    for group, signals in (("states", states), ("inputs", inputs)):
        for i, signal in enumerate(signals):
            if signal.name in vocabulary:
                fields.fail(
                    f"model.{group}[{i}].name",
                    f"'{signal.name}' is already a parameter or a state; names must differ",
                )
            vocabulary[signal.name] = sp.Symbol(signal.name, real=True)
    return vocabulary


def _parse(fields: FieldReader, text: str, key: str, vocabulary) -> sp.Expr:
    try:
        return parse_expression(text, vocabulary)
    except ExpressionError as exc:
        fields.fail(key, str(exc))


def _given(fields, value, symbols, states, inputs, outputs) -> dict[str, tuple]:
    """``[model.operating_point]``: signal name to (kind, index, exact value over the
    parameters)."""
    kinds = {}
    for kind, signals in (("output", outputs), ("input", inputs), ("state", states)):
        for i, s in enumerate(signals):
            kinds[s.name] = (kind, i)  # a state named as an output too is taken as the state
    table = fields.table(value, "model.operating_point", list(kinds))
    out = {}
    for name, entry in table.items():
        key = f"model.operating_point.{key_part(name)}"
        if isinstance(entry, bool) or not isinstance(entry, int | float | str):
            fields.fail(
                key, f"expected a number or an expression string, got {type(entry).__name__}"
            )
        try:
            out[name] = (*kinds[name], parse_expression(str(entry), symbols))
        except ExpressionError as exc:
            fields.fail(key, str(exc))
    m = len(inputs)
    if len(out) != m:
        fields.fail(
            "model.operating_point",
            f"fixes {len(out)} of the states, inputs and outputs; the model has {m} input(s),"
            f" so exactly {m} must be fixed and the rest are solved for",
        )
    return out


def _steps(fields: FieldReader, value: Any) -> tuple[float, ...]:
    if value is None:
        return ()
    steps = fields.number_list(value, "model.steps")
    if not steps or len(steps) > MAX_STEPS:
        fields.fail("model.steps", f"expected 1 to {MAX_STEPS} reference steps")
    if any(s == 0 for s in steps):
        fields.fail("model.steps", "a reference step must not be zero")
    return steps


def _offsets(fields: FieldReader, value: Any, states) -> tuple[float | None, ...]:
    if value is None:
        return tuple(None for _ in states)
    table = fields.table(value, "model.required_offsets", [s.name for s in states])
    return tuple(
        fields.number(table[s.name], f"model.required_offsets.{s.name}", positive=True)
        if s.name in table
        else None
        for s in states
    )
