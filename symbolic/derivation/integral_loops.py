"""The loops of the integral-action study as linear systems, stepped exactly.

A reference-gain loop or an integral loop on a "true" plant, with the observer on the nominal
model (:func:`loop_matrices`), stepped on a uniform grid by Van Loan's matrix exponential
(exact at the samples) with the exact equilibria before and after a step input disturbance
(:func:`simulate_linear`).  Used by :mod:`symbolic.derivation.integral_study`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "STATE_LIMIT",
    "LoopMatrices",
    "Trajectory",
    "linear_loop",
    "loop_matrices",
    "loop_output",
    "overshoot_percent",
    "simulate_linear",
    "slowest_rate",
]

#: A run stops when the state grows past this size (as in :mod:`symbolic.verification.stepping`).
STATE_LIMIT = 1e12


@dataclass(frozen=True)
class LoopMatrices:
    """``z' = F0 z + Bu u + Ed d + Er r``, ``u = Ku z + Nr r``, ``y_t = Cy z + Dy (u + d)``."""

    F0: np.ndarray
    Bu: np.ndarray
    Ed: np.ndarray
    Er: np.ndarray
    Ku: np.ndarray
    Nr: np.ndarray
    Cy: np.ndarray
    Dy: np.ndarray
    n: int
    integral: bool


def loop_matrices(true, nominal, K, L, idx, *, N=None, ki=None) -> LoopMatrices:
    """The loop: true plant, observer on the nominal model, reference gain or integrator.

    Plant ``x' = A_t x + B_t (u + d e_1)``, ``y = C_t x + D_t (u + d e_1)`` (the disturbance
    acts on the first input); observer ``x̂' = A x̂ + B u + L (y - C x̂ - D u)``; integrator
    ``x_I' = y_t - r``; control ``u = -K x̂ + N r`` or ``u = -K x̂ - k_i x_I``.
    """
    At, Bt, Ct, Dt = true
    A, B, C, D = nominal
    n, m = A.shape[0], B.shape[1]
    integ = ki is not None
    nz = 2 * n + (1 if integ else 0)
    F0 = np.zeros((nz, nz))
    F0[:n, :n] = At
    F0[n : 2 * n, :n] = L @ Ct
    F0[n : 2 * n, n : 2 * n] = A - L @ C
    rows_u = [Bt, B - L @ D + L @ Dt]
    rows_d = [Bt[:, :1], L @ Dt[:, :1]]
    Er = np.zeros((nz, 1))
    Ku = np.zeros((m, nz))
    Ku[:, n : 2 * n] = -K
    if integ:
        F0[2 * n, :n] = Ct[idx]
        rows_u.append(Dt[idx : idx + 1, :])
        rows_d.append(Dt[idx : idx + 1, :1])
        Er[2 * n, 0] = -1.0
        Ku[:, 2 * n :] = -ki
    Cy = np.zeros((1, nz))
    Cy[0, :n] = Ct[idx]
    return LoopMatrices(
        F0=F0,
        Bu=np.vstack(rows_u),
        Ed=np.vstack(rows_d),
        Er=Er,
        Ku=Ku,
        Nr=np.zeros((m, 1)) if N is None else np.asarray(N, dtype=float).reshape(m, 1),
        Cy=Cy,
        Dy=Dt[idx : idx + 1, :],
        n=n,
        integral=integ,
    )


def linear_loop(loop: LoopMatrices) -> tuple[np.ndarray, np.ndarray]:
    """``z' = F z + G w`` with ``w = [r, d]``."""
    F = loop.F0 + loop.Bu @ loop.Ku
    G = np.hstack([loop.Er + loop.Bu @ loop.Nr, loop.Ed])
    return F, G


def loop_output(loop: LoopMatrices, Z: np.ndarray, W: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Tracked output and control along a trajectory (rows of Z, inputs rows of W = [r, d])."""
    U = Z @ loop.Ku.T + W[:, :1] @ loop.Nr.T
    Ud = U.copy()
    Ud[:, 0] += W[:, 1]
    y = Z @ loop.Cy.T + Ud @ loop.Dy.T
    return y[:, 0], U


def overshoot_percent(y: np.ndarray, final: float | None) -> float | None:
    """Percent overshoot of ``y`` over ``final`` (None without a final value)."""
    if final is None or final == 0 or not np.all(np.isfinite(y)):
        return None
    s = math.copysign(1.0, final)
    return max(0.0, 100.0 * (float(np.max(s * y)) - abs(final)) / abs(final))


@dataclass(frozen=True)
class Trajectory:
    """One run on the grid (cut short when the state diverges) and its exact equilibria."""

    time: np.ndarray
    output: np.ndarray
    control: np.ndarray
    stable: bool
    stopped: bool
    finals: dict[str, float]  # exact tracked output at equilibrium: "before" / "after" d


def simulate_linear(loop, r, dist, t_d, time) -> Trajectory:
    """Exact stepping of the linear loop on a uniform grid (Van Loan); exact equilibria."""
    F, G = linear_loop(loop)
    nz = F.shape[0]
    h = float(time[1] - time[0])
    M = np.zeros((nz + 2, nz + 2))
    M[:nz, :nz] = F * h
    M[:nz, nz:] = G * h
    import scipy.linalg  # the memo's simulation, not derive

    E = scipy.linalg.expm(M)  # Van Loan: [[Phi, Gamma], [0, I]]
    Phi, Gam = E[:nz, :nz], E[:nz, nz:]
    W = np.zeros((time.size, 2))
    W[:, 0] = r
    W[time >= t_d - 1e-12 * max(1.0, t_d), 1] = dist
    Z = np.zeros((time.size, nz))
    stopped = False
    with np.errstate(over="ignore", invalid="ignore"):
        for k in range(time.size - 1):
            Z[k + 1] = Phi @ Z[k] + Gam @ W[k]
            if not np.all(np.abs(Z[k + 1]) <= STATE_LIMIT):
                Z, W, time = Z[: k + 1], W[: k + 1], time[: k + 1]
                stopped = True
                break
    eig = np.linalg.eigvals(F)
    stable = bool(np.max(eig.real) < -1e-10 * max(1.0, float(np.max(np.abs(eig)))))
    y, U = loop_output(loop, Z, W)
    finals = {}
    if stable:
        for key, w in (("before", np.array([r, 0.0])), ("after", np.array([r, dist]))):
            zs = np.linalg.solve(F, -G @ w)
            ys, _ = loop_output(loop, zs[np.newaxis, :], w[np.newaxis, :])
            finals[key] = float(ys[0])
    return Trajectory(time, y, U, stable, stopped, finals)


def slowest_rate(*matrices: np.ndarray) -> float:
    """The slowest decay rate among the stable ones of ``matrices`` (1 when none is stable)."""
    rates = [-float(np.max(np.linalg.eigvals(M).real)) for M in matrices]
    positive = [x for x in rates if x > 0]
    return min(positive) if positive else 1.0
