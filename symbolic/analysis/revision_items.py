"""The items of a revision comparison that come out of the derivation and the verdict: chosen poles, gains, margins and requirement rows.

Each item is a :class:`Difference`.

:mod:`symbolic.analysis.revision_diff` assembles them (its docstring says when a number counts
as unchanged); :mod:`symbolic.analysis.revision_inputs` compares what the design files say.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..model.labels import gain_label
from ..model.numbers import format_number, format_poles
from .expression_equality import compare_matrices
from .shipped_stability import shipped_margins

__all__ = [
    "CHANGES",
    "UNCHANGED_ABSOLUTE",
    "UNCHANGED_RELATIVE",
    "Difference",
    "gain_differences",
    "margin_differences",
    "number_difference",
    "pole_differences",
    "requirement_differences",
    "same_number",
    "text_difference",
]

#: Relative difference under which two numbers count as unchanged (see revision_diff).
UNCHANGED_RELATIVE = 1e-9
#: Absolute floor of the same test, for numbers that are zero up to round-off.
UNCHANGED_ABSOLUTE = 1e-12

#: The words of :attr:`Difference.change`; the first two mean "not changed".
CHANGES = ("unchanged", "rewritten", "changed", "added", "removed", "now fails", "now passes")

#: What :func:`symbolic.analysis.expression_equality.compare_matrices` found, in words.
_FORM_WORDS = {
    "same": ("unchanged", "the same expressions"),
    "equivalent": ("rewritten", "written differently, the same functions of the parameters"),
    "agree at sample points": (
        "rewritten",
        "written differently; equal at every sample point (not proven)",
    ),
    "different": ("changed", "different functions of the parameters"),
    "different shapes": ("changed", "different shapes"),
}


@dataclass(frozen=True)
class Difference:
    """One compared item.

    Attributes
    ----------
    section : str
        One of :data:`symbolic.analysis.revision_diff.SECTIONS`.
    item : str
        What was compared, e.g. ``"m value"``, ``"A[2,1]"``, ``"K_1"``.
    old, new : str or None
        The item as text on each side; None where the side does not have it.
    change : str
        One of :data:`CHANGES`.
    old_value, new_value : float or None
        The numbers behind the text, when the item is one number.
    relative : float or None
        ``(new - old) / |old|`` for one number (None when old is zero or absent); for a pole
        set, the largest ``|Δp| / |p|``.
    note : str
        How the item was compared, when that is not obvious.
    """

    section: str
    item: str
    old: str | None
    new: str | None
    change: str
    old_value: float | None = None
    new_value: float | None = None
    relative: float | None = None
    note: str = ""

    @property
    def changed(self) -> bool:
        return self.change not in CHANGES[:2]


def same_number(a: complex | None, b: complex | None, scale: float = 0.0) -> bool:
    """Whether two numbers count as unchanged (both None counts as unchanged)."""
    if a is None or b is None:
        return a is None and b is None
    if not (np.isfinite(a) and np.isfinite(b)):
        return a == b
    bound = UNCHANGED_RELATIVE * max(abs(a), abs(b), scale) + UNCHANGED_ABSOLUTE
    return abs(b - a) <= bound


def _relative(a: float | None, b: float | None) -> float | None:
    if a is None or b is None or a == 0 or not (np.isfinite(a) and np.isfinite(b)):
        return None
    return float((b - a) / abs(a))


def text_difference(
    section: str, item: str, old: str | None, new: str | None, note=""
) -> Difference:
    """An item compared as text (names, units, words): equal or not."""
    if old == new:
        change = "unchanged"
    elif old is None:
        change = "added"
    elif new is None:
        change = "removed"
    else:
        change = "changed"
    return Difference(section, item, old, new, change, note=note)


def number_difference(
    section: str,
    item: str,
    old: float | None,
    new: float | None,
    *,
    scale: float = 0.0,
    texts: tuple[str | None, str | None] | None = None,
    missing: str = "none",
) -> Difference:
    """An item that is one real number (None: the side has none, printed as ``missing``)."""
    if texts is None:
        texts = tuple(missing if x is None else format_number(x) for x in (old, new))
    change = "unchanged" if same_number(old, new, scale) else "changed"
    return Difference(
        section,
        item,
        texts[0],
        texts[1],
        change,
        old_value=None if old is None else float(old),
        new_value=None if new is None else float(new),
        relative=_relative(old, new),
    )


# --------------------------------------------------------------------------------------------
# Poles
# --------------------------------------------------------------------------------------------
def _pole_sets(d) -> dict[str, np.ndarray]:
    sets = {
        "controller poles": d.controller_poles.values,
        "observer poles": d.observer_poles.values,
    }
    if d.integral is not None:
        sets["integral pole"] = np.array([complex(d.integral.integral_pole)])
    if d.reduced_observer is not None:
        sets["reduced observer poles"] = np.array([complex(p) for p in d.reduced_observer.poles])
    return sets


def _sorted(poles: np.ndarray) -> np.ndarray:
    return np.array(sorted(np.asarray(poles, dtype=complex), key=lambda z: (z.real, z.imag)))


def _pole_set_difference(item: str, old: np.ndarray | None, new: np.ndarray | None) -> Difference:
    texts = [None if p is None else format_poles(_sorted(p)) for p in (old, new)]
    if old is None or new is None or len(old) != len(new):
        return text_difference("poles", item, *texts)
    from scipy.optimize import linear_sum_assignment

    cost = np.abs(old[:, None] - new[None, :])
    rows, cols = linear_sum_assignment(cost)  # the closest pairing of the two sets
    moves = cost[rows, cols]
    scale = float(max(np.abs(old).max(initial=0.0), np.abs(new).max(initial=0.0)))
    same = all(same_number(complex(old[i]), complex(new[j]), scale) for i, j in zip(rows, cols))
    ratios = [m / abs(old[i]) for m, i in zip(moves, rows) if old[i] != 0]
    return Difference(
        "poles",
        item,
        texts[0],
        texts[1],
        "unchanged" if same else "changed",
        relative=float(max(ratios)) if ratios and not same else None,
        note="" if same else "the two sets paired nearest first; relative: the largest |Δp|/|p|",
    )


def pole_differences(od, nd) -> list[Difference]:
    """The poles each derivation chose: controller, observer (and integral, reduced observer)."""
    out = [
        text_difference(
            "poles",
            "controller poles chosen by",
            od.controller_poles.origin,
            nd.controller_poles.origin,
        ),
        text_difference(
            "poles", "observer poles chosen by", od.observer_poles.origin, nd.observer_poles.origin
        ),
    ]
    old, new = _pole_sets(od), _pole_sets(nd)
    for item in dict.fromkeys([*old, *new]):
        out.append(_pole_set_difference(item, old.get(item), new.get(item)))
    return out


# --------------------------------------------------------------------------------------------
# Gains
# --------------------------------------------------------------------------------------------
def _as_matrix(x) -> sp.Matrix | None:
    if x is None or isinstance(x, sp.MatrixBase):
        return x
    return sp.Matrix([[x]])


def _gains(d) -> dict[str, tuple[np.ndarray | None, sp.Matrix | None]]:
    """The gains a derivation found, numerically at its nominal values, and in closed form."""
    ref = d.reference
    out = {
        "K": (d.K.value, d.K.closed_form),
        "L": (d.L.value, d.L.closed_form),
        "N": (None, None) if ref is None else (ref.value, _as_matrix(ref.closed_form)),
    }
    if d.integral is not None:
        out["[K, k_i]"] = (d.integral.K_augmented, d.integral.closed_form)
    if d.reduced_observer is not None:
        out["Ke"] = (d.reduced_observer.Ke, d.reduced_observer.Ke_closed_form)
    if d.discrete is not None:
        dc = d.discrete
        out["K_d"] = (dc.K, dc.K_closed_form)
        out["L_p"] = (dc.L_predictor, dc.L_closed_form)
        out["L_c"] = (dc.L_current, None)
        out["N_d"] = (dc.reference_gain, None)
    return out


def _matrix_text(M: np.ndarray | None) -> str:
    if M is None:
        return "none"
    rows = ["[" + ", ".join(format_number(x) for x in row) + "]" for row in np.atleast_2d(M)]
    return "[" + ", ".join(rows) + "]" if len(rows) > 1 else rows[0]


def _one_gain(name: str, old, new) -> list[Difference]:
    (ov, of), (nv, nf) = old, new
    if ov is None or nv is None or np.shape(ov) != np.shape(nv):
        note = "" if ov is None or nv is None else "different shapes: not compared entry by entry"
        d = text_difference("gains", name, _matrix_text(ov), _matrix_text(nv), note)
        if ov is None and nv is not None:
            d = Difference("gains", name, None, d.new, "added")
        elif nv is None and ov is not None:
            d = Difference("gains", name, d.old, None, "removed")
        return [d]
    ov, nv = np.atleast_2d(np.real(ov)), np.atleast_2d(np.real(nv))
    scale = float(max(np.abs(ov).max(initial=0.0), np.abs(nv).max(initial=0.0)))
    out = [
        number_difference(
            "gains", gain_label(name, i, j, ov.shape), ov[i, j], nv[i, j], scale=scale
        )
        for i in range(ov.shape[0])
        for j in range(ov.shape[1])
    ]
    if of is None and nf is None:
        form = Difference(
            "gains", f"{name} closed form", "not available", "not available", "unchanged"
        )
    elif of is None or nf is None:
        form = text_difference(
            "gains",
            f"{name} closed form",
            "not available" if of is None else "available",
            "not available" if nf is None else "available",
        )
    else:
        change, words = _FORM_WORDS[compare_matrices(of, nf)]
        form = Difference(
            "gains",
            f"{name} closed form",
            "in the parameters",
            "in the parameters",
            change,
            note=words,
        )
    return [*out, form]


def gain_differences(od, nd) -> list[Difference]:
    """K, L, N (and the gains of integral action, the reduced observer and the digital
    controller), entry by entry at each design's nominal values, and their closed forms."""
    old, new = _gains(od), _gains(nd)
    out: list[Difference] = []
    for name in dict.fromkeys([*old, *new]):
        out += _one_gain(name, old.get(name, (None, None)), new.get(name, (None, None)))
    return out


