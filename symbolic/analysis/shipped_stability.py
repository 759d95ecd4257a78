"""Stability of the shipped loop: its margins, broken at the plant input, and its poles over
the parameter ranges.

Both judge the controller the design file ships (:mod:`symbolic.verification.shipped`), with
its gains fixed at the nominal design; the requirements table
(:mod:`symbolic.analysis.verdict`) turns them into rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..verification.shipped import ShippedController, batch_loop_poles
from .broken_loop import BrokenLoop
from .margins import MarginReport, broken_loop_margins
from .parameter_grid import evaluate_on_grid, parameter_grid

__all__ = ["RangeStability", "range_stability", "shipped_loop", "shipped_margins"]


def shipped_loop(ctrl: ShippedController) -> BrokenLoop:
    """The shipped loop broken at the plant input, as a continuous realisation.

    The controller keeps its own demanded input in its observer, so from the measurement to
    the demand it is ``ξ⁺ = (A_o + B_ou C_c) ξ + (B_oy + B_ou D_cy) y``, ``u = C_c ξ + D_cy y``;
    in series with the plant, ``L = −K(·) G(·)`` (negative feedback closes it).  A digital
    controller is joined to the ZOH plant and the discrete loop is mapped to the w-plane by the
    bilinear transform ``z = (1 + wT/2)/(1 − wT/2)``: the unit circle maps onto the imaginary
    axis and the values of L are kept, so gain and phase margins (and stability) are those of
    the discrete loop (G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of
    Dynamic Systems*, 3rd ed., 1998, Sec. 7.3 -- from memory); only the frequency axis is
    warped.

    Raises
    ------
    ValueError
        For several plant inputs, or a discrete loop with a pole at z = −1.
    """
    p = ctrl.plant
    eq = ctrl.equations
    if p.B.shape[1] != 1:
        raise ValueError("the loop broken at the plant input needs a single input")
    A, B = (p.A, p.B) if not ctrl.digital else ctrl.sampled_plant
    C, D = ctrl.measurement if ctrl.measurement is not None else (p.C, p.D)
    Ak = eq.state_matrix + eq.control_matrix @ eq.output_state
    Bk = eq.measurement_matrix + eq.control_matrix @ eq.output_measurement
    Ck, Dk = eq.output_state, eq.output_measurement
    n, nk = A.shape[0], Ak.shape[0]
    AL = np.block([[A, np.zeros((n, nk))], [Bk @ C, Ak]])
    BL = np.vstack([B, Bk @ D])
    CL = -np.hstack([Dk @ C, Ck])
    DL = -Dk @ D
    if ctrl.digital:
        AL, BL, CL, DL = _bilinear_to_w(AL, BL, CL, DL, float(ctrl.sample_time))
    return BrokenLoop(
        "shipped",
        AL,
        BL,
        CL,
        DL,
        f"the shipped controller ({ctrl.description}) in series with the plant",
    )


def _bilinear_to_w(Ad, Bd, Cd, Dd, T: float):
    """w-plane realisation of ``H(z) = C (zI − A)⁻¹ B + D`` with ``z = (α + w)/(α − w)``.

    With ``E = (I + A)⁻¹``: ``A_w = α E (A − I)``, ``B_w = E B``, ``C_w = C (αI − A_w)``,
    ``D_w = D − C E B``, ``α = 2/T`` (substitute and expand ``(zI − A)⁻¹``).
    """
    alpha = 2.0 / T
    eye = np.eye(Ad.shape[0])
    if np.linalg.cond(eye + Ad) > 1e12:
        raise ValueError("the discrete loop has a pole at z = -1; margins not computed")
    E = np.linalg.inv(eye + Ad)
    Aw = alpha * E @ (Ad - eye)
    return Aw, E @ Bd, Cd @ (alpha * eye - Aw), Dd - Cd @ E @ Bd


def shipped_margins(ctrl: ShippedController) -> tuple[MarginReport | None, str]:
    """Margins of the shipped loop, or None and the reason they were not computed."""
    try:
        loop = shipped_loop(ctrl)
    except ValueError as exc:
        return None, str(exc)
    return broken_loop_margins(loop), ""


@dataclass(frozen=True)
class RangeStability:
    """The shipped controller (fixed gains) on the plant at every grid point of the ranges."""

    points: int  # grid points evaluated (corners included), nominal excluded
    varied: tuple[str, ...]
    unstable_count: int
    worst_point: dict[str, float] | None  # where the loop is least stable
    worst_measure: float  # largest Re (s-plane) or largest |z| (digital)
    digital: bool
    per_axis: int

    @property
    def passed(self) -> bool:
        return self.unstable_count == 0


def range_stability(d, ctrl: ShippedController, points: int = 5) -> RangeStability | None:
    """Grid check of the shipped loop over the declared ranges; None when no range is declared."""
    grid = parameter_grid(d.design, points)
    if not grid.varied:
        return None
    values = grid.values[: grid.size]
    plant = d.design.plant
    mats = [evaluate_on_grid(M, grid.symbols, values) for M in (plant.A, plant.B, plant.C, plant.D)]
    finite = np.all([np.all(np.isfinite(M), axis=(1, 2)) for M in mats], axis=0)
    poles = np.full((values.shape[0], 1), np.inf, dtype=complex)
    if np.any(finite):
        sub = [M[finite] for M in mats]
        got = batch_loop_poles(ctrl, *sub)
        poles = np.full((values.shape[0], got.shape[1]), np.inf, dtype=complex)
        poles[finite] = got
    if ctrl.digital:
        measure = np.max(np.abs(poles), axis=1)
        stable = measure < 1.0 - 1e-10
    else:
        measure = np.max(poles.real, axis=1)
        scale = np.maximum(1.0, np.max(np.abs(np.where(np.isfinite(poles), poles, 0)), axis=1))
        stable = measure < -1e-10 * scale
    worst = int(np.argmax(measure))
    return RangeStability(
        points=int(values.shape[0]),
        varied=grid.varied,
        unstable_count=int(np.count_nonzero(~stable)),
        worst_point={n: float(v) for n, v in zip(grid.names, values[worst], strict=True)},
        worst_measure=float(measure[worst]),
        digital=ctrl.digital,
        per_axis=points,
    )
