"""The ``[observer]`` table: full-order or reduced-order observer, and its poles or speed factor.

Without poles, the observer poles are the controller poles made faster by the
speed factor (:data:`~symbolic.model.design.DEFAULT_OBSERVER_SPEED_FACTOR` unless
given).  A reduced-order observer needs outputs that are independent for every
parameter value.
"""

from __future__ import annotations

from typing import Any

import sympy as sp
from sympy.polys.matrices import DomainMatrix

from ..model.design import OBSERVER_KINDS, ObserverRequest, Plant
from ..runtime.errors import StructureError
from .fields import FieldReader
from .pole_lists import read_poles

__all__ = ["read_observer"]

_OBSERVER_KEYS = ("poles", "speed_factor", "kind")


def read_observer(fields: FieldReader, data: Any, plant: Plant) -> ObserverRequest:
    """Validate ``[observer]`` (optional) for ``plant``."""
    data = fields.table(data, "observer", _OBSERVER_KEYS, required=False)
    kind = fields.choice(data.get("kind"), "observer.kind", OBSERVER_KINDS, "full")
    if kind == "reduced":
        # exact rank over the field of rational functions: outputs that depend on each
        # other for every parameter value (a repeated or combined row)
        rank = DomainMatrix.from_Matrix(sp.Matrix(plant.C)).to_field().rank()
        if rank < plant.n_outputs:
            fields.fail(
                "plant.C",
                f"has rank {rank} of {plant.n_outputs} for every parameter value: a"
                " reduced-order observer needs independent outputs (remove the dependent"
                ' row, or use observer.kind = "full")',
                StructureError,
            )
    if "poles" in data and "speed_factor" in data:
        fields.fail("observer", "give either poles or speed_factor, not both")
    if "poles" in data:
        n, rest = plant.order, plant.order - plant.n_outputs
        reduced = kind == "reduced"
        poles = read_poles(
            fields, data["poles"], "observer.poles", allow_empty=reduced and rest == 0
        )
        if reduced and len(poles) == rest:
            # only the reduced-order observer's poles: the full-order observer (derived
            # for comparison) keeps the default speed-factor rule
            return ObserverRequest(kind=kind, reduced_poles=poles)
        if len(poles) != n:
            expected = (
                f"give {n} (full-order observer; the reduced-order one takes {rest} of them)"
                f" or {rest} (reduced-order observer only)"
                if reduced
                else f"give exactly {n}"
            )
            fields.fail(
                "observer.poles",
                f"{len(poles)} pole(s) for a plant of order {n}: {expected}",
            )
        return ObserverRequest(poles=poles, speed_factor_is_default=False, kind=kind)
    if "speed_factor" in data:
        f = fields.number(data["speed_factor"], "observer.speed_factor", minimum=0.1, maximum=100.0)
        return ObserverRequest(speed_factor=f, speed_factor_is_default=False, kind=kind)
    return ObserverRequest(kind=kind)
