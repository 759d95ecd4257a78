"""Loop shapes of the shipped loop: sensitivities, input-disturbance response, noise to input.

The controller the design file ships (:class:`~symbolic.verification.shipped.ShippedController`)
acts on the measurement only through its feedback part (the reference terms drop out of every
quantity here): ``u = K_y(·) y`` with, from the shipped difference equations,

.. math::  K_y = C_c (\\cdot I - A_k)^{-1} B_k + D_{cy},\\quad
           A_k = A_o + B_{ou} C_c,\\ B_k = B_{oy} + B_{ou} D_{cy}

(the controller feeds its own demanded input to its observer).  With the plant
``G = C (·I − A)⁻¹ B + D`` (the ZOH model ``Φ, Γ`` for a digital controller), the loop broken
at the plant input is ``L_u = −K_y G`` and the loop broken at the plant output is
``L_y = −G K_y``; at each break point

* the sensitivity ``S = (I + L)⁻¹`` and the complementary sensitivity ``T = L (I + L)⁻¹``
  (``S + T = I``); the peaks ``M_s = max |S|`` and ``M_t = max |T|`` (largest singular value
  when several outputs are measured);
* measurement noise ``n`` on ``y`` reaches the plant input as ``u = S_u K_y n``;
* a step ``d`` added to the plant input gives ``y = G S_u d`` and ``u = −T_u d`` (its time
  response: :mod:`symbolic.analysis.input_disturbance`).

With one input and one measured output ``L_u = L_y`` (scalars commute), so the sensitivities
at the two break points are the same function.  The peaks bound the margins from below:
upper gain margin ``≥ M_s/(M_s − 1)``, phase margin ``≥ 2 arcsin(1/(2 M_s))`` (K. J. Åström
and R. M. Murray, *Feedback Systems*, 2nd ed., Princeton University Press, 2021, Sec. 10.3;
S. Skogestad and I. Postlethwaite, *Multivariable Feedback Control*, 2nd ed., Wiley, 2005,
Sec. 2.4.3 -- both from memory).

A digital controller is evaluated on the unit circle, ``z = e^{jωT}`` for ``0 < ω ≤ π/T``: the
same values as the w-plane loop of :func:`symbolic.analysis.shipped_stability.shipped_loop` at
``w = j (2/T) tan(ωT/2)`` (the bilinear map keeps the values and warps only the frequency axis),
whose grid is used, mapped back to ω.

Caution: these are properties of the linear model.  Before the controller drives a machine
that moves, heats or flies, test it on the real plant with reduced limits and an independent
stop.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..verification.shipped import ShippedController, measured
from .broken_loop import frequency_grid
from .shipped_stability import shipped_loop

__all__ = [
    "LoopShapes",
    "Peak",
    "controller_realisation",
    "loop_shapes",
    "plant_realisation",
    "transfer_values",
]

#: Rounds of local refinement of a peak on the frequency grid.
REFINE_ROUNDS = 4


@dataclass(frozen=True)
class Peak:
    """The largest value of a gain over frequency, and where it is."""

    value: float
    frequency_rad_s: float

    @property
    def db(self) -> float:
        return 20.0 * math.log10(self.value) if self.value > 0 else -math.inf


@dataclass(frozen=True)
class LoopShapes:
    """Frequency-domain properties of the shipped loop at the plant input and output.

    Arrays are over ``frequency`` (rad/s, the true frequency axis; up to π/T when digital).
    ``S_input``, ``T_input`` are the scalar sensitivities at the plant input; ``S_output``,
    ``T_output`` are ``(N, p, p)`` at the plant output (p measured outputs).
    """

    frequency: np.ndarray
    loop_input: np.ndarray
    S_input: np.ndarray
    T_input: np.ndarray
    S_output: np.ndarray
    T_output: np.ndarray
    #: |S_u K_y(jω)|: measurement noise to plant input (largest singular value)
    noise_to_input: np.ndarray
    #: |K_y(jω)|: the controller's own gain from measurement to input
    controller_gain: np.ndarray
    peak_S_input: Peak
    peak_T_input: Peak
    peak_S_output: Peak
    peak_T_output: Peak
    peak_noise: Peak
    #: gain crossovers |L_u(jω)| = 1, rad/s, ascending
    crossovers_rad_s: tuple[float, ...]
    #: |S_u K_y| at the lowest gain crossover (None without one)
    noise_at_crossover: float | None
    #: |S_u K_y| as ω → ∞ (continuous) or at the Nyquist frequency π/T (digital)
    noise_high_frequency: float
    #: the controller's direct term D_cy (its own high-frequency gain when continuous)
    direct_term: np.ndarray
    digital: bool
    sample_time: float | None
    outputs_measured: int

    @property
    def same_at_both_points(self) -> bool:
        """One input and one measurement: S and T are the same at the input and output."""
        return self.outputs_measured == 1

    @property
    def nyquist_frequency(self) -> float | None:
        return math.pi / self.sample_time if self.digital else None


# --------------------------------------------------------------------------------------------
# Realisations and their values
# --------------------------------------------------------------------------------------------
def plant_realisation(ctrl: ShippedController):
    """``(A, B, C, D)`` of the plant the controller sees: continuous, or the ZOH model; C and
    D of what it measures."""
    p = ctrl.plant
    A, B = (p.A, p.B) if not ctrl.digital else ctrl.sampled_plant
    C, D = measured(ctrl, p.C, p.D)
    return A, B, C, D


def controller_realisation(ctrl: ShippedController):
    """``(A_k, B_k, C_k, D_k)`` of the feedback part ``u = K_y y`` (see the module docstring)."""
    eq = ctrl.equations
    Ak = eq.state_matrix + eq.control_matrix @ eq.output_state
    Bk = eq.measurement_matrix + eq.control_matrix @ eq.output_measurement
    return Ak, Bk, eq.output_state, eq.output_measurement


def transfer_values(A, B, C, D, points) -> np.ndarray:
    """``C (λI − A)⁻¹ B + D`` at each complex ``λ`` of ``points``: shape (N, p, m)."""
    points = np.asarray(points, dtype=complex).ravel()
    n = A.shape[0]
    if n == 0:
        return np.broadcast_to(D.astype(complex), (points.size, *D.shape)).copy()
    M = points[:, None, None] * np.eye(n)[None] - A[None]
    X = np.linalg.solve(M, np.broadcast_to(B.astype(complex), (points.size, *B.shape)))
    return C[None] @ X + D[None]


@dataclass(frozen=True)
class _Pieces:
    """The plant and the controller realisations, computed once (the ZOH costs an expm)."""

    plant: tuple
    controller: tuple
    sample_time: float | None

    @property
    def digital(self) -> bool:
        return self.sample_time is not None


def _pieces(ctrl: ShippedController) -> _Pieces:
    T = None if ctrl.sample_time is None else float(ctrl.sample_time)
    return _Pieces(plant_realisation(ctrl), controller_realisation(ctrl), T)


def _points(pc: _Pieces, omega: np.ndarray) -> np.ndarray:
    """The complex frequency of each ω: jω, or e^{jωT} on the unit circle when digital."""
    if pc.digital:
        return np.exp(1j * omega * pc.sample_time)
    return 1j * omega


def _grid(ctrl: ShippedController) -> np.ndarray:
    """The frequency grid of the shipped loop (rad/s); digital: mapped from the w-plane."""
    nu = frequency_grid(shipped_loop(ctrl))
    if not ctrl.digital:
        return nu
    T = float(ctrl.sample_time)
    omega = (2.0 / T) * np.arctan(nu * T / 2.0)
    return np.unique(np.append(omega[omega < math.pi / T], math.pi / T))


def _shapes_at(pc: _Pieces, omega: np.ndarray) -> dict[str, np.ndarray]:
    """L_u, S, T at both break points, the noise gain and the controller gain at ω."""
    pts = _points(pc, omega)
    G = transfer_values(*pc.plant, pts)  # (N, p, 1)
    K = transfer_values(*pc.controller, pts)  # (N, 1, p)
    Lu = -(K @ G)[:, 0, 0]
    Ly = -(G @ K)
    eye = np.eye(Ly.shape[1])[None]
    Sy = np.linalg.inv(eye + Ly)
    Su = 1.0 / (1.0 + Lu)
    return {
        "Lu": Lu,
        "Su": Su,
        "Tu": Lu / (1.0 + Lu),
        "Sy": Sy,
        "Ty": Ly @ Sy,
        "noise": np.linalg.norm(Su[:, None, None] * K, ord=2, axis=(1, 2)),
        "controller": np.linalg.norm(K, ord=2, axis=(1, 2)),
    }


def _largest(M: np.ndarray) -> np.ndarray:
    """|x| of scalars, the largest singular value of each matrix of a stack."""
    if M.ndim == 1:
        return np.abs(M)
    return np.linalg.norm(M, ord=2, axis=(1, 2))


def _peak(pc: _Pieces, omega: np.ndarray, grid_values, key: str) -> Peak:
    """The peak of one gain of :func:`_shapes_at`, refined between the grid's neighbours."""
    values = _largest(grid_values[key])
    finite = np.isfinite(values)
    if not np.any(finite):
        return Peak(math.inf, math.nan)
    i = int(np.nanargmax(np.where(finite, values, -np.inf)))
    best, where = float(values[i]), float(omega[i])
    lo, hi = omega[max(i - 1, 0)], omega[min(i + 1, omega.size - 1)]
    for _ in range(REFINE_ROUNDS):
        if hi <= lo:
            break
        local = np.geomspace(lo, hi, 41)
        vals = _largest(_shapes_at(pc, local)[key])
        j = int(np.nanargmax(vals))
        if vals[j] > best:
            best, where = float(vals[j]), float(local[j])
        lo, hi = local[max(j - 1, 0)], local[min(j + 1, local.size - 1)]
    return Peak(best, where)


