"""Sample-rate guidance for the digital controller: aliasing, poles near the unit circle and
the sampling ratio.

A continuous pole ``s`` with ``|Im s|·T ≥ π`` aliases: another pole gives the same
``z = e^{sT}``, so the design refuses such a sample time for its controller and observer poles
and warns for the plant's.  Poles that map within 1 % of the unit circle need many digits in
the difference equations; the ratio of the sampling frequency to the closed-loop bandwidth is
compared with a rule of thumb (Franklin, Powell and Workman [1] Ch. 11).

References
----------
.. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998, Ch. 11 (sample-rate selection) -- chapter number from
   memory.
"""

from __future__ import annotations

import math

import numpy as np

from ..model.numbers import format_pole
from ..model.results import Derivation
from ..runtime.errors import StructureError
from .systems import closed_loop_bandwidth

__all__ = [
    "NEAR_UNIT_CIRCLE",
    "SAMPLE_RATE_RANGE",
    "refuse_aliasing",
    "sample_rate_guidance",
]

#: Sampling frequency over closed-loop bandwidth, ω_s/ω_bw, outside which a note is given.
#: Rule of thumb (common practice, no source); Franklin, Powell and Workman [1] Ch. 11 discuss
#: ratios of about 20 to 40 for a smooth response (from memory).
SAMPLE_RATE_RANGE = (10.0, 30.0)

#: A mapped pole with |z| above this sits within 1 % of the unit circle: a note is given.
NEAR_UNIT_CIRCLE = 0.99


def refuse_aliasing(d: Derivation, T: float) -> list[str]:
    """Refuse a sample time at which a controller or observer pole aliases; the warnings for
    a plant pole that aliases.

    Raises
    ------
    StructureError
        Naming ``discrete.sample_time`` when ``|Im s|·T ≥ π`` for a controller or observer
        pole.
    """
    design = d.design
    soft: list[str] = []
    sc, so = d.controller_poles.values, d.observer_poles.values
    for label, poles in (("controller", sc), ("observer", so)):
        worst = max(poles, key=lambda s: abs(s.imag))
        if abs(worst.imag) * T >= math.pi:
            raise StructureError(
                f"the sample time {T:g} s is too long for the {label} pole"
                f" {format_pole(worst)}: |Im s|·T = {abs(worst.imag) * T:.4g} ≥ π,"
                " so the pole aliases (a different pole would give the same z = e^{sT});"
                f" choose T < π/|Im s| = {math.pi / abs(worst.imag):.4g} s, and in practice"
                " much shorter",
                design.path,
                "discrete.sample_time",
            )
    plant_poles = np.linalg.eigvals(d.plant.A)
    if plant_poles.size and np.max(np.abs(plant_poles.imag)) * T >= math.pi:
        soft.append(
            f"a plant pole aliases at T = {T:g} s (|Im s|·T ≥ π): the sampled model cannot tell"
            " that mode from a slower one; sample faster"
        )
    return soft


def sample_rate_guidance(
    d: Derivation, zc: np.ndarray, zo: np.ndarray, T: float, idx: int, soft: list[str], notes
) -> tuple[float | None, float | None, float | None]:
    """``(bandwidth, sampling ratio, hold phase lag)``, with a warning in ``soft`` for poles
    near the unit circle and for a sampling ratio outside :data:`SAMPLE_RATE_RANGE`.

    The bandwidth is the −3 dB bandwidth of the continuous closed loop from r to the tracked
    output (rad/s), the ratio ω_s/ω_bw with ω_s = 2π/T, and the lag of the hold at the
    bandwidth ω_bw T/2 (rad); all None without a reference gain or a bandwidth.
    """
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    for label, zs in (("controller", zc), ("observer", zo)):
        near = zs[np.abs(zs) > NEAR_UNIT_CIRCLE]
        if near.size:
            soft.append(
                f"{near.size} {label} pole(s) map within 1 % of the unit circle (|z| up to"
                f" {np.max(np.abs(near)):.5f}): T is very short against their time constants, so"
                " the difference-equation coefficients need many digits (fixed-point or single"
                " precision will move these poles)"
            )
    bandwidth = ratio = lag = None
    if d.reference is not None:
        bandwidth = closed_loop_bandwidth(A, B, C, D, d.K.value, d.reference.value, idx)
    if bandwidth is not None:
        ratio = (2 * math.pi / T) / bandwidth
        lag = bandwidth * T / 2
        lo, hi = SAMPLE_RATE_RANGE
        if ratio < lo:
            soft.append(
                f"sampling at {ratio:.3g} times the closed-loop bandwidth ({bandwidth:.4g} rad/s);"
                f" rule of thumb (common practice, no source): {lo:g} to {hi:g} times. The hold"
                f" alone lags {math.degrees(lag):.3g}° at the bandwidth: expect more overshoot"
                " than the continuous design"
            )
        elif ratio > hi:
            soft.append(
                f"sampling at {ratio:.3g} times the closed-loop bandwidth ({bandwidth:.4g} rad/s),"
                f" above the {lo:g} to {hi:g} times of the rule of thumb (common practice, no"
                " source): fine for the response, but the poles crowd towards z = 1"
            )
    else:
        notes.append("discrete: no closed-loop bandwidth found; no sample-rate guidance")
    return bandwidth, ratio, lag
