"""SciPy's view of a model as a system: transfer function, frequency response, ZOH model and
closed-loop bandwidth.

Independent numeric evaluations (``scipy.signal``, ``scipy.linalg``, ``scipy.optimize``) that
the closed forms are compared with; each runs in the SciPy sidecar when there is one
(:mod:`symbolic.runtime.sidecar`).
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from ..runtime import sidecar as _sidecar

__all__ = [
    "closed_loop_bandwidth",
    "frequency_response",
    "sampled_plant",
    "transfer_function",
]


def transfer_function(
    A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Numerator and denominator coefficients of a one-input, one-output state-space model.

    ``scipy.signal.ss2tf`` (in the SciPy sidecar when there is one), real parts,
    with the leading zero that SciPy keeps for a strictly proper model dropped.
    """
    return _sidecar.call(_transfer_function, *(np.asarray(M) for M in (A, B, C, D)))


def _transfer_function(
    A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    from scipy.signal import ss2tf

    num, den = ss2tf(A, B, C, D)
    num = np.real(num[0])
    den = np.real(den)
    if num.size == den.size and abs(num[0]) <= 1e-12 * max(1.0, np.abs(num).max()):
        num = num[1:]
    return num, den


def frequency_response(
    A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray, omega: np.ndarray
) -> np.ndarray:
    """``scipy.signal.freqresp`` of a one-input, one-output state-space model at ``omega``.

    An independent evaluation for cross-checks (in the SciPy sidecar when there is
    one); warnings of SciPy's polynomial route are silenced, its values are compared.
    """
    return _sidecar.call(
        _frequency_response, *(np.asarray(M) for M in (A, B, C, D)), np.asarray(omega)
    )


def _frequency_response(A, B, C, D, omega) -> np.ndarray:
    from scipy.signal import StateSpace, freqresp

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _w, response = freqresp(StateSpace(A, B, C, D), w=omega)
    return np.asarray(response)


def sampled_plant(
    A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray, T: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The zero-order-hold model two ways: ``(Φ, Γ)`` from one ``scipy.linalg.expm`` of
    ``[[A, B], [0, 0]]·T`` (C. F. Van Loan, IEEE Trans. Automatic Control 23(3):395–404,
    1978), then ``(Φ, Γ)`` from ``scipy.signal.cont2discrete(..., method="zoh")`` for the
    comparison (in the SciPy sidecar when there is one)."""
    return _sidecar.call(_sampled_plant, *(np.asarray(M) for M in (A, B, C, D)), float(T))


def _sampled_plant(A, B, C, D, T):
    import scipy.linalg
    from scipy.signal import cont2discrete

    n, m = B.shape
    M = np.zeros((n + m, n + m))
    M[:n, :n] = A * T
    M[:n, n:] = B * T
    E = scipy.linalg.expm(M)
    ref = cont2discrete((A, B, C, D), T, method="zoh")
    return E[:n, :n], E[:n, n:], np.asarray(ref[0]), np.asarray(ref[1])


def closed_loop_bandwidth(A, B, C, D, K, N, tracked: int = 0) -> float | None:
    """−3 dB bandwidth (rad/s) of the continuous loop from r to the tracked output.

    ``G(jω) = (C_t − D_t K)(jωI − A + BK)⁻¹ B N + D_t N``; the first ω where
    ``|G(jω)| = |G(0)|/√2``, found on a logarithmic grid and refined with Brent's method
    (in the SciPy sidecar when there is one).  None when ``G(0) = 0`` or the magnitude
    never falls that far.

    Examples
    --------
    >>> round(closed_loop_bandwidth(np.array([[-1.0]]), np.array([[1.0]]), np.array([[1.0]]),
    ...                             np.zeros((1, 1)), np.array([[1.0]]), np.array([[2.0]])), 9)
    2.0
    """
    args = (np.asarray(M, dtype=float) for M in (A, B, C, D, K, N))
    return _sidecar.call(_closed_loop_bandwidth, *args, int(tracked))


def _closed_loop_bandwidth(A, B, C, D, K, N, tracked: int) -> float | None:
    from scipy.optimize import brentq

    Acl = A - B @ K
    Ct, Dt = C[tracked : tracked + 1, :], D[tracked : tracked + 1, :]
    Cc, Bc, Dc = Ct - Dt @ K, B @ N, Dt @ N
    n = A.shape[0]

    def mag(w: float) -> float:
        G = Cc @ np.linalg.solve(1j * w * np.eye(n) - Acl, Bc) + Dc
        return float(np.abs(G).item())

    try:
        g0 = float(np.abs(Cc @ np.linalg.solve(-Acl, Bc) + Dc).item())
    except np.linalg.LinAlgError:
        return None
    if not math.isfinite(g0) or g0 == 0:
        return None
    level = g0 / math.sqrt(2.0)
    eig = np.abs(np.linalg.eigvals(Acl))
    eig = eig[eig > 0]
    lo = float(np.min(eig)) if eig.size else 1.0
    hi = float(np.max(eig)) if eig.size else 1.0
    grid = np.logspace(math.log10(lo) - 3, math.log10(hi) + 3, 3000)
    previous = 0.0
    for w in grid:
        if mag(w) < level:
            return float(brentq(lambda x: mag(x) - level, previous, w, xtol=1e-14 * w))
        previous = w
    return None


# the SciPy module each sidecar function loads (symbolic.runtime.sidecar.call)
for _func in (_transfer_function, _frequency_response, _sampled_plant):
    _func.sidecar_needs = "scipy.signal"  # type: ignore[attr-defined]
_closed_loop_bandwidth.sidecar_needs = "scipy.optimize"  # type: ignore[attr-defined]
