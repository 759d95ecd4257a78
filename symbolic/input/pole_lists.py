"""The pole lists of ``[controller]`` and ``[observer]``: real or complex poles, checked as a set.

Each pole is read by :func:`symbolic.input.expressions.parse_pole`; the list must
hold every complex pole with its conjugate (equal multiplicity) and only poles
in the open left half-plane.
"""

from __future__ import annotations

from typing import Any

import sympy as sp

from ..model.numbers import format_pole
from ..runtime.errors import ExpressionError
from .expressions import parse_pole
from .fields import FieldReader, short
from .plant import MAX_ORDER

__all__ = ["read_poles"]


def read_poles(
    fields: FieldReader, value: Any, key: str, *, allow_empty: bool = False
) -> tuple[sp.Expr, ...]:
    """A list of poles at ``key``: conjugate pairs complete, all in the open left half-plane."""
    if not isinstance(value, list):
        fields.fail(key, 'expected a list of poles such as ["-4+3j", "-4-3j"]')
    if not value and not allow_empty:
        fields.fail(key, "empty list of poles")
    if len(value) > MAX_ORDER:
        fields.fail(
            key, f"{len(value)} poles; gainsmith handles plants of order {MAX_ORDER} at most"
        )
    out = []
    for i, v in enumerate(value):
        if isinstance(v, bool) or not isinstance(v, int | float | str):
            fields.fail(
                f"{key}[{i}]", f'expected a number or a string like "-4+3j", got {short(v)}'
            )
        try:
            out.append(parse_pole(v))
        except ExpressionError as exc:
            fields.fail(f"{key}[{i}]", str(exc))
    # conjugate pairs must be present with equal multiplicity
    remaining = list(out)
    for p in out:
        im = sp.im(p)
        if im != 0 and remaining.count(p) != remaining.count(sp.conjugate(p)):
            fields.fail(
                key,
                f"pole {format_pole(p, None)} has no matching conjugate"
                f" {format_pole(sp.conjugate(p), None)}",
            )
    for p in out:
        if sp.re(p) >= 0:
            fields.fail(
                key,
                f"pole {format_pole(p, None)} is not in the open left half-plane: the loop"
                " would not be stable",
            )
    return tuple(out)