# --------------------------------------------------------------------------------------------
# Margins and requirements
# --------------------------------------------------------------------------------------------
_MARGINS = (
    ("gain margin down [dB]", "gain_margin_db_lower", "unlimited"),
    ("gain margin up [dB]", "gain_margin_db_upper", "unlimited"),
    ("phase margin [deg]", "phase_margin_deg", "no gain crossover"),
    ("gain crossover [rad/s]", "crossover_rad_s", "none"),
    ("delay margin [s]", "delay_margin_s", "none"),
)


def margin_differences(old_ctrl, new_ctrl) -> list[Difference]:
    """The margins of each shipped loop broken at the plant input."""
    (om, owhy), (nm, nwhy) = shipped_margins(old_ctrl), shipped_margins(new_ctrl)
    if om is None or nm is None:
        texts = [
            "computed" if m is not None else f"not computed: {why}"
            for m, why in ((om, owhy), (nm, nwhy))
        ]
        return [text_difference("margins", "margins", *texts)]
    out = []
    for item, field, missing in _MARGINS:
        a, b = getattr(om, field), getattr(nm, field)
        out.append(number_difference("margins", item, a, b, missing=missing))
    return out


def _row_text(row) -> str:
    return f"{row.achieved} ({'pass' if row.passed else 'FAIL'})"


