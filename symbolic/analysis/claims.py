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
renderers :func:`format_claims` (terminal) and :func:`claims_json` consume a
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
from typing import Any

import numpy as np
from scipy.optimize import linear_sum_assignment

from ..derivation.numeric import check_eigenvalues
from ..derivation.pipeline import derive
from ..model.design import Claims, Design
from ..model.labels import gain_label
from ..model.numbers import format_number, format_pole
from ..model.results import Derivation
from ..render.report import complex_pairs, dumps
from ..runtime.errors import DesignFileError

__all__ = [
    "ClaimReport",
    "ClaimVerdict",
    "DEFAULT_CLAIM_TOLERANCE",
    "check_claims",
    "claims_json",
    "format_claims",
    "run_check",
]

#: Relative tolerance when neither ``--tolerance`` nor ``claimed.tolerance``
#: is given.  Hand calculations are typically carried to 3–4 significant
#: figures, and 4 figures round to within 5e-4 (common practice, no source).
DEFAULT_CLAIM_TOLERANCE = 1e-3

#: Entries named in a one-sentence explanation before "and N more".
_MAX_NAMED_ENTRIES = 3
#: Significant figures of the poles quoted in an explanation.
_EXPLANATION_DIGITS = 3


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
def _valid_tolerance(value: float, where: str | None) -> float:
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
    if tolerance is None:
        tol = _valid_tolerance(claims.tolerance, "claimed.tolerance")
        source = "the design file's claimed.tolerance (1e-3 if not given)"
    else:
        tol = _valid_tolerance(tolerance, "tolerance")
        source = "the tolerance given to the check"
    design = derivation.design
    plant = derivation.plant
    n, m, p = plant.A.shape[0], plant.B.shape[1], plant.C.shape[0]
    verdicts: list[ClaimVerdict] = []
    k_holds: bool | None = None
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
        k_holds = verdict.holds
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
    if claims.reference_gain is not None:
        if m != 1:
            raise DesignFileError(
                f"one number given, but with {m} inputs the reference gain N is a column of"
                f" {m} numbers (and not unique); claim K and L instead",
                design.path,
                "claimed.reference_gain",
            )
        verdicts.append(_reference_verdict(derivation, float(claims.reference_gain), tol, k_holds))
    return ClaimReport(tuple(verdicts), tol, source)


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