def _crossovers(pc: _Pieces, omega: np.ndarray, Lu: np.ndarray) -> tuple[float, ...]:
    """Frequencies where |L_u| = 1, by bisection between the grid points that bracket one."""
    g = np.log(np.abs(Lu))
    ok = np.isfinite(g)
    out = []
    for i in np.nonzero(ok[:-1] & ok[1:] & (np.sign(g[:-1]) != np.sign(g[1:])))[0]:
        lo, hi, glo = float(omega[i]), float(omega[i + 1]), float(g[i])
        for _ in range(60):
            mid = math.sqrt(lo * hi)
            gm = float(np.log(np.abs(_shapes_at(pc, np.array([mid]))["Lu"][0])))
            if np.sign(gm) == np.sign(glo):
                lo, glo = mid, gm
            else:
                hi = mid
        out.append(math.sqrt(lo * hi))
    return tuple(out)


def _high_frequency_noise(pc: _Pieces) -> float:
    """|S_u K_y| as ω → ∞ (from the direct terms), or at z = −1 when digital."""
    if pc.digital:
        return float(_shapes_at(pc, np.array([math.pi / pc.sample_time]))["noise"][0])
    D = pc.plant[3]
    Dk = pc.controller[3]
    s_inf = 1.0 / (1.0 - float((Dk @ D)[0, 0]))
    return float(np.linalg.norm(s_inf * Dk, ord=2))


