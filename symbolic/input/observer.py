"""The ``[observer]`` table: full-order or reduced-order observer, and its poles or speed factor.

Without poles, the observer poles are the controller poles made faster by the
speed factor (:data:`~symbolic.model.design.DEFAULT_OBSERVER_SPEED_FACTOR` unless
given).  A reduced-order observer needs outputs that are independent for every
parameter value.  ``method = "optimal"`` takes the poles of the steady-state Kalman–Bucy
filter of ``process_noise`` and ``measurement_noise`` (:mod:`symbolic.input.weights`).
"""

from __future__ import annotations

from typing import Any

import sympy as sp
from sympy.polys.matrices import DomainMatrix

from ..model.design import OBSERVER_KINDS, OBSERVER_METHODS, ObserverRequest, Plant
from ..runtime.errors import StructureError
from .fields import FieldReader
from .pole_lists import read_poles
from .weights import read_weight_matrix

__all__ = ["read_observer"]

_OBSERVER_KEYS = (
    "poles",
    "speed_factor",
    "kind",
    "method",
    "process_noise",
    "measurement_noise",
)
_NOISE_KEYS = ("process_noise", "measurement_noise")


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
    method = fields.choice(data.get("method"), "observer.method", OBSERVER_METHODS, "")
    if method == "optimal" or any(k in data for k in _NOISE_KEYS):
        return _optimal(fields, data, plant, method, kind)
    if method == "poles" and "poles" not in data:
        fields.fail("observer.poles", 'method = "poles" needs poles = [...]')
    if method == "speed_factor" and "poles" in data:
        fields.fail("observer.poles", 'not used with method = "speed_factor"')
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


def _optimal(fields: FieldReader, data: dict, plant: Plant, method: str, kind: str):
    """The request of ``method = "optimal"``: the two noise intensities."""
    if method != "optimal":
        key = next(k for k in _NOISE_KEYS if k in data)
        fields.fail(f"observer.{key}", 'only used with method = "optimal"')
    for key in ("poles", "speed_factor"):
        if key in data:
            fields.fail(
                f"observer.{key}", 'not used with method = "optimal" (the noise sets the poles)'
            )
    for key in _NOISE_KEYS:
        if key not in data:
            fields.fail(f"observer.{key}", 'missing: method = "optimal" needs both intensities')
    if plant.n_outputs != 1:
        fields.fail(
            "observer.method",
            f'"optimal" needs a single-output plant (this one has {plant.n_outputs} outputs):'
            " with several outputs the gain that places the optimal poles is not unique and"
            " would not be the optimal gain",
        )
    W = read_weight_matrix(
        fields, data["process_noise"], "observer.process_noise", plant.order, definite=False
    )
    V = read_weight_matrix(
        fields,
        data["measurement_noise"],
        "observer.measurement_noise",
        plant.n_outputs,
        definite=True,
    )
    return ObserverRequest(kind=kind, process_noise=W, measurement_noise=V)
