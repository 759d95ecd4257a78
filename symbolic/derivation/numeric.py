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
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..runtime import sidecar as _sidecar

if TYPE_CHECKING:
    import sympy as sp

__all__ = [
    "evaluate_matrix",
    "numeric_ackermann",
    "scipy_placement",
    "pole_residual",
    "eigenvalue_tolerance",
    "eigenvector_condition",
    "check_eigenvalues",
    "confirm_eigenvalues",
    "EigenvalueCheck",
    "polynomial_residual",
    "relative_difference",
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
    Runs in the SciPy sidecar when there is one (:mod:`symbolic.runtime.sidecar`).
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
    verdict = check_eigenvalues(A - B @ K, p, terms=(A, (B, K)))
    if not verdict.passed:
        return None, (
            f"scipy.signal.place_poles returned a gain whose poles are off by"
            f" {verdict.double_residual:.1e} (relative); its gain is not used as a reference"
        )
    return K, "scipy.signal.place_poles"


def pole_residual(achieved: Sequence[complex], requested: Sequence[complex]) -> float:
    """Largest relative distance between matched achieved and requested poles.

    Poles are paired by an optimal assignment (Hungarian method, as in
    ``scipy.optimize.linear_sum_assignment``) so ordering does not matter;
    each distance is divided by max(1, |requested pole|).  Runs in the SciPy
    sidecar when there is one (:mod:`symbolic.runtime.sidecar`).
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


#: Unit round-off of IEEE double precision, u = 2^-53.
UNIT_ROUNDOFF = 2.0**-53

#: Above this eigenvector condition number the computed eigenvectors have lost at least half
#: of their digits (κ(V)·u > √u) and κ(V) says nothing reliable about the exact matrix, so
#: the Bauer–Fike bound is not used (common practice, no source).
EIGENVECTOR_CONDITION_LIMIT = 1e8

#: Largest tolerance a double-precision check may use: a check looser than this no longer
#: tells a correct gain from a slightly wrong one, so beyond it the 50-digit confirmation
#: decides (common practice, no source).
DOUBLE_PRECISION_CEILING = 1e-4

#: Working precision (decimal digits) of the confirmation in :func:`confirm_eigenvalues`.
CONFIRMATION_DIGITS = 50

#: Smallest tolerance of the 50-digit confirmation: √u ≈ 1.05e-8, half the digits of double
#: precision; a pole displaced by less than that relative amount is placed correctly for any
#: engineering purpose (common practice, no source).
CONFIRMATION_FLOOR = 1e-8


def _largest_cluster(poles: Sequence[complex]) -> int:
    """Size of the largest group of equal requested poles (compared to nine decimals)."""
    rounded = Counter(complex(round(complex(p).real, 9), round(complex(p).imag, 9)) for p in poles)
    return max(rounded.values()) if rounded else 1


def _norm_of_terms(terms: Sequence[object]) -> float:
    """Σ over ``terms`` of ‖T‖₂, a tuple standing for a product (‖B‖₂·‖K‖₂ for ``(B, K)``)."""
    total = 0.0
    for term in terms:
        factors = term if isinstance(term, tuple) else (term,)
        product = 1.0
        for factor in factors:
            arr = np.atleast_2d(np.asarray(factor, dtype=complex))
            product *= float(np.linalg.norm(arr, 2)) if arr.size else 0.0
        total += product
    return total


def eigenvector_condition(matrix: np.ndarray) -> float:
    """κ₂(V) of the computed eigenvector matrix of ``matrix`` (columns of unit length).

    ``inf`` when V is numerically singular or the eigenvalue problem failed.
    """
    M = np.asarray(matrix)
    if M.size == 0:
        return 1.0
    if not np.all(np.isfinite(M)):
        return float("inf")
    try:
        _, V = np.linalg.eig(M)
        kappa = float(np.linalg.cond(V))
    except np.linalg.LinAlgError:
        return float("inf")
    return kappa if math.isfinite(kappa) else float("inf")


def eigenvalue_tolerance(
    poles: Sequence[complex],
    base: float = 1e-6,
    *,
    matrix: np.ndarray | None = None,
    terms: Sequence[object] | None = None,
) -> float:
    """Tolerance of a double-precision eigenvalue check, from the conditioning of the problem.

    Parameters
    ----------
    poles
        The requested poles (the residual is measured relative to max(1, |pole|)).
    base
        The smallest tolerance, kept for well-conditioned problems (1e-6 relative).
    matrix
        The closed-loop matrix M whose eigenvalues are checked (A − BK, A − LC, an augmented
        or separated loop, a z-plane loop).  Without it only the multiplicity rule applies.
    terms
        The parts M is made of, for the backward error: each entry a matrix or a tuple of
        matrices standing for their product, e.g. ``(A, (B, K))`` for A − BK.  Default: M.

    Returns
    -------
    float
        max(base, (1e-13)^(1/k), min(bound, :data:`DOUBLE_PRECISION_CEILING`)) with k the
        size of the largest cluster of equal requested poles and ``bound`` as in the Notes.

    Notes
    -----
    Forming M from its rounded parts and LAPACK's QR algorithm perturb M by about
    ‖ΔM‖ ≈ n·u·(‖A‖ + ‖B‖‖K‖) (backward stability of the QR algorithm: G. H. Golub and
    C. F. Van Loan, *Matrix Computations*, 4th ed., Johns Hopkins, 2013, Sec. 7.5.6, from
    memory), written δ below and divided by s = max(1, min |pole|) to make it relative.

    * Distinct requested poles and κ₂(V) ≤ :data:`EIGENVECTOR_CONDITION_LIMIT`: every
      computed eigenvalue lies within κ₂(V)·‖ΔM‖ of an exact one (F. L. Bauer and
      C. T. Fike, "Norms and exclusion theorems", *Numerische Mathematik* 2:137–141, 1960),
      so bound = κ₂(V)·δ/s.
    * A cluster of k equal poles (a Jordan block of size k), or V too ill-conditioned for
      its κ to mean anything: a perturbation δ moves the eigenvalues of a Jordan block of
      size k by about δ^(1/k) (J. H. Wilkinson, *The Algebraic Eigenvalue Problem*, Oxford,
      1965, Ch. 2, from memory), so bound = (δ/s)^(1/k).  For k = 1 this is an estimate, not
      a bound; a check that fails it is settled by :func:`confirm_eigenvalues`.

    The previous rule max(base, (1e-13)^(1/k)) stays as the floor, so a check that passed
    before still passes and well-conditioned problems keep the 1e-6 tolerance.

    Examples
    --------
    >>> eigenvalue_tolerance([-1.0, -2.0])
    1e-06
    >>> A, B, K = np.array([[0.0, 1.0], [0.0, 0.0]]), np.array([[0.0], [1.0]]), np.array([[2.0, 3.0]])
    >>> eigenvalue_tolerance([-1.0, -2.0], matrix=A - B @ K, terms=(A, (B, K)))
    1e-06
    """
    k = _largest_cluster(poles)
    floor = max(base, 1e-13 ** (1.0 / k))
    if matrix is None:
        return floor
    M = np.atleast_2d(np.asarray(matrix))
    n = M.shape[0]
    size = _norm_of_terms(terms) if terms is not None else _norm_of_terms((M,))
    if not math.isfinite(size):
        return floor
    p = np.asarray(poles, dtype=complex).ravel()
    scale = max(1.0, float(np.min(np.abs(p)))) if p.size else 1.0
    delta = max(n, 1) * UNIT_ROUNDOFF * size / scale
    kappa = eigenvector_condition(M) if k == 1 else float("inf")
    if k == 1 and kappa <= EIGENVECTOR_CONDITION_LIMIT:
        bound = kappa * delta
    else:
        bound = delta ** (1.0 / k)
    return max(floor, min(bound, DOUBLE_PRECISION_CEILING))


@dataclass(frozen=True)
class EigenvalueCheck:
    """The outcome of :func:`check_eigenvalues`.

    ``residual`` and ``tolerance`` are the numbers the check was decided on: the
    double-precision pair, or, when the 50-digit confirmation ran, its pair (so that
    ``passed`` is always ``residual <= tolerance``).  ``explanation`` says which happened.
    """

    residual: float
    tolerance: float
    passed: bool
    double_residual: float
    double_tolerance: float
    confirmed_residual: float | None = None
    confirmed_tolerance: float | None = None
    explanation: str = ""

    @property
    def confirmed(self) -> bool:
        """True when the 50-digit confirmation ran."""
        return self.confirmed_residual is not None


def check_eigenvalues(
    matrix: np.ndarray,
    requested: Sequence[complex],
    *,
    terms: Sequence[object] | None = None,
    base: float = 1e-6,
    achieved: Sequence[complex] | None = None,
    weights: np.ndarray | None = None,
    confirmation_floor: float = CONFIRMATION_FLOOR,
) -> EigenvalueCheck:
    """Do the eigenvalues of ``matrix`` match the ``requested`` poles?  The one path of every
    eigenvalue check in the package.

    First in double precision against :func:`eigenvalue_tolerance` (conditioning-based).
    Only when that residual is over its tolerance are the eigenvalues of the same float
    matrix recomputed in 50-digit arithmetic (:func:`confirm_eigenvalues`); the check then
    fails only if those miss as well.

    Parameters
    ----------
    matrix
        The closed-loop matrix (floats).
    requested
        The poles it should have.
    terms
        The parts of ``matrix`` for the backward error (see :func:`eigenvalue_tolerance`).
    base
        Smallest double-precision tolerance.
    achieved
        The double-precision eigenvalues when the caller has them already.
    weights
        Entrywise sizes of the parts of ``matrix`` (|A| + |B||K| for A − BK) for the
        confirmation, where rounding is relative to the parts, not to their difference.
        Default |matrix|.
    confirmation_floor
        Smallest tolerance of the 50-digit confirmation (a caller whose own tolerance is
        looser, such as a check of a claimed, rounded gain, passes that).
    """
    M = np.atleast_2d(np.asarray(matrix, dtype=float))
    want = np.asarray(requested, dtype=complex).ravel()
    eig = np.linalg.eigvals(M) if achieved is None else np.asarray(achieved, dtype=complex)
    res = pole_residual(eig, want)
    tol = eigenvalue_tolerance(want, base, matrix=M, terms=terms)
    res, tol = float(res), float(tol)
    if res <= tol:
        return EigenvalueCheck(res, tol, True, res, tol)
    if not (np.all(np.isfinite(M)) and math.isfinite(res)):
        return EigenvalueCheck(
            res, tol, False, res, tol, explanation="the matrix or its eigenvalues are not finite"
        )
    conf_res, conf_tol = confirm_eigenvalues(M, want, weights=weights, floor=confirmation_floor)
    passed = bool(conf_res <= conf_tol)
    explanation = (
        f"double-precision residual {res:.1e} exceeds the conditioning-based tolerance"
        f" {tol:.1e}; {'confirmed' if passed else 'not confirmed'} in"
        f" {CONFIRMATION_DIGITS}-digit arithmetic: residual {conf_res:.1e}"
        f" ({'within' if passed else 'over'} {conf_tol:.1e})"
    )
    return EigenvalueCheck(conf_res, conf_tol, passed, res, tol, conf_res, conf_tol, explanation)


def confirm_eigenvalues(
    matrix: np.ndarray,
    requested: Sequence[complex],
    *,
    weights: np.ndarray | None = None,
    floor: float = CONFIRMATION_FLOOR,
) -> tuple[float, float]:
    """Residual and tolerance of the eigenvalues of ``matrix`` computed in 50-digit arithmetic.

    The float matrix is converted exactly (every double is a binary rational) and its
    eigenvalues and left/right eigenvectors are computed with ``mpmath.eig`` at
    :data:`CONFIRMATION_DIGITS` digits, so what remains of the residual is the distance of
    the float matrix's exact eigenvalues from the requested poles.  Imported lazily: mpmath
    ships with SymPy and is loaded only when a double-precision check needs confirming.

    Returns
    -------
    (residual, tolerance)
        The residual as :func:`pole_residual` measures it; the tolerance is
        max(``floor``, max_i r_i / max(1, |λ_i|)), with r_i what rounding
        the entries of M to double (|ΔM| ≤ (n + 2)·u·W) can move λ_i (Notes).

    Notes
    -----
    To first order a perturbation E moves a simple eigenvalue λ with right and left
    eigenvectors x, y by yEx / (yx) (J. H. Wilkinson, *The Algebraic Eigenvalue Problem*,
    Oxford, 1965, Ch. 2, from memory); over all |E| ≤ γ·W the largest move is
    r = γ·|y|W|x| / |yx|, γ times the componentwise condition number of λ (W. Geurts, "A
    contribution to the theory of condition", *Numerische Mathematik* 39:85–96, 1982, from
    memory).  W = ``weights`` (default |M|) and γ = (n + 2)·u: an entry of A − BK is one
    rounded gain entry, an inner product of length at most n and a subtraction away from
    exact (N. J. Higham, *Accuracy and Stability of Numerical Algorithms*, 2nd ed., SIAM,
    2002, Sec. 3.1, the constant γ_k ≈ k·u, from memory).  A gain rounded correctly to double cannot do better than r, however exact the
    formula.  When r exceeds the distance σ to the nearest other eigenvalue the first-order
    estimate no longer holds (the eigenvalues of a cluster of k interact); r is then
    replaced by (r·σ^(k−1))^(1/k), the k-th-root growth of a split Jordan block (Wilkinson,
    op. cit.).
    """
    import mpmath

    M = np.atleast_2d(np.asarray(matrix, dtype=float))
    n = M.shape[0]
    want = np.asarray(requested, dtype=complex).ravel()
    with mpmath.workdps(CONFIRMATION_DIGITS):
        Mm = mpmath.matrix([[mpmath.mpf(float(x)) for x in row] for row in M])
        W = np.abs(M) if weights is None else np.abs(np.asarray(weights, dtype=float))
        absM = [[mpmath.mpf(float(W[i, j])) for j in range(n)] for i in range(n)]
        values, left, right = mpmath.eig(Mm, left=True, right=True)
        eig = np.array([complex(v) for v in values])
        moves = []
        for i in range(n):
            x = [right[j, i] for j in range(n)]
            y = [left[i, j] for j in range(n)]
            pairing = abs(mpmath.fsum(y[j] * x[j] for j in range(n)))
            weight = mpmath.fsum(
                abs(y[j]) * absM[j][m] * abs(x[m]) for j in range(n) for m in range(n)
            )
            gamma = (n + 2) * UNIT_ROUNDOFF
            moves.append(float(gamma * weight / pairing) if pairing else float("inf"))
    tolerance = floor
    for i in range(n):
        r = moves[i]
        others = np.abs(np.delete(eig, i) - eig[i])
        gap = float(others.min()) if others.size else float("inf")
        if r > gap:
            k = 1 + int(np.count_nonzero(others <= r))
            r = (r * gap ** (k - 1)) ** (1.0 / k) if math.isfinite(r) else 0.0
        tolerance = max(tolerance, r / max(1.0, abs(eig[i])))
    return float(pole_residual(eig, want)), float(tolerance)


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


# the SciPy module each sidecar function loads (symbolic.runtime.sidecar.call)
_scipy_placement.sidecar_needs = "scipy.signal"  # type: ignore[attr-defined]
_pole_residual.sidecar_needs = "scipy.optimize"  # type: ignore[attr-defined]
