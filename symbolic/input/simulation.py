"""The ``[simulation]`` table: initial state and estimate, horizon, samples, u_max, reference."""

from __future__ import annotations

from typing import Any

from ..model.design import Plant, SimulationRequest
from .fields import FieldReader, short

__all__ = ["read_simulation"]

_SIMULATION_KEYS = (
    "initial_state",
    "initial_estimate",
    "horizon",
    "samples",
    "u_max",
    "reference",
)


def read_simulation(fields: FieldReader, data: Any, plant: Plant) -> SimulationRequest:
    """Validate ``[simulation]`` (optional); initial vectors have ``plant.order`` entries."""
    data = fields.table(data, "simulation", _SIMULATION_KEYS, required=False)
    n = plant.order
    x0 = xh0 = None
    if "initial_state" in data:
        x0 = fields.number_list(data["initial_state"], "simulation.initial_state", n)
    if "initial_estimate" in data:
        xh0 = fields.number_list(data["initial_estimate"], "simulation.initial_estimate", n)
    horizon = None
    if "horizon" in data:
        horizon = fields.number(data["horizon"], "simulation.horizon", positive=True, maximum=1e6)
    samples = 2001
    if "samples" in data:
        s = data["samples"]
        if isinstance(s, bool) or not isinstance(s, int):
            fields.fail("simulation.samples", f"expected a whole number, got {short(s)}")
        if not 11 <= s <= 200_001:
            fields.fail("simulation.samples", f"must be between 11 and 200001, got {s}")
        samples = s
    u_max = None
    if "u_max" in data:
        u_max = fields.number(data["u_max"], "simulation.u_max", positive=True)
    reference = 1.0
    if "reference" in data:
        reference = fields.number(data["reference"], "simulation.reference")
        if reference == 0:
            fields.fail("simulation.reference", "the reference step must not be zero")
    return SimulationRequest(x0, xh0, horizon, samples, u_max, reference)
