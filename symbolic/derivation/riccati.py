"""The continuous algebraic Riccati equation in floating point: the optimal gain and its poles.

The numeric half of the optimal pole rules (:mod:`symbolic.derivation.optimal`): NumPy and
``scipy.linalg.solve_continuous_are`` only, no SymPy, so that it runs in the SciPy sidecar
(:mod:`symbolic.runtime.sidecar`).  The linear-quadratic regulator minimises
``∫ (xᵀQx + uᵀRu) dt`` with ``u = −Kx``, ``K = R⁻¹BᵀP`` and P the stabilising solution of

    AᵀP + PA − PBR⁻¹BᵀP + Q = 0,

B. D. O. Anderson and J. B. Moore, *Optimal Control: Linear Quadratic Methods*, Prentice
Hall, 1990, Ch. 2 and 3 (from memory).  The steady-state Kalman–Bucy filter is its dual: the
same equation for the pair (Aᵀ, Cᵀ) with the process noise W for Q and the measurement noise V
for R gives ``L = PCᵀV⁻¹`` (R. E. Kalman and R. S. Bucy, "New results in linear filtering and
prediction theory", Journal of Basic Engineering 83(1):95–108, 1961).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["RiccatiSolution", "riccati_gain"]


@dataclass(frozen=True)
class RiccatiSolution:
    """The stabilising solution P, the gain ``R⁻¹BᵀP`` and the poles of ``A − B·gain``.

    ``gain`` is None when there is no stabilising solution; ``reason`` then says why.
    """

    riccati: np.ndarray | None
    gain: np.ndarray | None
    poles: np.ndarray | None
    residual: float
    reason: str = ""


def riccati_gain(A: np.ndarray, B: np.ndarray, Q: np.ndarray, R: np.ndarray) -> RiccatiSolution:
    """The linear-quadratic gain of (A, B) for the weights Q, R, checked.

    Parameters
    ----------
    A, B : ndarray
        n × n and n × m.
    Q, R : ndarray
        n × n symmetric positive semidefinite and m × m symmetric positive definite.

    Returns
    -------
    RiccatiSolution
        ``residual`` is ``‖AᵀP + PA − PBR⁻¹BᵀP + Q‖_F`` divided by the sum of the norms of its
        four terms; the solution is refused (``gain`` None) when SciPy raises, when P is not
        finite, or when a pole of ``A − BK`` is not in the open left half-plane (the pair is
        not stabilisable, or Q hides a mode on the imaginary axis).

    Examples
    --------
    The double integrator with Q = diag(1, 0), R = 1 has K = [1, √2] (Anderson and Moore,
    from memory):

    >>> sol = riccati_gain(np.array([[0., 1.], [0., 0.]]), np.array([[0.], [1.]]),
    ...                    np.diag([1., 0.]), np.array([[1.]]))
    >>> np.round(sol.gain, 12).tolist()
    [[1.0, 1.414213562373]]
    """
    from scipy.linalg import solve_continuous_are

    A, B, Q, R = (np.asarray(M, dtype=float) for M in (A, B, Q, R))
    try:
        P = solve_continuous_are(A, B, Q, R)
    except (ValueError, np.linalg.LinAlgError) as exc:
        return RiccatiSolution(None, None, None, float("inf"), f"SciPy found no solution ({exc})")
    if not np.all(np.isfinite(P)):
        return RiccatiSolution(None, None, None, float("inf"), "the solution is not finite")
    P = (P + P.T) / 2.0
    K = np.linalg.solve(R, B.T @ P)
    terms = (A.T @ P, P @ A, P @ B @ K, Q)
    total = sum(float(np.linalg.norm(t)) for t in terms)
    residual = float(np.linalg.norm(terms[0] + terms[1] - terms[2] + Q)) / max(total, 1e-300)
    poles = np.linalg.eigvals(A - B @ K)
    scale = max(1.0, float(np.max(np.abs(poles))))
    if not np.all(poles.real < -1e-10 * scale):
        worst = poles[np.argmax(poles.real)]
        return RiccatiSolution(
            P,
            None,
            poles,
            residual,
            f"the solution leaves a pole at {worst:.4g}, not in the open left half-plane",
        )
    return RiccatiSolution(P, K, poles, residual)


riccati_gain.sidecar_needs = "scipy.linalg"  # type: ignore[attr-defined]
