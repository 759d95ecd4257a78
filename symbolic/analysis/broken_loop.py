"""Single-input loops broken at the plant input: realisations, frequency response, stability.

Two loops are studied for every single-input design, side by side:

* **state feedback with the true state**: the loop transfer function is
  L(s) = K (sI − A)⁻¹ B (realisation (A, B, K, 0));
* **the observer-based compensator**: L(s) = C(s) G(s) with the plant
  G(s) = C (sI − A)⁻¹ B + D and the compensator C(s) = K (sI − F)⁻¹ L,
  F = A − BK − LC + LDK, so that u = −C(s) y.  The series connection has
  the realisation::

      A_L = [[A, 0], [L C, F]],  B_L = [[B], [L D]],  C_L = [0, K],  D_L = 0

  (plant state first, then the compensator state; the signal injected at
  the broken plant input drives the plant and, through the feedthrough D,
  the measurement the observer sees).

The loop is closed as v = −k w around the realisation (k = 1 is the design);
for a strictly proper loop the closed-loop matrix is A_L − k B_L C_L, and in
general A_L − k B_L (1 + k D_L)⁻¹ C_L.  The margins of these loops are
computed by :mod:`symbolic.analysis.margins`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "BrokenLoop",
    "axis_poles",
    "closed_loop_matrix",
    "frequency_grid",
    "is_stable",
    "loop_response",
    "observer_loop",
    "spectral_scale",
    "stable_at_gains",
    "state_feedback_loop",
]

#: Points per decade of the frequency grid before refinement.
POINTS_PER_DECADE = 120
#: Eigenvalues with |Re| below this times max(1, spectral radius) count as on the imaginary axis.
AXIS_TOLERANCE = 1e-6


@dataclass(frozen=True)
class BrokenLoop:
    """A single-input, single-output loop transfer function L(s) as a realisation.

    L(s) = C (sI − A)⁻¹ B + D, closed by negative feedback v = −k w.
    """

    name: str
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    description: str = ""

    @property
    def order(self) -> int:
        return int(self.A.shape[0])


def _as_float(M, shape=None) -> np.ndarray:
    out = np.array(M, dtype=float, copy=True)
    if shape is not None:
        out = out.reshape(shape)
    return out


def state_feedback_loop(A: np.ndarray, B: np.ndarray, K: np.ndarray) -> BrokenLoop:
    """The loop K (sI − A)⁻¹ B: state feedback with the true state, broken at the input.

    Parameters
    ----------
    A : (n, n) array
    B : (n, 1) array
    K : (1, n) array

    Returns
    -------
    BrokenLoop
        Realisation (A, B, K, 0).

    Examples
    --------
    >>> import numpy as np
    >>> loop = state_feedback_loop(np.array([[0., 1.], [0., 0.]]), np.array([[0.], [1.]]),
    ...                            np.array([[8., 4.]]))
    >>> np.sort_complex(np.linalg.eigvals(closed_loop_matrix(loop, 1.0)))
    array([-2.-2.j, -2.+2.j])
    """
    A = _as_float(A)
    n = A.shape[0]
    B = _as_float(B, (n, -1))
    K = _as_float(K, (-1, n))
    if B.shape[1] != 1 or K.shape[0] != 1:
        raise ValueError("the loop broken at the plant input needs a single input")
    return BrokenLoop(
        "state feedback",
        A,
        B,
        K,
        np.zeros((1, 1)),
        "K (sI − A)⁻¹ B: state feedback with the true state",
    )


def observer_loop(
    A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray, K: np.ndarray, L: np.ndarray
) -> BrokenLoop:
    """The loop C(s) G(s) of the observer-based compensator, broken at the plant input.

    G(s) = C (sI − A)⁻¹ B + D and C(s) = K (sI − F)⁻¹ L with
    F = A − BK − LC + LDK (so u = −C(s) y).  The series connection
    (plant first) has the realisation
    A_L = [[A, 0], [L C, F]], B_L = [[B], [L D]], C_L = [0, K], D_L = 0.

    Parameters
    ----------
    A, B, C, D : arrays
        The plant (single input; any number of outputs).
    K : (1, n) array
    L : (n, p) array

    Returns
    -------
    BrokenLoop

    Notes
    -----
    Closing this loop with k = 1 gives [[A, −BK], [LC, A − BK − LC]], whose
    eigenvalues are the controller and observer poles (the separation
    principle; D. G. Luenberger, "An introduction to observers", *IEEE
    Trans. Automatic Control* 16(6):596–602, 1971).
    """
    A = _as_float(A)
    n = A.shape[0]
    B = _as_float(B, (n, -1))
    C = _as_float(C, (-1, n))
    p = C.shape[0]
    D = _as_float(D, (p, B.shape[1]))
    K = _as_float(K, (-1, n))
    L = _as_float(L, (n, p))
    if B.shape[1] != 1 or K.shape[0] != 1:
        raise ValueError("the loop broken at the plant input needs a single input")
    F = A - B @ K - L @ C + L @ D @ K
    AL = np.block([[A, np.zeros((n, n))], [L @ C, F]])
    BL = np.vstack([B, L @ D])
    CL = np.hstack([np.zeros((1, n)), K])
    return BrokenLoop(
        "observer-based",
        AL,
        BL,
        CL,
        np.zeros((1, 1)),
        "C(s) G(s): observer-based compensator K (sI − F)⁻¹ L in series with the plant",
    )


def loop_response(loop: BrokenLoop, s: np.ndarray | complex) -> np.ndarray:
    """L(s) = C (sI − A)⁻¹ B + D at complex points s (vectorised; s = jω for a frequency response).

    Points at an eigenvalue of A give ``inf``.
    """
    s_arr = np.atleast_1d(np.asarray(s, dtype=complex))
    n = loop.order
    out = np.empty(s_arr.shape, dtype=complex)
    eye = np.eye(n)
    flat = s_arr.ravel()
    res = np.empty(flat.size, dtype=complex)
    step = 4096
    for start in range(0, flat.size, step):
        chunk = flat[start : start + step]
        M = chunk[:, None, None] * eye[None] - loop.A[None]
        rhs = np.broadcast_to(loop.B.astype(complex), (chunk.size, n, 1))
        try:
            x = np.linalg.solve(M, rhs)
            res[start : start + step] = (loop.C @ x)[:, 0, 0] + loop.D[0, 0]
        except np.linalg.LinAlgError:
            for i, z in enumerate(chunk):
                try:
                    xi = np.linalg.solve(z * eye - loop.A, loop.B.astype(complex))
                    res[start + i] = (loop.C @ xi)[0, 0] + loop.D[0, 0]
                except np.linalg.LinAlgError:
                    res[start + i] = complex(np.inf, 0.0)
    out[...] = res.reshape(s_arr.shape)
    return out if np.ndim(s) else out[0]


def closed_loop_matrix(loop: BrokenLoop, k: float) -> np.ndarray:
    """State matrix of the loop closed by v = −k w: A − k B (1 + k D)⁻¹ C."""
    d = float(loop.D[0, 0])
    return loop.A - (k / (1.0 + k * d)) * (loop.B @ loop.C)


def spectral_scale(eigs: np.ndarray) -> float:
    """max(1, spectral radius): the scale of the relative tolerances on eigenvalues."""
    return max(1.0, float(np.max(np.abs(eigs)))) if eigs.size else 1.0


def is_stable(M: np.ndarray) -> bool:
    """True when every eigenvalue of M has a negative real part (asymptotic stability).

    Real parts within 1e-10·max(1, spectral radius) of zero count as not stable.
    """
    eig = np.linalg.eigvals(M)
    if not np.all(np.isfinite(eig)):
        return False
    return bool(np.max(eig.real) < -1e-10 * spectral_scale(eig)) if eig.size else True


def stable_at_gains(loop: BrokenLoop, ks: np.ndarray) -> np.ndarray:
    """Whether the loop closed at each gain factor in ``ks`` is stable (vectorised).

    Stable as in :func:`is_stable`: every real part below −1e-10·max(1, spectral radius).
    """
    d = float(loop.D[0, 0])
    BC = loop.B @ loop.C
    factors = ks / (1.0 + ks * d)
    mats = loop.A[None] - factors[:, None, None] * BC[None]
    eig = np.linalg.eigvals(mats)
    radius = np.maximum(1.0, np.max(np.abs(eig), axis=1))
    return np.max(eig.real, axis=1) < -1e-10 * radius


def axis_poles(eigs: np.ndarray) -> np.ndarray:
    """Eigenvalues on the imaginary axis (within AXIS_TOLERANCE, relative)."""
    tol = AXIS_TOLERANCE * spectral_scale(eigs)
    return eigs[np.abs(eigs.real) <= tol]


def frequency_grid(loop: BrokenLoop, points_per_decade: int = POINTS_PER_DECADE) -> np.ndarray:
    """A logarithmic grid of positive frequencies [rad/s] for the loop.

    It spans three decades below the slowest and above the fastest open- or
    closed-loop pole (extended until |L| < 1e-3 at the top), with extra
    points around every lightly damped pole, and avoids the frequencies of
    poles on the imaginary axis.
    """
    poles = np.linalg.eigvals(loop.A)
    closed = np.linalg.eigvals(closed_loop_matrix(loop, 1.0))
    allp = np.concatenate([poles, closed])
    mags = np.abs(allp)
    mags = mags[mags > AXIS_TOLERANCE * spectral_scale(allp)]
    lo = float(mags.min()) / 1e3 if mags.size else 1e-3
    hi = float(mags.max()) * 1e3 if mags.size else 1e3
    for _ in range(8):
        value = loop_response(loop, 1j * hi)
        if np.isfinite(value) and abs(value - loop.D[0, 0]) < 1e-3:
            break
        hi *= 10.0
    decades = math.log10(hi / lo)
    grid = [np.geomspace(lo, hi, int(points_per_decade * decades) + 1)]
    zero = AXIS_TOLERANCE * spectral_scale(allp)
    for p in allp:
        w, sigma = abs(p.imag), abs(p.real)
        if w > zero and sigma < 0.7 * abs(p):
            width = max(sigma, 1e-6 * w)
            local = w + width * np.linspace(-12.0, 12.0, 97)
            grid.append(local[local > 0])
    omega = np.unique(np.concatenate(grid))
    axis = axis_poles(poles)
    for p in axis:
        w = abs(p.imag)
        if w > 0:
            omega = omega[np.abs(omega - w) > 1e-9 * w]
    return omega