def loop_shapes(ctrl: ShippedController, omega: np.ndarray | None = None) -> LoopShapes:
    """Sensitivities at the plant input and output, and the noise-to-input gain, of the
    shipped loop (one plant input).

    Raises
    ------
    ValueError
        Several plant inputs, or a digital loop with a pole at z = −1.
    """
    if ctrl.plant.B.shape[1] != 1:
        raise ValueError("the loop shapes need a single plant input")
    omega = _grid(ctrl) if omega is None else np.asarray(omega, dtype=float)
    pc = _pieces(ctrl)
    v = _shapes_at(pc, omega)
    cross = _crossovers(pc, omega, v["Lu"])
    noise_c = None
    if cross:
        noise_c = float(_shapes_at(pc, np.array([cross[0]]))["noise"][0])
    return LoopShapes(
        frequency=omega,
        loop_input=v["Lu"],
        S_input=v["Su"],
        T_input=v["Tu"],
        S_output=v["Sy"],
        T_output=v["Ty"],
        noise_to_input=v["noise"],
        controller_gain=v["controller"],
        peak_S_input=_peak(pc, omega, v, "Su"),
        peak_T_input=_peak(pc, omega, v, "Tu"),
        peak_S_output=_peak(pc, omega, v, "Sy"),
        peak_T_output=_peak(pc, omega, v, "Ty"),
        peak_noise=_peak(pc, omega, v, "noise"),
        crossovers_rad_s=cross,
        noise_at_crossover=noise_c,
        noise_high_frequency=_high_frequency_noise(pc),
        direct_term=np.array(ctrl.equations.output_measurement, dtype=float),
        digital=ctrl.digital,
        sample_time=ctrl.sample_time,
        outputs_measured=int(v["Sy"].shape[1]),
    )
