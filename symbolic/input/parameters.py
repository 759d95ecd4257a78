"""The ``[parameters]`` table: named plant parameters with nominal values, units and ranges.

Each ``[parameters.NAME]`` table gives an exact ``value`` and optionally a
``unit``, a ``description`` and a ``range = [low, high]`` holding the value.
The command line's ``--set NAME=VALUE`` replaces a nominal value here, before
the range is checked.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import sympy as sp

from ..model.design import Parameter
from ..runtime.errors import DesignFileError, ExpressionError
from .expressions import check_name, parse_number
from .fields import FieldReader, key_part, short, suggest

__all__ = ["MAX_PARAMETERS", "read_parameters"]

MAX_PARAMETERS = 64

_PARAMETER_KEYS = ("value", "unit", "description", "range")


def read_parameters(
    fields: FieldReader, data: Any, overrides: Mapping[str, str]
) -> tuple[Parameter, ...]:
    """Validate ``[parameters]`` with the ``--set`` ``overrides`` (name to value text)."""
    if not isinstance(data, dict):
        fields.fail(
            "parameters", f"expected a table of parameter tables, got {type(data).__name__}"
        )
    if len(data) > MAX_PARAMETERS:
        fields.fail("parameters", f"{len(data)} parameters; the limit is {MAX_PARAMETERS}")
    out = [_parameter(fields, name, spec, overrides) for name, spec in data.items()]
    unknown = set(overrides) - {p.name for p in out}
    if unknown:
        name = sorted(unknown)[0]
        fields.fail(
            f"--set {name}",
            "not a declared parameter" + suggest(name, [p.name for p in out] or ["(none)"]),
        )
    return tuple(out)


def _parameter(
    fields: FieldReader, name: str, spec: Any, overrides: Mapping[str, str]
) -> Parameter:
    """One ``[parameters.NAME]`` table, its value replaced by ``--set`` when given."""
    key = f"parameters.{key_part(name)}"
    try:
        check_name(name)
    except ExpressionError as exc:
        fields.fail(key, f"invalid parameter name: {exc}")
    if not isinstance(spec, dict):
        fields.fail(key, "expected a table with at least 'value'")
    fields.table(spec, key, _PARAMETER_KEYS)
    if "value" not in spec:
        fields.fail(f"{key}.value", "missing: every parameter needs a value")
    value = fields.exact(spec["value"], f"{key}.value")
    value_key = f"{key}.value"
    value_text = f"nominal {short(spec['value'])}"
    if name in overrides:
        text = overrides[name]
        try:
            value = parse_number(text)
        except ExpressionError as exc:
            raise DesignFileError(f"--set {name}={text}: {exc}", fields.where, key) from exc
        value_key = f"--set {key_part(name)}"
        value_text = f"value {key_part(text)}"
    rng = None
    if "range" in spec:
        rng = _range(fields, spec["range"], key, value, value_key, value_text)
    return Parameter(
        name=name,
        symbol=sp.Symbol(name, real=True),
        value=value,
        unit=fields.string(spec.get("unit"), f"{key}.unit"),
        description=fields.string(spec.get("description"), f"{key}.description"),
        range=rng,
    )


def _range(
    fields: FieldReader, r: Any, key: str, value: sp.Rational, value_key: str, value_text: str
) -> tuple[sp.Rational, sp.Rational]:
    """``range = [low, high]`` of the parameter at ``key``, checked to hold ``value``.

    ``value_key`` and ``value_text`` name the value in the message: the file's
    nominal value, or the ``--set`` one.
    """
    if not isinstance(r, list) or len(r) != 2:
        fields.fail(f"{key}.range", "expected [low, high]")
    lo = fields.exact(r[0], f"{key}.range[0]")
    hi = fields.exact(r[1], f"{key}.range[1]")
    if lo > hi:
        fields.fail(f"{key}.range", f"low {r[0]} is greater than high {r[1]}")
    if not lo <= value <= hi:
        where = "" if value_key.endswith(".value") else f" declared at {key}.range"
        fields.fail(
            value_key,
            f"{value_text} lies outside its range [{short(r[0])}, {short(r[1])}]{where}",
        )
    return (lo, hi)
