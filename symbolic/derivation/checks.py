"""How a derived number is compared with its reference: the checks shared by every stage.

An eigenvalue check (:func:`eigenvalue_check`, decided by
:func:`symbolic.derivation.numeric.check_eigenvalues`), the tolerance of a gain comparison
with SciPy (:func:`gain_tolerance`) and the comparison of a transfer function with its
state-space form along the imaginary axis (:func:`frequency_response_difference`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from ..model.results import Check
from ..model.tolerances import GAIN_TOLERANCE
from .numeric import check_eigenvalues, relative_difference

__all__ = [
    "check_frequencies",
    "eigenvalue_check",
    "frequency_response_difference",
    "gain_tolerance",
]


def eigenvalue_check(
    name: str,
    matrix: np.ndarray,
    poles: Sequence[complex],
    *,
    terms: Sequence[object] | None = None,
    weights: np.ndarray | None = None,
    achieved: Sequence[complex] | None = None,
) -> Check:
    """A :class:`Check` that the eigenvalues of ``matrix`` are the requested ``poles``.

    Decided by :func:`symbolic.derivation.numeric.check_eigenvalues` (a conditioning-based tolerance
    in double precision, then a 50-digit confirmation when that fails); its explanation
    becomes the check's note.  ``terms`` and ``weights`` describe the parts the matrix is
    made of (``(A, (B, K))`` and |A| + |B||K| for A − BK).
    """
    verdict = check_eigenvalues(matrix, poles, terms=terms, weights=weights, achieved=achieved)
    return Check(name, verdict.residual, verdict.tolerance, verdict.passed, verdict.explanation)


def gain_tolerance(reference: np.ndarray, other: np.ndarray) -> float:
    """Tolerance of a gain comparison with SciPy: GAIN_TOLERANCE, or wider on a hard plant.

    Two floating-point methods (``place_poles`` and Ackermann's formula in floating
    point) disagree with each other by about the rounding error that the plant's
    conditioning allows; a closed form that is off by more than ten times that
    spread (and more than GAIN_TOLERANCE) fails.  On a well-conditioned plant the
    spread is near 1e-15 and GAIN_TOLERANCE decides; on a plant whose controllability
    matrix has condition number 1e12 it is about 1e-7 (TECH-NOTES; measured in
    tests/test_hard_plants.py).
    """
    spread = relative_difference(other, reference)
    return max(GAIN_TOLERANCE, 10.0 * spread) if math.isfinite(spread) else GAIN_TOLERANCE


def check_frequencies(F: np.ndarray) -> np.ndarray:
    """Frequencies (rad/s) spanning the compensator's poles: a decade beyond each end."""
    mags = np.abs(np.linalg.eigvals(F))
    mags = mags[np.isfinite(mags) & (mags > 0)]
    low, high = (mags.min(), mags.max()) if mags.size else (1.0, 1.0)
    return np.logspace(np.log10(low) - 1.0, np.log10(high) + 1.0, 9)


def frequency_response_difference(
    num: np.ndarray, den: np.ndarray, F: np.ndarray, L: np.ndarray, K: np.ndarray
) -> float:
    """Largest relative difference between num/den and K(sI − F)⁻¹L on the imaginary axis.

    Coefficients of a transfer function can be ill-conditioned where the model is
    stiff (a relative coefficient comparison then fails a correct formula); its
    values along s = jω are what the loop sees.  The reference is a linear solve
    per frequency, independent of any polynomial.  Differences are relative to
    max(|reference|, 1e-9 × the largest |reference|), so a notch does not divide by
    zero.
    """
    n = F.shape[0]
    points = 1j * check_frequencies(F)
    ref = np.array([(K @ np.linalg.solve(z * np.eye(n) - F, L)).item() for z in points])
    got = np.polyval(num, points) / np.polyval(den, points)
    peak = np.abs(ref).max()
    if not np.isfinite(peak) or peak == 0.0:  # a zero compensator (K or L is zero): absolute
        return float(np.max(np.abs(got - ref)))
    scale = np.maximum(np.abs(ref), 1e-9 * peak)
    return float(np.max(np.abs(got - ref) / scale))
