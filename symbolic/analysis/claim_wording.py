"""The sentences of the hand-calculation check: what differs, by how much, against what tolerance.

Every explanation of a :class:`~symbolic.analysis.claims.ClaimVerdict` is written here: a
relative error beside the tolerance it is held to, the entries that make a claim fail, and
poles and numbers with figures enough to show that they differ.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from ..model.labels import gain_label
from ..model.numbers import format_number

__all__ = ["distinct_numbers", "entry_name", "gain_explanation", "reference_explanation"]

#: Entries named in a one-sentence explanation before "and N more".
_MAX_NAMED_ENTRIES = 3
#: Significant figures of the poles quoted in an explanation.
_EXPLANATION_DIGITS = 3


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


def entry_name(name: str, index: tuple[int, ...], shape: tuple[int, ...]) -> str:
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
            f"{entry_name(name, tuple(int(i) for i in idx), difference.shape)} differs by {by}"
            f" (claimed {shown_c}, derived {shown_d})"
        )
    text = ", ".join(parts)
    if len(order) > _MAX_NAMED_ENTRIES:
        text += f" and {len(order) - _MAX_NAMED_ENTRIES} more entries differ"
    return text


def gain_explanation(
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
    pole_tol: float,
) -> str:
    """One sentence on a claimed K or L: the gain against gainsmith's, and the poles it places.

    ``pole_tol`` is the bound the poles are held to (:func:`symbolic.analysis.claims.pole_tolerance`).
    """
    matrix = "A − BK" if name == "K" else "A − LC"
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
        f"; its entry {entry_name(name, tuple(int(i) for i in idx), derived.shape)} alone differs by"
        f" {_percent(float(entry_rel.flat[k]))} (claimed {shown_c}, derived {shown_d}),"
        " which weighs little in the whole matrix"
    )


def reference_explanation(
    claimed: float,
    derived: float,
    rel: float,
    tol: float,
    dc: float,
    output: str,
    k_holds: bool | None,
) -> str:
    """One sentence on a claimed reference gain N against gainsmith's N.

    ``dc`` is the steady-state gain from r to ``output`` with gainsmith's K and the claimed N
    (NaN when it is undefined); ``k_holds`` is the verdict on a claimed K (None: not claimed).
    """
    dc_text = format_number(dc, 6) if math.isfinite(dc) else "undefined"
    if rel <= tol:
        return (
            f"N differs from gainsmith's N by {_against(rel, tol)}; with gainsmith's K the"
            f" steady-state gain from r to {output} is {dc_text}"
        )
    shown_c, shown_d = distinct_numbers(claimed, derived)
    if math.isfinite(dc):
        dc_text = distinct_numbers(dc, 1.0)[0]
    explanation = (
        f"N differs from gainsmith's N by {_against(rel, tol)}: claimed {shown_c}, derived"
        f" {shown_d} — with gainsmith's K the steady-state gain"
        f" from r to {output} would be {dc_text} instead of 1"
    )
    if k_holds is False:
        explanation += "; N depends on K, so correct K first"
    return explanation
