"""The independent numeric side of the engine: NumPy/SciPy only.

These routines never look at a closed form; they are what the closed forms
are checked against, and what the engine falls back to when the symbolic
budget is exhausted or the plant has several inputs or outputs.
"""

from __future__ import annotations

import math
import warnings
from collections import Counter
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np

from . import _sidecar

if TYPE_CHECKING:
    import sympy as sp

__all__ = [
    "evaluate_matrix",
    "numeric_ackermann",
    "scipy_placement",
    "pole_residual",
    "eigenvalue_tolerance",
    "polynomial_residual",
    "relative_difference",
    "transfer_function",
    "frequency_response",
    "sampled_plant",
    "closed_loop_bandwidth",
]


def evaluate_matrix(M: sp.MatrixBase, values: Mapping[sp.Symbol, sp.Expr]) -> np.ndarray:
    """Evaluate a SymPy matrix at exact parameter values, then round to float.

    Substitution is exact (rational values), so the only rounding is the
    final conversion; entries that are not finite (a division by zero at the
    given values) come back as NaN for the caller to report.
    """
    import sympy as sp  # not at the top: the SciPy sidecar imports this module

    out = np.empty(M.shape, dtype=float)
    for i in range(M.shape[0]):
        for j in range(M.shape[1]):
            e = M[i, j]
            if e.free_symbols:
                e = e.xreplace(dict(values))
            if e.is_Rational:
                out[i, j] = float(e)
                continue
            v = complex(sp.N(e, 30))
            if not np.isfinite(v.real) or abs(v.imag) > 1e-12 * max(1.0, abs(v.real)):
                out[i, j] = np.nan
            else:
                out[i, j] = v.real
    return out


def numeric_ackermann(A: np.ndarray, B: np.ndarray, poles: Sequence[complex]) -> np.ndarray:
    """Ackermann's formula in floating point (single input).

    K = e_nᵀ 𝒞⁻¹ α(A), with 𝒞ᵀ w = e_n solved rather than inverted and α(A)
    by Horner's rule.  Works with repeated poles, where
    ``scipy.signal.place_poles`` refuses.  J. Ackermann, *Regelungstechnik*
    20(7):297–300, 1972.
    """
    n = A.shape[0]
    cols = [B[:, 0]]
    for _ in range(n - 1):
        cols.append(A @ cols[-1])
    ctrb = np.column_stack(cols)
    e_n = np.zeros(n)
    e_n[-1] = 1.0
    w = np.linalg.solve(ctrb.T, e_n)
    coeffs = np.real(np.poly(np.asarray(poles, dtype=complex)))
    phi = np.zeros((n, n))
    for c in coeffs:
        phi = phi @ A + c * np.eye(n)
    return (w @ phi).reshape(1, n)


def scipy_placement(
    A: np.ndarray, B: np.ndarray, poles: Sequence[complex]
) -> tuple[np.ndarray | None, str]:
    """K from ``scipy.signal.place_poles``, or None with the reason it is not usable.

    ``place_poles`` refuses a pole repeated more often than rank(B), and can
    misplace nearly repeated poles without a warning (TECH-NOTES), so the
    eigenvalues it achieves are checked here before its gain is trusted.
    Runs in the SciPy sidecar when there is one (:mod:`symbolic._sidecar`).
    """
    return _sidecar.call(_scipy_placement, np.asarray(A), np.asarray(B), list(poles))


def _scipy_placement(
    A: np.ndarray, B: np.ndarray, poles: Sequence[complex]
) -> tuple[np.ndarray | None, str]:
    from scipy.signal import place_poles

    p = np.asarray(poles, dtype=complex)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = place_poles(A, B, p, method="YT", maxiter=60)
    except (ValueError, np.linalg.LinAlgError) as exc:
        return None, f"scipy.signal.place_poles refused: {exc}"
    K = np.asarray(result.gain_matrix, dtype=float)
    achieved = np.linalg.eigvals(A - B @ K)
    res = pole_residual(achieved, p)
    if res > eigenvalue_tolerance(p):
        return None, (
            f"scipy.signal.place_poles returned a gain whose poles are off by {res:.1e}"
            " (relative); its gain is not used as a reference"
        )
    return K, "scipy.signal.place_poles"


def pole_residual(achieved: Sequence[complex], requested: Sequence[complex]) -> float:
    """Largest relative distance between matched achieved and requested poles.

    Poles are paired by an optimal assignment (Hungarian method, as in
    ``scipy.optimize.linear_sum_assignment``) so ordering does not matter;
    each distance is divided by max(1, |requested pole|).  Runs in the SciPy
    sidecar when there is one (:mod:`symbolic._sidecar`).
    """
    return _sidecar.call(_pole_residual, np.asarray(achieved), np.asarray(requested))


def _pole_residual(achieved: np.ndarray, requested: np.ndarray) -> float:
    from scipy.optimize import linear_sum_assignment

    a = np.asarray(achieved, dtype=complex).ravel()
    r = np.asarray(requested, dtype=complex).ravel()
    if a.size != r.size:
        return float("inf")
    if not np.all(np.isfinite(a)):
        return float("inf")
    cost = np.abs(a[:, None] - r[None, :]) / np.maximum(1.0, np.abs(r))[None, :]
    rows, cols = linear_sum_assignment(cost)
    return float(cost[rows, cols].max()) if a.size else 0.0


def eigenvalue_tolerance(poles: Sequence[complex], base: float = 1e-6) -> float:
    """Tolerance of an eigenvalue check that respects multiplicity.

    A pole of multiplicity m is determined by the matrix only to about
    ε^(1/m) (perturbation theory of a Jordan block; J. H. Wilkinson, *The
    Algebraic Eigenvalue Problem*, Oxford, 1965, Ch. 2), so the tolerance is
    max(base, (1e-13)^(1/m)) with m the largest multiplicity.
    """
    rounded = Counter(complex(round(complex(p).real, 9), round(complex(p).imag, 9)) for p in poles)
    mult = max(rounded.values()) if rounded else 1
    return max(base, 1e-13 ** (1.0 / mult))


def polynomial_residual(M: np.ndarray, coeffs: Sequence[float]) -> float:
    """Relative difference between det(sI − M)'s coefficients and ``coeffs``."""
    got = np.real(np.poly(M))
    want = np.asarray(coeffs, dtype=float)
    return float(np.linalg.norm(got - want) / max(1.0, np.linalg.norm(want)))


def relative_difference(a: np.ndarray, b: np.ndarray) -> float:
    """‖a − b‖ / max(‖b‖, tiny), Frobenius norms."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    return float(np.linalg.norm(a - b) / max(np.linalg.norm(b), 1e-300))


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


# the SciPy module each sidecar function loads (symbolic._sidecar.call)
for _func in (_scipy_placement, _transfer_function, _frequency_response, _sampled_plant):
    _func.sidecar_needs = "scipy.signal"  # type: ignore[attr-defined]
for _func in (_pole_residual, _closed_loop_bandwidth):
    _func.sidecar_needs = "scipy.optimize"  # type: ignore[attr-defined]