def _keyed(table) -> dict[tuple[str, int], object]:
    seen: dict[str, int] = {}
    out = {}
    for row in table.rows:
        n = seen[row.key] = seen.get(row.key, 0) + 1
        out[(row.key, n)] = row
    return out


#: Rows whose achieved value is a round-off residue (the largest relative deviation of the
#: loop's poles from the requested ones, about 1e-15 to 1e-11): compared by verdict only.
ROUND_OFF_ROWS = frozenset({"closed_loop_poles"})


def _row_difference(a, b) -> Difference:
    if a is None or b is None:
        row = a if b is None else b
        return Difference(
            "requirements",
            row.label,
            a and _row_text(a),
            b and _row_text(b),
            "removed" if b is None else "added",
        )
    if a.passed != b.passed:
        change = "now passes" if b.passed else "now fails"
    elif a.requested != b.requested:
        change = "changed"
    elif a.key in ROUND_OFF_ROWS:
        change = "unchanged"
    elif a.achieved_value is not None and b.achieved_value is not None:
        change = "unchanged" if same_number(a.achieved_value, b.achieved_value) else "changed"
    else:
        change = "unchanged" if a.achieved == b.achieved else "changed"
    note = f"requested {a.requested} → {b.requested}" if a.requested != b.requested else ""
    if a.key in ROUND_OFF_ROWS and not note:
        note = "a round-off residue: compared by verdict only"
    elif change == "changed" and not note and a.achieved == b.achieved:
        note = (
            f"the number behind it {format_number(a.achieved_value)}"
            f" → {format_number(b.achieved_value)}"
        )
    return Difference(
        "requirements",
        b.label,
        _row_text(a),
        _row_text(b),
        change,
        old_value=a.achieved_value,
        new_value=b.achieved_value,
        relative=_relative(a.achieved_value, b.achieved_value),
        note=note,
    )


def requirement_differences(old_table, new_table) -> list[Difference]:
    """Every row of the two requirements tables, matched by its key (the numbers R1, R2, …
    shift when a row comes or goes)."""
    old, new = _keyed(old_table), _keyed(new_table)
    return [_row_difference(old.get(k), new.get(k)) for k in dict.fromkeys([*new, *old])]
