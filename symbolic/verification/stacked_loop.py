"""The closed loop of a :class:`~symbolic.verification.step_results.LoopModel` in its stacked state.

The plant :math:`\\dot x = A x + B u`, :math:`y = C x + D u` under the control law
:math:`u = -K \\hat x + N r` with a full-order (Luenberger [1]) observer

.. math::  \\dot{\\hat x} = A \\hat x + B u + L (y - C \\hat x - D u),

is one linear system in the stacked state ``z = [x; x_hat]`` (``z = x`` when the true state is
fed back).  This module forms its matrices, decides its stability and computes its equilibrium.

References
----------
.. [1] D. G. Luenberger, "An introduction to observers", IEEE Transactions on Automatic Control
   16(6):596-602, 1971. doi:10.1109/TAC.1971.1099826
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .step_results import LoopModel

__all__ = ["StackedLoop", "is_stable", "stability_tolerance", "stacked_loop", "steady_state"]


@dataclass(frozen=True, eq=False)
class StackedLoop:
    """Closed-loop matrices in the stacked state ``z`` (``x`` or ``[x; x_hat]``).

    Linear loop: ``z' = F z + G r``, ``y = Cz z + Dz r``, ``u = Ku z + N r``.
    Open form for the limit: ``z' = F0 z + Bz u``, with ``u = clip(Ku z + N r)``.
    """

    F: np.ndarray
    G: np.ndarray
    F0: np.ndarray
    Bz: np.ndarray
    Cz: np.ndarray
    Dz: np.ndarray
    Ku: np.ndarray
    N: np.ndarray
    eigenvalues: np.ndarray
    n: int
    observer: bool


def stacked_loop(model: LoopModel, use_observer: bool) -> StackedLoop:
    """The matrices of the loop with the observer (``z = [x; x_hat]``) or on the true state.

    With the stacked state ``z = [x; x_hat]`` the linear loop is

    .. math:: \\dot z = F z + G r,\\quad F = \\begin{bmatrix} A & -BK \\\\ LC & A-BK-LC
              \\end{bmatrix},\\quad G = \\begin{bmatrix} BN \\\\ BN \\end{bmatrix},

    ``y = [C, -D K] z + D N r`` and ``u = [0, -K] z + N r`` (true state: ``F = A - B K``,
    ``G = B N``).  With a limit on ``u`` the open form ``z' = F0 z + Bz sat(u)`` is used; the
    observer is assumed to be fed the *applied* (limited) input, so the estimation error still
    obeys ``e' = (A - L C) e``.
    """
    A, B, C, D, K, L, N = (
        model.A,
        model.B,
        model.C,
        model.D,
        model.K,
        model.L,
        model.reference_gain,
    )
    n, m = model.n_states, model.n_inputs
    BK = B @ K
    controller_poles = np.linalg.eigvals(A - BK)
    if use_observer:
        LC = L @ C
        # x' = A x - B K x_hat + B N r
        # x_hat' = A x_hat + B u + L (y - C x_hat - D u) = L C x + (A - B K - L C) x_hat + B N r
        # (Luenberger [1]; the D u terms cancel because the observer subtracts its own D u).
        F = np.block([[A, -BK], [LC, A - BK - LC]])
        G = np.vstack([B @ N, B @ N])
        F0 = np.block([[A, np.zeros((n, n))], [LC, A - LC]])
        Bz = np.vstack([B, B])
        Cz = np.hstack([C, -D @ K])
        Ku = np.hstack([np.zeros((m, n)), -K])
        # In (x, e = x - x_hat) coordinates the loop is block triangular with blocks A - B K and
        # A - L C (the separation principle [1]); their eigenvalues are computed apart, which is
        # more accurate than the eigenvalues of the 2n matrix F.
        eigenvalues = np.concatenate([controller_poles, np.linalg.eigvals(A - LC)])
    else:
        F = A - BK
        G = B @ N
        F0 = A
        Bz = B
        Cz = C - D @ K
        Ku = -K
        eigenvalues = controller_poles
    return StackedLoop(
        F=F,
        G=G,
        F0=F0,
        Bz=Bz,
        Cz=Cz,
        Dz=D @ N,
        Ku=Ku,
        N=N,
        eigenvalues=eigenvalues,
        n=n,
        observer=use_observer,
    )


def stability_tolerance(eigenvalues: np.ndarray) -> float:
    """A real part counts as zero within ``1e-10 max(1, max |lambda_i|)``."""
    return 1e-10 * max(1.0, float(np.max(np.abs(eigenvalues))))


def is_stable(eigenvalues: np.ndarray) -> bool:
    """Every eigenvalue has a real part below minus :func:`stability_tolerance`."""
    return bool(np.max(eigenvalues.real) < -stability_tolerance(eigenvalues))


def steady_state(model: LoopModel, reference: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Equilibrium ``x_ss``, ``y_ss`` and ``u_ss`` of the (stable) linear loop.

    ``x_ss = -(A - B K)^{-1} B N r``; the estimate settles at ``x_hat_ss = x_ss`` because the
    estimation error obeys ``e' = (A - L C) e`` [1].
    """
    A, B, C, D, K, N = model.A, model.B, model.C, model.D, model.K, model.reference_gain
    x_ss = np.linalg.solve(A - B @ K, -(B @ N)[:, 0] * reference)
    u_ss = -K @ x_ss + N[:, 0] * reference
    y_ss = C @ x_ss + D @ u_ss
    return x_ss, y_ss, u_ss
