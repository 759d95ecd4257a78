"""The ``[controller]`` table: explicit closed-loop poles, or time-domain specifications.

With specifications the table may also give the rule for the poles beyond the
dominant pair (``remaining_pole_factor`` or ``remaining_poles``) and whether the
pair is refined on the simulated step (``refine``).  ``method = "optimal"`` takes the
poles from the linear-quadratic regulator of ``state_weights`` and ``input_weights``
(:mod:`symbolic.input.weights`); specifications may be given beside it, to be judged and
compared with.
"""

from __future__ import annotations

from typing import Any

import sympy as sp

from ..model.design import (
    CONTROLLER_METHODS,
    DEFAULT_REMAINING_POLE_FACTOR,
    ControllerRequest,
    Plant,
)
from ..model.specifications import Specifications
from ..runtime.errors import SpecificationError
from .fields import FieldReader, short
from .pole_lists import read_poles
from .weights import read_weight_matrix

__all__ = ["read_controller"]

_CONTROLLER_KEYS = (
    "poles",
    "overshoot_percent",
    "settling_time",
    "settling_band",
    "rise_time",
    "peak_time",
    "remaining_pole_factor",
    "remaining_poles",
    "refine",
    "method",
    "state_weights",
    "input_weights",
)
_WEIGHT_KEYS = ("state_weights", "input_weights")
_SPECIFICATION_KEYS = ("overshoot_percent", "settling_time", "rise_time", "peak_time")


def read_controller(fields: FieldReader, data: Any, plant: Plant) -> ControllerRequest:
    """Validate ``[controller]`` for a plant of ``plant.order`` states."""
    data = fields.table(data, "controller", _CONTROLLER_KEYS)
    n = plant.order
    spec_keys = [k for k in _SPECIFICATION_KEYS if k in data]
    factor = DEFAULT_REMAINING_POLE_FACTOR
    if "remaining_pole_factor" in data:
        factor = fields.number(
            data["remaining_pole_factor"],
            "controller.remaining_pole_factor",
            minimum=1.0,
            maximum=100.0,
        )
    method = fields.choice(data.get("method"), "controller.method", CONTROLLER_METHODS, "")
    if method == "optimal" or any(k in data for k in _WEIGHT_KEYS):
        return _optimal(fields, data, plant, method, spec_keys, factor)
    if method == "poles" and "poles" not in data:
        fields.fail("controller.poles", 'method = "poles" needs poles = [...]')
    if method == "specifications" and "poles" in data:
        fields.fail("controller.poles", 'not used with method = "specifications"')
    if "poles" in data:
        return _explicit_poles(fields, data, n, spec_keys)
    if not spec_keys:
        fields.fail(
            "controller",
            "give poles = [...] or at least one specification (overshoot_percent, settling_time, rise_time, peak_time)",
        )
    if n < 2:
        fields.fail(
            "controller",
            "specifications need a plant of order 2 or more; give poles for a first-order plant",
        )
    spec = _specifications(fields, data, spec_keys)
    remaining = _remaining_poles(fields, data, n)
    refine = data.get("refine", True)
    if not isinstance(refine, bool):
        fields.fail("controller.refine", f"expected true or false, got {short(refine)}")
    return ControllerRequest(
        specifications=spec,
        remaining_pole_factor=factor,
        remaining_poles=remaining,
        refine=refine,
    )


def _optimal(
    fields: FieldReader, data: dict, plant: Plant, method: str, spec_keys: list[str], factor
) -> ControllerRequest:
    """The request of ``method = "optimal"``: the weights, and specifications if given."""
    if method != "optimal":
        key = next(k for k in _WEIGHT_KEYS if k in data)
        fields.fail(f"controller.{key}", 'only used with method = "optimal"')
    if "poles" in data:
        fields.fail("controller.poles", 'not used with method = "optimal" (the weights set them)')
    for key in _WEIGHT_KEYS:
        if key not in data:
            fields.fail(f"controller.{key}", 'missing: method = "optimal" needs both weights')
    if plant.n_inputs != 1:
        fields.fail(
            "controller.method",
            f'"optimal" needs a single-input plant (this one has {plant.n_inputs} inputs):'
            " with several inputs the gain that places the optimal poles is not unique and"
            " would not be the optimal gain",
        )
    Q = read_weight_matrix(
        fields, data["state_weights"], "controller.state_weights", plant.order, definite=False
    )
    R = read_weight_matrix(
        fields, data["input_weights"], "controller.input_weights", plant.n_inputs, definite=True
    )
    spec = remaining = None
    refine = True
    if spec_keys:
        if plant.order < 2:
            fields.fail("controller", "specifications need a plant of order 2 or more")
        spec = _specifications(fields, data, spec_keys)
        remaining = _remaining_poles(fields, data, plant.order)
        refine = data.get("refine", True)
        if not isinstance(refine, bool):
            fields.fail("controller.refine", f"expected true or false, got {short(refine)}")
    else:
        for k in ("settling_band", "remaining_pole_factor", "remaining_poles", "refine"):
            if k in data:
                fields.fail(f"controller.{k}", "only meaningful with specifications")
    return ControllerRequest(
        specifications=spec,
        remaining_pole_factor=factor,
        remaining_poles=remaining,
        refine=refine,
        state_weights=Q,
        input_weights=R,
    )


def _explicit_poles(
    fields: FieldReader, data: dict, n: int, spec_keys: list[str]
) -> ControllerRequest:
    """The request of a table that gives ``poles``: exactly ``n`` of them, nothing else."""
    if spec_keys:
        fields.fail(
            "controller",
            f"give either poles or specifications, not both (found poles and {spec_keys[0]})",
            SpecificationError,
        )
    for k in ("settling_band", "remaining_pole_factor", "remaining_poles", "refine"):
        if k in data:
            fields.fail(
                f"controller.{k}",
                "only meaningful with specifications, not with explicit poles",
            )
    poles = read_poles(fields, data["poles"], "controller.poles")
    if len(poles) != n:
        fields.fail(
            "controller.poles",
            f"{len(poles)} pole(s) for a plant of order {n}: give exactly {n}",
        )
    return ControllerRequest(poles=poles)


def _specifications(fields: FieldReader, data: dict, spec_keys: list[str]) -> Specifications:
    """The time-domain specifications given, checked together by :class:`Specifications`."""
    kwargs: dict[str, float] = {}
    for k in spec_keys:
        kwargs[k] = fields.number(data[k], f"controller.{k}")
    if "settling_band" in data:
        if "settling_time" not in data:
            fields.fail("controller.settling_band", "given without settling_time")
        kwargs["settling_band"] = fields.number(data["settling_band"], "controller.settling_band")
    try:
        return Specifications(**kwargs)
    except SpecificationError as exc:
        # Specifications names a single key ("rise_time") or, for several
        # problems at once, "controller" itself; do not double the prefix.
        key = f"controller.{exc.key}" if exc.key and exc.key != "controller" else "controller"
        raise SpecificationError(exc.problem, fields.where, key) from exc


def _remaining_poles(fields: FieldReader, data: dict, n: int) -> tuple[sp.Expr, ...] | None:
    """``remaining_poles``: the ``n - 2`` poles beyond the dominant pair, or None."""
    if "remaining_poles" not in data:
        return None
    remaining = read_poles(
        fields, data["remaining_poles"], "controller.remaining_poles", allow_empty=True
    )
    if len(remaining) != n - 2:
        fields.fail(
            "controller.remaining_poles",
            f"{len(remaining)} poles given; the dominant pair takes 2 of {n}, so give {n - 2}",
        )
    return remaining
