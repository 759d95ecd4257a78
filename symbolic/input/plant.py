"""The ``[plant]`` table: the matrices A, B, C, D and the names of states, inputs and outputs.

Matrix entries are numbers or expressions over the declared parameters, read by
:func:`symbolic.input.expressions.parse_expression`; a flat list is a column for
B and a row for A, C and D.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import sympy as sp

from ..model.design import Plant, Signal
from ..runtime.errors import ExpressionError
from .expressions import check_name, parse_expression, parse_number
from .fields import FieldReader

__all__ = ["MAX_ORDER", "read_plant", "read_signals"]

MAX_ORDER = 12

_PLANT_KEYS = ("A", "B", "C", "D", "states", "inputs", "outputs")
_SIGNAL_KEYS = ("name", "unit", "description")


def read_plant(fields: FieldReader, data: Any, symbols: Mapping[str, sp.Symbol]) -> Plant:
    """Validate ``[plant]``; ``symbols`` are the declared parameters by name."""
    data = fields.table(data, "plant", _PLANT_KEYS)
    for name in ("A", "B", "C"):
        if name not in data:
            fields.fail(f"plant.{name}", "missing: the plant needs A, B and C")
    A = _matrix(fields, data["A"], "plant.A", symbols, "row")
    n = A.shape[0]
    if A.shape != (n, n):
        fields.fail("plant.A", f"must be square, got {A.shape[0]}x{A.shape[1]}")
    if n < 1:
        fields.fail("plant.A", "empty")
    B = _matrix(fields, data["B"], "plant.B", symbols, "column")
    if B.shape[0] != n:
        fields.fail("plant.B", f"has {B.shape[0]} rows; A is {n}x{n} so B needs {n}")
    C = _matrix(fields, data["C"], "plant.C", symbols, "row")
    if C.shape[1] != n:
        fields.fail("plant.C", f"has {C.shape[1]} columns; A is {n}x{n} so C needs {n}")
    m, p = B.shape[1], C.shape[0]
    if m > n:
        fields.fail("plant.B", f"{m} inputs for {n} states; at most {n}")
    if p > n:
        fields.fail("plant.C", f"{p} outputs for {n} states; at most {n}")
    if "D" in data:
        D = _matrix(fields, data["D"], "plant.D", symbols, "row")
        if D.shape != (p, m):
            fields.fail(
                "plant.D", f"is {D.shape[0]}x{D.shape[1]}; expected {p}x{m} (outputs x inputs)"
            )
    else:
        D = sp.ImmutableMatrix.zeros(p, m)
    return Plant(
        A=A,
        B=B,
        C=C,
        D=D,
        states=read_signals(fields, data.get("states"), "plant.states", n, "x"),
        inputs=read_signals(fields, data.get("inputs"), "plant.inputs", m, "u"),
        outputs=read_signals(fields, data.get("outputs"), "plant.outputs", p, "y"),
    )


def _matrix(
    fields: FieldReader, value: Any, key: str, symbols: Mapping[str, sp.Symbol], flat_as: str
) -> sp.ImmutableMatrix:
    """A matrix at ``key``: a list of rows, a flat list (laid out by ``flat_as``) or a scalar."""
    if isinstance(value, int | float | str) and not isinstance(value, bool):
        value = [[value]]
    if not isinstance(value, list) or not value:
        fields.fail(key, "expected a matrix written as a list of rows")
    if all(not isinstance(row, list) for row in value):
        # a flat list: a column for B, a row for C
        value = [[v] for v in value] if flat_as == "column" else [value]
    rows = []
    width = None
    if len(value) > MAX_ORDER:
        fields.fail(key, f"{len(value)} rows; gainsmith handles at most {MAX_ORDER}")
    for i, row in enumerate(value):
        if not isinstance(row, list):
            fields.fail(f"{key}[{i}]", "expected a row (a list); mix of rows and numbers")
        if width is None:
            width = len(row)
        if len(row) != width or width == 0:
            fields.fail(f"{key}[{i}]", f"row has {len(row)} entries, expected {width}")
        if width > MAX_ORDER:
            fields.fail(key, f"{width} columns; gainsmith handles at most {MAX_ORDER}")
        entries = []
        for j, entry in enumerate(row):
            entries.append(_entry(fields, entry, f"{key}[{i}][{j}]", symbols))
        rows.append(entries)
    return sp.ImmutableMatrix(rows)


def _entry(fields: FieldReader, entry: Any, key: str, symbols: Mapping[str, sp.Symbol]) -> sp.Expr:
    """One matrix entry: a number, or an expression over ``symbols``."""
    if isinstance(entry, bool) or not isinstance(entry, int | float | str):
        fields.fail(key, f"expected a number or an expression string, got {type(entry).__name__}")
    try:
        if isinstance(entry, str):
            return parse_expression(entry, symbols)
        return parse_number(entry)
    except ExpressionError as exc:
        fields.fail(key, str(exc))


def read_signals(
    fields: FieldReader, value: Any, key: str, count: int, prefix: str
) -> tuple[Signal, ...]:
    """The names of ``count`` signals at ``key``; ``prefix`` numbered when absent."""
    if value is None:
        return tuple(Signal(f"{prefix}{i + 1}") for i in range(count))
    if not isinstance(value, list):
        fields.fail(key, "expected a list of names or of {name, unit} tables")
    if len(value) != count:
        fields.fail(key, f"expected {count} entries (one per {prefix}), got {len(value)}")
    out = []
    seen = set()
    for i, item in enumerate(value):
        k = f"{key}[{i}]"
        if isinstance(item, str):
            item = {"name": item}
        if not isinstance(item, dict):
            fields.fail(k, "expected a name or a table with 'name' and 'unit'")
        fields.table(item, k, _SIGNAL_KEYS)
        name = fields.string(item.get("name"), f"{k}.name")
        try:
            check_name(name)
        except ExpressionError as exc:
            fields.fail(f"{k}.name", f"invalid name: {exc}")
        if name in seen:
            fields.fail(f"{k}.name", f"duplicate name '{name}'")
        seen.add(name)
        out.append(
            Signal(
                name,
                fields.string(item.get("unit"), f"{k}.unit"),
                fields.string(item.get("description"), f"{k}.description"),
            )
        )
    return tuple(out)
