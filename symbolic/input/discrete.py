"""The ``[discrete]`` table: the sample time of a digital implementation, in seconds."""

from __future__ import annotations

from typing import Any

from ..model.design import DiscreteRequest
from .fields import FieldReader

__all__ = ["read_discrete"]

_DISCRETE_KEYS = ("sample_time",)


def read_discrete(fields: FieldReader, data: Any) -> DiscreteRequest | None:
    """Validate ``[discrete]``; None when the file has no such table."""
    if data is None:
        return None
    data = fields.table(data, "discrete", _DISCRETE_KEYS)
    key = "discrete.sample_time"
    if "sample_time" not in data:
        fields.fail(key, "missing: the [discrete] table needs sample_time (seconds)")
    fields.number(data["sample_time"], key, positive=True, maximum=1e6)
    return DiscreteRequest(fields.exact(data["sample_time"], key))