def _pole_tolerance(requested: np.ndarray, tol: float) -> float:
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
    pole_tol = _pole_tolerance(requested, tol)
    # the package's one eigenvalue check, with the claim's own tolerance as its floor
    eigen = check_eigenvalues(
        matrix,
        requested,
        terms=(A, (F, G)),
        weights=np.abs(A) + np.abs(F) @ np.abs(G),
        base=pole_tol,
        achieved=achieved,
        confirmation_floor=pole_tol,
    )
    achieved = _matched(achieved, requested)
    difference = claimed - derived
    rel = _relative_error(claimed, derived)
    pole_err, pole_tol = eigen.residual, eigen.tolerance
    gain_ok = rel <= tol
    poles_ok = eigen.passed
    holds = poles_ok and (gain_ok or not unique)
    explanation = _gain_explanation(
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
    dc_text = format_number(dc, 6) if math.isfinite(dc) else "undefined"
    if holds:
        explanation = (
            f"N differs from gainsmith's N by {_against(rel, tol)}; with gainsmith's K the"
            f" steady-state gain from r to {output} is {dc_text}"
        )
    else:
        shown_c, shown_d = distinct_numbers(claimed_value, float(derived.item()))
        if math.isfinite(dc):
            dc_text = distinct_numbers(dc, 1.0)[0]
        explanation = (
            f"N differs from gainsmith's N by {_against(rel, tol)}: claimed {shown_c}, derived"
            f" {shown_d} — with gainsmith's K the steady-state gain"
            f" from r to {output} would be {dc_text} instead of 1"
        )
        if k_holds is False:
            explanation += "; N depends on K, so correct K first"
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
# Wording
# --------------------------------------------------------------------------
def _percent(fraction: float) -> str:
    """A relative error as a percentage with sensible digits: 12 %, 3.4 %, 0.0065 %."""
    if not math.isfinite(fraction):
        return "an undefined amount (the derived gain is zero)"
    pct = 100.0 * fraction
    if pct == 0.0:
        return "0 %"
    if pct >= 10.0:
        return f"{pct:.0f} %"
    if pct >= 1.0:
        return f"{pct:.1f} %"
    return f"{pct:.2g} %"


def _percent_pair(a: float, b: float) -> tuple[str, str]:
    """Two fractions as percentages (:func:`_percent`) that read differently when they differ."""
    ta, tb = _percent(a), _percent(b)
    if ta == tb and a != b and math.isfinite(a) and math.isfinite(b):
        ta, tb = (f"{t} %" for t in distinct_numbers(100.0 * a, 100.0 * b, 2))
    return ta, tb


def _against(rel: float, tol: float, word: str = "tolerance") -> str:
    """'0.053 % (tolerance 0.1 %)': a relative error beside the tolerance it is held to."""
    shown_rel, shown_tol = _percent_pair(rel, tol)
    return f"{shown_rel} ({word} {shown_tol})"


#: The most significant figures a double carries (17 always round-trip).
_MAX_DIGITS = 17


def distinct_numbers(a: float, b: float, digits: int = 6) -> tuple[str, str]:
    """``a`` and ``b`` as text with enough significant figures to tell them apart.

    Starts at ``digits`` figures and adds one at a time, up to 17 (enough
    for any two distinct doubles), so that two different numbers never
    print the same; equal numbers print at ``digits`` figures.

    Examples
    --------
    >>> distinct_numbers(12.1, 12.1000004)
    ('12.1', '12.1000004')
    >>> distinct_numbers(2.5, 2.5)
    ('2.5', '2.5')
    """
    for d in range(digits, _MAX_DIGITS + 1):
        ta, tb = format_number(a, d), format_number(b, d)
        if ta != tb or a == b:
            break
    return ta, tb


def _distinct_poles(
    achieved: Sequence[complex] | np.ndarray, requested: Sequence[complex] | np.ndarray
) -> tuple[str, str]:
    """Achieved and requested poles as text, with figures enough to show they differ."""
    for d in range(_EXPLANATION_DIGITS, _MAX_DIGITS + 1):
        got, want = _poles_text(achieved, d), _poles_text(requested, d)
        if got != want:
            break
    return got, want


def _real_text(x: float, digits: int) -> str:
    text = format_number(x, digits)
    return "0" if text in ("-0", "0") else text


def _poles_text(poles: Sequence[complex] | np.ndarray, digits: int = _EXPLANATION_DIGITS) -> str:
    """Poles as text, conjugate pairs written once: ``-3.1±2.2j, -10``.

    An imaginary part too small to show at ``digits`` significant figures
    is dropped, so a repeated real pole split by rounding reads ``-10, -10``.
    """
    values = [complex(z) for z in poles]
    used = [False] * len(values)
    parts: list[str] = []
    for i, z in enumerate(values):
        if used[i]:
            continue
        used[i] = True
        shown_im = abs(z.imag) >= 0.5 * 10.0 ** (1 - digits) * max(abs(z), 1e-300)
        if not shown_im:
            parts.append(_real_text(z.real, digits))
            continue
        # find the conjugate partner among the remaining poles
        best, best_d = None, math.inf
        for j in range(i + 1, len(values)):
            if not used[j]:
                d = abs(values[j] - z.conjugate())
                if d < best_d:
                    best, best_d = j, d
        if best is not None and best_d <= 1e-6 * max(1.0, abs(z)):
            used[best] = True
            parts.append(f"{_real_text(z.real, digits)}±{format_number(abs(z.imag), digits)}j")
        else:
            sign = "+" if z.imag >= 0 else "-"
            parts.append(f"{_real_text(z.real, digits)}{sign}{format_number(abs(z.imag), digits)}j")
    return ", ".join(parts)


def _entry_name(name: str, index: tuple[int, ...], shape: tuple[int, ...]) -> str:
    """The entry's label as every output writes it (:func:`symbolic.model.labels.gain_label`)."""
    row, column = index
    rows, columns = shape
    return gain_label(name, row, column, (rows, columns))


def _named_entries(
    name: str, claimed: np.ndarray, derived: np.ndarray, difference: np.ndarray, tol: float
) -> str:
    """The entries that make a claim fail, largest difference first.

    An entry is named when |difference| > tol·‖derived‖/√(count): if no entry
    passed that bound the Frobenius-norm criterion could not fail, so at
    least one is always named for a failing claim.
    """
    size = max(difference.size, 1)
    bound = tol * np.linalg.norm(derived) / math.sqrt(size)
    flat = np.abs(difference).ravel()
    order = [int(i) for i in np.argsort(-flat, kind="stable") if flat[i] > bound]
    if not order:
        order = [int(np.argmax(flat))]
    parts = []
    for k in order[:_MAX_NAMED_ENTRIES]:
        idx = np.unravel_index(k, difference.shape)
        d, c = derived[idx], claimed[idx]
        if d != 0.0:
            by = _percent(abs(c - d) / abs(d))
        else:
            by = format_number(abs(c - d), 3) + " (the derived entry is 0)"
        shown_c, shown_d = distinct_numbers(float(c), float(d))
        parts.append(
            f"{_entry_name(name, tuple(int(i) for i in idx), difference.shape)} differs by {by}"
            f" (claimed {shown_c}, derived {shown_d})"
        )
    text = ", ".join(parts)
    if len(order) > _MAX_NAMED_ENTRIES:
        text += f" and {len(order) - _MAX_NAMED_ENTRIES} more entries differ"
    return text


def _gain_explanation(
    name: str,
    claimed: np.ndarray,
    derived: np.ndarray,
    difference: np.ndarray,
    rel: float,
    achieved: np.ndarray,
    requested: np.ndarray,
    pole_err: float,
    gain_ok: bool,
    poles_ok: bool,
    unique: bool,
    channels: int,
    tol: float,
) -> str:
    matrix = "A − BK" if name == "K" else "A − LC"
    pole_tol = _pole_tolerance(requested, tol)
    got, want = _distinct_poles(achieved, requested)
    unstable = bool(np.any(np.real(achieved) >= 0.0))
    danger = ""
    if unstable:
        danger = (
            " — the loop would be unstable"
            if name == "K"
            else " — the estimation error would grow instead of decay"
        )
    poles_clause = (
        f"the achieved poles are {got} instead of {want}"
        f" (off by {', tolerance '.join(_percent_pair(pole_err, pole_tol))}){danger}"
    )
    gain_clause = f"{name} differs from gainsmith's {name} by {_against(rel, tol)}"
    if not unique:
        what = "inputs" if name == "K" else "outputs"
        why = f"with {channels} {what} {name} is not unique, so only the poles of {matrix} decide"
        if poles_ok:
            return (
                f"{gain_clause} but places the requested poles (within {pole_err:.1e},"
                f" tolerance {pole_tol:.1e}): {why}"
            )
        return f"{name} does not place the requested poles: {poles_clause}; {why}"
    if gain_ok and poles_ok:
        return (
            f"{gain_clause} and the poles of {matrix} are within {pole_err:.1e} (relative)"
            f" of {want}{_largest_entry_note(name, claimed, derived, tol)}"
        )
    if gain_ok:
        note = _largest_entry_note(name, claimed, derived, tol)
        if note:  # an entry off by more than the tolerance: name it
            note += " but not in the poles"
        return (
            f"{gain_clause}, but {poles_clause}{note}: the placement is sensitive to small"
            " errors in the gain (rounding too), so carry more significant figures"
        )
    entries = _named_entries(name, claimed, derived, difference, tol)
    if poles_ok:
        return (
            f"{gain_clause}: {entries}, although the poles of {matrix} stay within"
            f" {pole_err:.1e} (relative) of {want}"
        )
    return f"{gain_clause}: {entries} — {poles_clause}"


def _largest_entry_note(name: str, claimed: np.ndarray, derived: np.ndarray, tol: float) -> str:
    """'; its entry K[0][2] alone differs by 3.8 % ...' when one entry is off by more than tol.

    The verdict measures the whole matrix (Frobenius norm), in which a small
    entry weighs little; a passing claim still names an entry that by itself
    is further off than the tolerance, so the sentence never hides it.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        entry_rel = np.where(derived != 0.0, np.abs(claimed - derived) / np.abs(derived), 0.0)
    k = int(np.argmax(entry_rel))
    if entry_rel.flat[k] <= tol:
        return ""
    idx = np.unravel_index(k, derived.shape)
    shown_c, shown_d = distinct_numbers(float(claimed[idx]), float(derived[idx]))
    return (
        f"; its entry {_entry_name(name, tuple(int(i) for i in idx), derived.shape)} alone differs by"
        f" {_percent(float(entry_rel.flat[k]))} (claimed {shown_c}, derived {shown_d}),"
        " which weighs little in the whole matrix"
    )


# --------------------------------------------------------------------------
# Renderers
# --------------------------------------------------------------------------
_TITLES = {
    "K": "K, state-feedback gain (u = −K x̂ + N r)",
    "L": "L, observer gain (x̂' = A x̂ + B u + L (y − C x̂ − D u))",
    "reference_gain": "N, reference gain",
}


def _finite_or_none(x: float | None) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _rows(M: np.ndarray) -> list[list[float | None]]:
    return [[_finite_or_none(x) for x in row] for row in np.atleast_2d(M)]


def claims_json(report: ClaimReport, derivation: Derivation | None = None) -> dict[str, Any]:
    """The machine-readable result of ``gainsmith check --json``.

    Matrices are lists of rows, poles are [re, im] pairs, numbers that are
    not finite (no reference gain exists) are null.
    """
    out: dict[str, Any] = {
        "holds": report.holds,
        "tolerance": report.tolerance,
        "tolerance_source": report.tolerance_source,
    }
    if derivation is not None:
        out["design_file"] = derivation.design.path
        out["derivation_checks_passed"] = derivation.passed
    out["claims"] = [
        {
            "name": v.name,
            "claimed": _rows(v.claimed),
            "derived": _rows(v.derived),
            "difference": _rows(v.difference),
            "relative_error": _finite_or_none(v.relative_error),
            "achieved_poles": None if v.achieved_poles is None else complex_pairs(v.achieved_poles),
            "requested_poles": None
            if v.requested_poles is None
            else complex_pairs(v.requested_poles),
            "pole_error": _finite_or_none(v.pole_error),
            "pole_tolerance": v.pole_tolerance,
            "achieved_dc_gain": _finite_or_none(v.achieved_dc_gain),
            "holds": v.holds,
            "explanation": v.explanation,
        }
        for v in report.verdicts
    ]
    return out


def _cell(x: float, digits: int) -> str:
    return format_number(x, digits) if math.isfinite(float(x)) else "—"


def _table(header: Sequence[str], rows: Sequence[Sequence[str]], indent: str = "    ") -> list[str]:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    lines = [indent + "  ".join(h.ljust(w) for h, w in zip(header, widths)).rstrip()]
    lines.append(indent + "  ".join("-" * w for w in widths))
    for r in rows:
        lines.append(indent + "  ".join(c.rjust(w) for c, w in zip(r, widths)).rstrip())
    return lines


def format_claims(report: ClaimReport, derivation: Derivation) -> str:
    """A terminal report: entry by entry, poles achieved vs requested, a verdict per claim.

    Parameters
    ----------
    report : ClaimReport
        From :func:`check_claims`.
    derivation : Derivation
        The derivation the report was made from (title, file, checks).
    """
    design = derivation.design
    out: list[str] = []
    w = out.append
    w(f"Hand-calculation check: {design.title}")
    w(f"design file {design.path}")
    w(
        f"tolerance {report.tolerance:g} (relative), from {report.tolerance_source};"
        " 4 significant figures round to within 5e-4 (common practice, no source)"
    )
    if not derivation.passed:
        w(
            "warning: some of gainsmith's own cross-checks failed for this design; run"
            " `gainsmith derive` before trusting the derived values below"
        )
    for v in report.verdicts:
        w("")
        w(f"{_TITLES.get(v.name, v.name)}: {'HOLDS' if v.holds else 'DOES NOT HOLD'}")
        short = "N" if v.name == "reference_gain" else v.name
        rows = []
        for idx in np.ndindex(v.claimed.shape):
            c, d, diff = (float(M[idx]) for M in (v.claimed, v.derived, v.difference))
            entry = _entry_name(short, idx, v.claimed.shape)
            rel = f"{abs(diff) / abs(d):.2e}" if math.isfinite(d) and d != 0.0 else "—"
            rows.append([entry, _cell(c, 10), _cell(d, 10), _cell(diff, 3), rel])
        out.extend(_table(["entry", "claimed", "derived", "difference", "relative"], rows))
        rel_text = f"{v.relative_error:.2e}" if math.isfinite(v.relative_error) else "undefined"
        w(f"    ‖claimed − derived‖ / ‖derived‖ = {rel_text}   (tolerance {v.tolerance:g})")
        if v.achieved_poles is not None and v.requested_poles is not None:
            matrix = "A − B K" if v.name == "K" else "A − L C"
            w(f"    poles of {matrix} with the claimed {v.name}:")
            prow = [
                [format_pole(r, 8), format_pole(a, 8)]
                for r, a in zip(v.requested_poles, v.achieved_poles)
            ]
            out.extend(_table(["requested", "achieved"], prow, indent="      "))
            pole_tol = v.tolerance if v.pole_tolerance is None else v.pole_tolerance
            tol_note = f"{pole_tol:.3g}"
            if pole_tol != v.tolerance:
                tol_note += ", the tolerance to the power 1/multiplicity for a repeated pole"
            w(f"    largest relative pole error {v.pole_error:.2e}   (tolerance {tol_note})")
        if v.achieved_dc_gain is not None:
            w(
                "    steady-state gain r → tracked output with gainsmith's K and the claimed N:"
                f" {format_number(v.achieved_dc_gain, 8)}"
            )
        w(f"    {v.explanation}")
    w("")
    failing = [v.name for v in report.verdicts if not v.holds]
    total = len(report.verdicts)
    if not failing:
        w(f"every claim holds ({total} of {total})")
    else:
        w(f"CLAIMS DO NOT HOLD: {', '.join(failing)} ({len(failing)} of {total})")
    return "\n".join(out)


def run_check(design: Design, tolerance: float | None = None, as_json: bool = False) -> int:
    """Derive, check the ``[claimed]`` table, print the verdicts (``gainsmith check``).

    Parameters
    ----------
    design : Design
        A validated design file.
    tolerance : float, optional
        The ``--tolerance`` option: overrides the file's ``claimed.tolerance``.
    as_json : bool
        Print JSON (:func:`claims_json`) instead of the terminal report.

    Returns
    -------
    int
        0 if every claim holds, 1 if any does not.

    Raises
    ------
    DesignFileError
        If the file has no ``[claimed]`` table, or the tolerance is out of
        range (the command line then exits with 2).
    """
    if design.claims is None:
        raise DesignFileError("no [claimed] table: nothing to check", design.path, "claimed")
    if tolerance is not None:
        tolerance = _valid_tolerance(tolerance, "--tolerance")
    derivation = derive(design)
    report = check_claims(derivation, design.claims, tolerance)
    if tolerance is not None:
        report = ClaimReport(report.verdicts, report.tolerance, "--tolerance")
    if as_json:
        print(dumps(claims_json(report, derivation)))
    else:
        print(format_claims(report, derivation))
    return 0 if report.holds else 1


def memo_claims(derivation: Derivation, claims: Claims) -> dict[str, Any]:
    """Context of the memo's "hand calculation check" section (formatted, not re-derived)."""
    from ..render.mathvalues import latex_matrix, latex_number, own_math

    report = check_claims(derivation, claims)
    rows = []
    for v in report.verdicts:
        rows.append(
            {
                "name": v.name,
                "claimed": own_math(latex_matrix(np.atleast_2d(v.claimed), 6)),
                "derived": own_math(latex_matrix(np.atleast_2d(v.derived), 6))
                if v.derived is not None and np.all(np.isfinite(v.derived))
                else own_math("\\text{none}"),
                "error": own_math(latex_number(v.relative_error, 2)),
                "holds": v.holds,
                "explanation": v.explanation,
            }
        )
    verdict = "Every claim holds" if report.holds else "At least one claim does not hold"
    summary = (
        f"The design file carries hand-calculated gains. {verdict} at a relative tolerance of"
        f" {report.tolerance:g} ({report.tolerance_source or 'default'}); each claimed gain is also"
        " judged by the poles it actually places."
    )
    return {"summary": summary, "rows": rows, "holds": report.holds}
