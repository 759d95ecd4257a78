"""Exact stepping of a linear loop driven by a constant reference.

A linear time-invariant loop ``z' = F z + G r`` with a constant ``r`` is stepped *exactly* at
the samples of a uniform grid (zero-order-hold stepping, exact for any step size) with one
matrix exponential (Van Loan's augmented matrix [1]).  A run stops at the first sample where
the state passes :data:`STATE_LIMIT`.

References
----------
.. [1] C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE Transactions
   on Automatic Control 23(3):395-404, 1978. doi:10.1109/TAC.1978.1101743
"""

from __future__ import annotations

import numpy as np
import scipy.linalg

__all__ = ["STATE_LIMIT", "first_over_limit", "step_linear"]

#: A run stops at the first sample where the largest absolute state entry (the infinity norm of
#: the plant state and the estimate stacked) exceeds this value.
STATE_LIMIT = 1e12

#: Samples advanced per matrix-vector product in the exact stepping.
_BLOCK = 32


def _zoh_matrices(F: np.ndarray, G: np.ndarray, step: float) -> tuple[np.ndarray, np.ndarray]:
    """``Phi = expm(F h)`` and ``Gamma = int_0^h expm(F tau) dtau G`` from one exponential.

    Van Loan [1]: ``expm([[F, G], [0, 0]] h) = [[Phi, Gamma], [0, I]]``.
    """
    size = F.shape[0]
    augmented = np.zeros((size + 1, size + 1))
    augmented[:size, :size] = F * step
    augmented[:size, size:] = np.reshape(G, (size, 1)) * step
    exponential = scipy.linalg.expm(augmented)
    return exponential[:size, :size], exponential[:size, size]


def first_over_limit(block: np.ndarray) -> int | None:
    """First row of ``block`` with an entry past :data:`STATE_LIMIT` (or nan), None if none."""
    with np.errstate(invalid="ignore"):
        bad = ~(np.abs(block) <= STATE_LIMIT)  # also catches nan and inf
    rows = np.flatnonzero(bad.any(axis=1))
    return int(rows[0]) if rows.size else None


def step_linear(
    F: np.ndarray, G: np.ndarray, reference: float, z0: np.ndarray, time: np.ndarray
) -> tuple[np.ndarray, bool]:
    """Exact ZOH stepping of ``z' = F z + G r`` (constant r) on a uniform grid.

    Returns the trajectory (one row per sample, shorter when the state passed
    :data:`STATE_LIMIT`) and whether it stopped early.  ``z_{k+1} = Phi z_k + Gamma r``
    with ``Phi = expm(F h)`` and ``Gamma = int_0^h expm(F tau) dtau G``, both read from one
    exponential of the augmented matrix ``[[F, G], [0, 0]] h`` (Van Loan [1]).  The result is
    exact at the samples for any step ``h``, up to rounding.

    Done ``BLOCK`` samples at a time: with ``P_j = Phi^j`` and ``S_j = sum_{i<j} Phi^i Gamma``,
    ``z_{k+j} = P_j z_k + S_j r`` for ``j = 1..BLOCK`` is one matrix-vector product per block
    (the same recursion, regrouped; the divergence check runs once per block).
    """
    samples = time.size
    step = float(time[1] - time[0])
    phi, gamma = _zoh_matrices(F, G, step)
    size = z0.size
    block = min(_BLOCK, samples - 1)
    powers = np.empty((block, size, size))
    sums = np.empty((block, size))
    powers[0] = phi
    sums[0] = gamma
    with np.errstate(over="ignore", invalid="ignore"):
        for j in range(1, block):
            powers[j] = phi @ powers[j - 1]
            sums[j] = phi @ sums[j - 1] + gamma
        stacked = powers.reshape(block * size, size)
        drive = sums * reference
        trajectory = np.empty((samples, size))
        trajectory[0] = z0
        z = z0
        for start in range(1, samples, block):
            count = min(block, samples - start)
            values = (stacked[: count * size] @ z).reshape(count, size) + drive[:count]
            trajectory[start : start + count] = values
            first = first_over_limit(values)
            if first is not None:
                return trajectory[: start + first], True
            z = values[-1]
    return trajectory, False
