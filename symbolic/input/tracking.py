"""The ``[tracking]`` table: the output the reference acts on, and how its error is removed.

``method = "reference_gain"`` scales the reference by a feed-forward gain;
``method = "integral"`` adds integral action, optionally with its own real,
negative ``integral_pole``.
"""

from __future__ import annotations

from typing import Any

import sympy as sp

from ..model.design import TRACKING_METHODS, Plant, TrackingRequest
from ..model.numbers import format_pole
from ..runtime.errors import ExpressionError
from .expressions import parse_pole
from .fields import FieldReader, short, suggest

__all__ = ["read_tracking"]

_TRACKING_KEYS = ("output", "method", "integral_pole")


def read_tracking(fields: FieldReader, data: Any, plant: Plant) -> TrackingRequest:
    """Validate ``[tracking]`` (optional); the output is named as in ``plant.outputs``."""
    data = fields.table(data, "tracking", _TRACKING_KEYS, required=False)
    output = 0
    if "output" in data:
        name = fields.string(data["output"], "tracking.output")
        names = [s.name for s in plant.outputs]
        if name not in names:
            fields.fail("tracking.output", f"'{name}' is not an output" + suggest(name, names))
        output = names.index(name)
    method = fields.choice(
        data.get("method"), "tracking.method", TRACKING_METHODS, "reference_gain"
    )
    pole = None
    if "integral_pole" in data:
        key = "tracking.integral_pole"
        if method != "integral":
            fields.fail(key, 'only meaningful with method = "integral"')
        value = data["integral_pole"]
        if isinstance(value, bool) or not isinstance(value, int | float | str):
            fields.fail(key, f'expected a number or a string like "-12", got {short(value)}')
        try:
            pole = parse_pole(value)
        except ExpressionError as exc:
            fields.fail(key, str(exc))
        if sp.im(pole) != 0:
            fields.fail(
                key,
                f"must be real (integral action adds one real pole), got {format_pole(pole, None)}",
            )
        if pole >= 0:
            fields.fail(key, f"must be negative for a stable loop, got {format_pole(pole, None)}")
    return TrackingRequest(output=output, method=method, integral_pole=pole)
