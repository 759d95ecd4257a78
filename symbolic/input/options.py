"""The ``[options]`` table: settings of the run itself (the symbolic time budget)."""

from __future__ import annotations

from typing import Any

from .fields import FieldReader

__all__ = ["read_symbolic_budget"]

#: Seconds allowed for the symbolic steps when ``[options]`` does not say.
_DEFAULT_BUDGET_SECONDS = 10.0

_OPTIONS_KEYS = ("symbolic_budget_seconds",)


def read_symbolic_budget(fields: FieldReader, data: Any) -> float:
    """Validate ``[options]``; return ``symbolic_budget_seconds`` (at most an hour)."""
    options = fields.table(data, "options", _OPTIONS_KEYS, required=False)
    if "symbolic_budget_seconds" not in options:
        return _DEFAULT_BUDGET_SECONDS
    return fields.number(
        options["symbolic_budget_seconds"],
        "options.symbolic_budget_seconds",
        positive=True,
        maximum=3600,
    )
