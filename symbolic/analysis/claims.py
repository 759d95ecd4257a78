"""Checking an engineer's hand-calculated gains: ``gainsmith check FILE``.

The ``[claimed]`` table of a design file holds gains worked out by hand (K,
L, the reference gain N).  :func:`check_claims` compares each with the gain
:func:`~symbolic.derivation.pipeline.derive` found and, because a gain is only as good as
the poles it achieves, also computes the eigenvalues the *claimed* gain
gives: eig(A − B K_claimed) for K, eig(A − L_claimed C) for L.  For N it
computes the steady-state gain from the reference to the tracked output that
the claimed N gives together with gainsmith's K.

One direction of flow: this module consumes a finished
:class:`~symbolic.model.results.Derivation` and derives nothing itself; the
explanations are worded by :mod:`symbolic.analysis.claim_wording`, and the
renderers of :mod:`symbolic.render.claims_pages` (terminal, JSON, memo) consume a
finished :class:`ClaimReport`.

A check that passes says the claimed numbers agree with the derivation from
the model in the file; it says nothing about whether the model fits the
machine.  A gain that moves a machine must still be tried at reduced
authority (current or speed limits on, emergency stop at hand) before it is
trusted.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment

from ..derivation.numeric import check_eigenvalues
from ..model.design import Claims, Design
from ..model.results import Derivation
from ..runtime.errors import DesignFileError
from .claim_wording import gain_explanation, reference_explanation

__all__ = [
    "ClaimReport",
    "ClaimVerdict",
    "DEFAULT_CLAIM_TOLERANCE",
    "check_claims",
    "claimed_tolerance",
    "hand_check",
    "pole_tolerance",
    "valid_tolerance",
]

#: Relative tolerance when neither ``--tolerance`` nor ``claimed.tolerance``
#: is given.  Hand calculations are typically carried to 3–4 significant
#: figures, and 4 figures round to within 5e-4 (common practice, no source).
DEFAULT_CLAIM_TOLERANCE = 1e-3


# --------------------------------------------------------------------------
# Result objects
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class ClaimVerdict:
    """The verdict on one claimed gain.

    Attributes
    ----------
    name : str
        ``"K"``, ``"L"`` or ``"reference_gain"``.
    claimed, derived : ndarray
        The claimed and the derived gain, same shape (m×n for K, n×p for L,
        m×1 for N).  ``derived`` is NaN when no reference gain exists.
    difference : ndarray
        Element-wise ``claimed − derived``.
    relative_error : float
        ‖claimed − derived‖ / ‖derived‖ (Frobenius norms).
    achieved_poles : ndarray or None
        eig(A − B K_claimed) for K, eig(A − L_claimed C) for L, listed in the
        order of ``requested_poles`` they are matched to; None for N.
    requested_poles : ndarray or None
        The controller (K) or observer (L) poles of the design.
    pole_error : float or None
        Largest relative distance between matched achieved and requested
        poles (:func:`symbolic.derivation.numeric.pole_residual`).
    pole_tolerance : float or None
        The bound ``pole_error`` is held to: the tolerance itself for simple
        poles, tolerance**(1/m) when a requested pole is repeated m times
        (see Notes of :func:`check_claims`).
    achieved_dc_gain : float or None
        For N only: the steady-state gain from r to the tracked output with
        gainsmith's K and the claimed N (1 is exact tracking).
    tolerance : float
        The relative tolerance applied.
    holds : bool
        Whether the claim is right within the tolerance.
    explanation : str
        One sentence for the engineer.
    """

    name: str
    claimed: np.ndarray
    derived: np.ndarray
    difference: np.ndarray
    relative_error: float
    achieved_poles: np.ndarray | None
    requested_poles: np.ndarray | None
    pole_error: float | None
    achieved_dc_gain: float | None
    tolerance: float
    holds: bool
    explanation: str
    pole_tolerance: float | None = None


@dataclass(frozen=True)
class ClaimReport:
    """Verdicts on every claim in a ``[claimed]`` table."""

    verdicts: tuple[ClaimVerdict, ...]
    tolerance: float
    tolerance_source: str = ""

    @property
    def holds(self) -> bool:
        """True when every claim holds."""
        return all(v.holds for v in self.verdicts)


# --------------------------------------------------------------------------
# Checking
# --------------------------------------------------------------------------
def valid_tolerance(value: float, where: str | None) -> float:
    """``value`` as a relative tolerance, 0 < tolerance ≤ 1; ``where`` names it in the error."""
    try:
        tol = float(value)
    except (TypeError, ValueError) as exc:
        raise DesignFileError(f"expected a number, got {value!r}", key=where) from exc
    if not math.isfinite(tol) or not 0.0 < tol <= 1.0:
        raise DesignFileError(
            f"the tolerance is relative: give a number above 0 and at most 1, got {value!r}",
            key=where,
        )
    return tol


def check_claims(
    derivation: Derivation, claims: Claims, tolerance: float | None = None
) -> ClaimReport:
    """Compare hand-calculated gains with the derived ones and with the poles they achieve.

    Parameters
    ----------
    derivation : Derivation
        From :func:`symbolic.derive` on the same design.
    claims : Claims
        The design's ``[claimed]`` table (``design.claims``).
    tolerance : float, optional
        Relative tolerance, 0 < tolerance ≤ 1; overrides ``claims.tolerance``
        (the file's value, 1e-3 when the file gives none).

    Returns
    -------
    ClaimReport
        One :class:`ClaimVerdict` per claimed gain, in the order K, L, N.

    Raises
    ------
    DesignFileError
        If the tolerance is out of range, a claimed gain has the wrong shape
        for the plant, or a single reference gain is claimed for a plant
        with several inputs (N is then a column).

    Notes
    -----
    *Gains.*  The relative error is ‖claimed − derived‖_F / ‖derived‖_F.
    With one input K is unique, and so is L with one output (Ackermann's
    formula; J. Ackermann, *Regelungstechnik* 20(7):297–300, 1972).  With
    several inputs (outputs) many gains place the same poles, so the claim is
    judged by the poles alone and the difference to gainsmith's gain is
    reported for information.

    *Poles.*  The claimed gain must also achieve the requested poles within
    the same relative tolerance, measured by
    :func:`symbolic.derivation.numeric.pole_residual` (distance / max(1, |pole|)).  A
    pole repeated m times moves by about ε^(1/m) when the matrix moves by ε
    (J. H. Wilkinson, *The Algebraic Eigenvalue Problem*, Oxford, 1965,
    Ch. 2), so for repeated poles the bound is tolerance**(1/m), m the
    largest multiplicity; for simple poles it is the tolerance itself.

    *Reference gain.*  With u = −K x + N r the steady state of
    x' = (A − BK) x + B N r, y = (C − DK) x + D N r is
    y_ss = [(C − DK)(−(A − BK))⁻¹ B + D] N r (G. F. Franklin, J. D. Powell,
    A. Emami-Naeini, *Feedback Control of Dynamic Systems*, 7th ed.,
    Pearson, 2015, Sec. 7.5, introducing the reference input; from memory).
    The claimed N is used with gainsmith's K, so a wrong K claim also shows
    up in N.

    Examples
    --------
    K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
    Example 10-1 (from memory): poles −2 ± j4, −10 give K = [199, 55, 8].

    >>> from symbolic import derive, parse_design
    >>> design = parse_design(b'''
    ... [plant]
    ... A = [[0, 1, 0], [0, 0, 1], [-1, -5, -6]]
    ... B = [0, 0, 1]
    ... C = [[1, 0, 0]]
    ... [controller]
    ... poles = ["-2+4j", "-2-4j", "-10"]
    ... [claimed]
    ... K = [199, 55, 8]
    ... ''')
    >>> report = check_claims(derive(design, budget=0), design.claims)
    >>> report.holds, report.verdicts[0].relative_error < 1e-12
    (True, True)
    """
    tol, source = _tolerance_and_source(claims, tolerance)
    verdicts = _gain_verdicts(derivation, claims, tol)
    if claims.reference_gain is not None:
        k_holds = next((v.holds for v in verdicts if v.name == "K"), None)
        verdicts.append(_reference_claim(derivation, claims.reference_gain, tol, k_holds))
    return ClaimReport(tuple(verdicts), tol, source)


def _tolerance_and_source(claims: Claims, tolerance: float | None) -> tuple[float, str]:
    """The relative tolerance of the check and where it comes from, in words."""
    if tolerance is None:
        tol = valid_tolerance(claims.tolerance, "claimed.tolerance")
        return tol, "the design file's claimed.tolerance (1e-3 if not given)"
    return valid_tolerance(tolerance, "tolerance"), "the tolerance given to the check"


def _gain_verdicts(derivation: Derivation, claims: Claims, tol: float) -> list[ClaimVerdict]:
    """The verdicts on the claimed K and L (those the table gives), in that order."""
    design = derivation.design
    plant = derivation.plant
    n, m, p = plant.A.shape[0], plant.B.shape[1], plant.C.shape[0]
    verdicts: list[ClaimVerdict] = []
    if claims.K is not None:
        K = _claimed_matrix(claims.K, (m, n), "claimed.K", design.path)
        verdict = _gain_verdict(
            "K",
            K,
            np.asarray(derivation.K.value, dtype=float),
            (plant.A, (plant.B, K)),
            derivation.controller_poles.values,
            derivation.K.unique,
            m,
            tol,
        )
        verdicts.append(verdict)
    if claims.L is not None:
        L = _claimed_matrix(claims.L, (n, p), "claimed.L", design.path)
        verdicts.append(
            _gain_verdict(
                "L",
                L,
                np.asarray(derivation.L.value, dtype=float),
                (plant.A, (L, plant.C)),
                derivation.observer_poles.values,
                derivation.L.unique,
                p,
                tol,
            )
        )
    return verdicts


def _reference_claim(
    derivation: Derivation, claimed: float, tol: float, k_holds: bool | None
) -> ClaimVerdict:
    """The verdict on a claimed reference gain N (one number: single-input plants only)."""
    m = derivation.plant.B.shape[1]
    if m != 1:
        raise DesignFileError(
            f"one number given, but with {m} inputs the reference gain N is a column of"
            f" {m} numbers (and not unique); claim K and L instead",
            derivation.design.path,
            "claimed.reference_gain",
        )
    return _reference_verdict(derivation, float(claimed), tol, k_holds)


def _claimed_matrix(
    rows: Sequence[Sequence[float]], shape: tuple[int, int], key: str, path: str
) -> np.ndarray:
    try:
        M = np.array(rows, dtype=float)
    except (TypeError, ValueError) as exc:
        raise DesignFileError("expected rows of numbers", path, key) from exc
    if M.shape != shape:
        got = "x".join(str(k) for k in M.shape)
        raise DesignFileError(f"is {got}; expected {shape[0]}x{shape[1]}", path, key)
    if not np.all(np.isfinite(M)):
        raise DesignFileError("expected finite numbers", path, key)
    return M


def _matched(achieved: np.ndarray, requested: np.ndarray) -> np.ndarray:
    """``achieved`` reordered so that entry i is the pole matched to requested[i].

    Same matching as :func:`symbolic.derivation.numeric.pole_residual` (optimal
    assignment on distance / max(1, |requested|)).
    """
    a = np.asarray(achieved, dtype=complex).ravel()
    r = np.asarray(requested, dtype=complex).ravel()
    if a.size != r.size or not np.all(np.isfinite(a)):
        return a
    cost = np.abs(a[:, None] - r[None, :]) / np.maximum(1.0, np.abs(r))[None, :]
    rows, cols = linear_sum_assignment(cost)
    out = np.empty_like(a)
    out[cols] = a[rows]
    return out


def pole_tolerance(requested: np.ndarray, tol: float) -> float:
    """tol for simple poles; tol**(1/m) for a pole repeated m times (Wilkinson)."""
    counts = Counter(
        complex(round(complex(z).real, 9), round(complex(z).imag, 9)) for z in requested
    )
    multiplicity = max(counts.values()) if counts else 1
    return tol ** (1.0 / multiplicity)


def _relative_error(claimed: np.ndarray, derived: np.ndarray) -> float:
    diff = np.linalg.norm(claimed - derived)
    scale = np.linalg.norm(derived)
    if scale == 0.0:
        return 0.0 if diff == 0.0 else math.inf
    return float(diff / scale)


def _gain_verdict(
    name: str,
    claimed: np.ndarray,
    derived: np.ndarray,
    loop: tuple[np.ndarray, tuple[np.ndarray, np.ndarray]],
    requested: np.ndarray,
    unique: bool,
    channels: int,
    tol: float,
) -> ClaimVerdict:
    """``loop`` = (A, (F, G)): the claimed gain closes the loop A − F G (A − BK or A − LC)."""
    requested = np.asarray(requested, dtype=complex)
    A, (F, G) = loop
    matrix = A - F @ G
    achieved = np.linalg.eigvals(matrix)
    bound = pole_tolerance(requested, tol)
    # the package's one eigenvalue check, with the claim's own tolerance as its floor
    eigen = check_eigenvalues(
        matrix,
        requested,
        terms=(A, (F, G)),
        weights=np.abs(A) + np.abs(F) @ np.abs(G),
        base=bound,
        achieved=achieved,
        confirmation_floor=bound,
    )
    achieved = _matched(achieved, requested)
    difference = claimed - derived
    rel = _relative_error(claimed, derived)
    pole_err, pole_tol = eigen.residual, eigen.tolerance
    gain_ok = rel <= tol
    poles_ok = eigen.passed
    holds = poles_ok and (gain_ok or not unique)
    explanation = gain_explanation(
        name,
        claimed,
        derived,
        difference,
        rel,
        achieved,
        requested,
        pole_err,
        gain_ok,
        poles_ok,
        unique,
        channels,
        tol,
        bound,
    )
    return ClaimVerdict(
        name=name,
        claimed=claimed,
        derived=derived,
        difference=difference,
        relative_error=rel,
        achieved_poles=achieved,
        requested_poles=requested,
        pole_error=pole_err,
        achieved_dc_gain=None,
        tolerance=tol,
        holds=holds,
        explanation=explanation,
        pole_tolerance=pole_tol,
    )


def _reference_verdict(
    derivation: Derivation, claimed_value: float, tol: float, k_holds: bool | None
) -> ClaimVerdict:
    plant = derivation.plant
    claimed = np.array([[claimed_value]])
    ref = derivation.reference
    design = derivation.design
    idx = ref.tracked_index if ref is not None else design.tracking.output
    output = design.plant.outputs[idx].name
    K = np.asarray(derivation.K.value, dtype=float)
    Ct, Dt = plant.C[idx : idx + 1, :], plant.D[idx : idx + 1, :]
    # y_ss / r = [(C − DK)(−(A − BK))⁻¹ B + D] N  (Franklin et al., 7th ed., Sec. 7.5)
    try:
        loop_dc = (Ct - Dt @ K) @ np.linalg.solve(-(plant.A - plant.B @ K), plant.B) + Dt
        dc = float((loop_dc @ claimed).item())
    except np.linalg.LinAlgError:
        dc = math.nan
    if ref is None:
        derived = np.full((1, 1), np.nan)
        return ClaimVerdict(
            name="reference_gain",
            claimed=claimed,
            derived=derived,
            difference=np.full((1, 1), np.nan),
            relative_error=math.inf,
            achieved_poles=None,
            requested_poles=None,
            pole_error=None,
            achieved_dc_gain=dc if math.isfinite(dc) else None,
            tolerance=tol,
            holds=False,
            explanation=(
                f"no reference gain exists for output '{output}': the loop's steady-state gain"
                " is zero (a zero at s = 0), so no N gives zero steady-state error; use"
                " integral action instead"
            ),
        )
    derived = np.asarray(ref.value, dtype=float).reshape(1, 1)
    rel = _relative_error(claimed, derived)
    holds = rel <= tol
    explanation = reference_explanation(
        claimed_value, float(derived.item()), rel, tol, dc, output, k_holds
    )
    return ClaimVerdict(
        name="reference_gain",
        claimed=claimed,
        derived=derived,
        difference=claimed - derived,
        relative_error=rel,
        achieved_poles=None,
        requested_poles=None,
        pole_error=None,
        achieved_dc_gain=dc if math.isfinite(dc) else None,
        tolerance=tol,
        holds=holds,
        explanation=explanation,
    )


# --------------------------------------------------------------------------
# The command
# --------------------------------------------------------------------------
def claimed_tolerance(design: Design, tolerance: float | None = None) -> float | None:
    """Refuse a ``gainsmith check`` request before anything is derived.

    Parameters
    ----------
    design : Design
        A validated design file.
    tolerance : float, optional
        The ``--tolerance`` option: overrides the file's ``claimed.tolerance``.

    Returns
    -------
    float or None
        The ``--tolerance`` checked (None when it was not given).

    Raises
    ------
    DesignFileError
        If the file has no ``[claimed]`` table, or the tolerance is out of
        range (the command line then exits with 2).
    """
    if design.claims is None:
        raise DesignFileError("no [claimed] table: nothing to check", design.path, "claimed")
    if tolerance is not None:
        tolerance = valid_tolerance(tolerance, "--tolerance")
    return tolerance


def hand_check(derivation: Derivation, tolerance: float | None = None) -> ClaimReport:
    """The ``gainsmith check`` command: the design's ``[claimed]`` table against the derivation.

    ``tolerance`` is the ``--tolerance`` option as :func:`claimed_tolerance` returned it; the
    report then names ``--tolerance`` as its source.  Every claim holds: the command exits
    with 0, else with 1.
    """
    report = check_claims(derivation, derivation.design.claims, tolerance)
    if tolerance is not None:
        report = ClaimReport(report.verdicts, report.tolerance, "--tolerance")
    return report
