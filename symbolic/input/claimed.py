"""The ``[claimed]`` table: hand-calculated gains K, L and reference gain to be checked.

K and L may be written as a flat list or as a matrix of the expected shape;
the tolerance is relative.
"""

from __future__ import annotations

from typing import Any

from ..model.design import Claims, Plant
from .fields import FieldReader

__all__ = ["read_claims"]

_CLAIMED_KEYS = ("K", "L", "reference_gain", "tolerance")


def read_claims(fields: FieldReader, data: Any, plant: Plant) -> Claims | None:
    """Validate ``[claimed]``; None when the file has no such table."""
    if data is None:
        return None
    data = fields.table(data, "claimed", _CLAIMED_KEYS)
    n, m, p = plant.order, plant.n_inputs, plant.n_outputs
    K = _gain_claim(fields, data["K"], "claimed.K", m, n) if "K" in data else None
    L = _gain_claim(fields, data["L"], "claimed.L", n, p) if "L" in data else None
    N = None
    if "reference_gain" in data:
        v = data["reference_gain"]
        if isinstance(v, list):
            flat = [x for row in v for x in (row if isinstance(row, list) else [row])]
            if len(flat) != 1:
                fields.fail("claimed.reference_gain", f"expected one number, got {len(flat)}")
            v = flat[0]
        N = fields.number(v, "claimed.reference_gain")
    tol = 1e-3
    if "tolerance" in data:
        tol = fields.number(data["tolerance"], "claimed.tolerance", positive=True, maximum=1.0)
    if K is None and L is None and N is None:
        fields.fail("claimed", "give at least one of K, L, reference_gain")
    return Claims(K, L, N, tol)


def _gain_claim(
    fields: FieldReader, value: Any, key: str, rows: int, cols: int
) -> tuple[tuple[float, ...], ...]:
    """Accept a flat list or a matrix; return rows x cols."""
    if isinstance(value, bool) or not isinstance(value, list) or not value:
        fields.fail(key, f"expected a list of {rows * cols} numbers or a {rows}x{cols} matrix")
    if all(isinstance(v, list) for v in value):
        flat = [x for row in value for x in row]
        shape = (len(value), len(value[0]) if value else 0)
        if any(len(r) != shape[1] for r in value):
            fields.fail(key, "rows of different lengths")
        vector_ok = 1 in (rows, cols) and 1 in shape and len(flat) == rows * cols
        if shape != (rows, cols) and not vector_ok:
            fields.fail(key, f"is {shape[0]}x{shape[1]}; expected {rows}x{cols}")
    elif any(isinstance(v, list) for v in value):
        fields.fail(key, "mix of numbers and rows")
    else:
        flat = value
        if len(flat) != rows * cols:
            fields.fail(key, f"{len(flat)} numbers; expected {rows * cols} ({rows}x{cols})")
    nums = [fields.number(v, f"{key}[{i}]") for i, v in enumerate(flat)]
    return tuple(tuple(nums[r * cols : (r + 1) * cols]) for r in range(rows))
