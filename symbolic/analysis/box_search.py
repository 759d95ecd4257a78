"""Branch and bound over a parameter box: prove polynomial conditions positive, or refute them.

Given conditions ``f_1 > 0, …, f_r > 0`` (:class:`~symbolic.analysis.interval_poly.BoxPolynomial`)
and a box, :func:`search_box` keeps a stack of sub-boxes.  For each box it

1. drops every condition whose interval enclosure over the box is ``> 0`` (proved there, and
   so in every sub-box: the sub-boxes inherit only the conditions still open);
2. if a condition is still open, evaluates the conditions *exactly* (rational arithmetic) at
   the box's centre; a condition ``≤ 0`` there is handed to the caller's ``refute`` test,
   which may confirm the point as a counterexample (the search stops) or decline it;
3. otherwise splits the box in two along its widest dimension, widths measured relative to
   the widths of the whole box.

The corners of the whole box and its centre are tried first.  The answer is

* ``"proved"``: every sub-box had every condition's enclosure ``> 0`` -- a proof over the
  whole box, by the enclosure property of interval arithmetic (no sampling involved);
* ``"refuted"``: a point where ``refute`` confirmed a violated condition;
* ``"undecided"``: the cap on boxes (or on time) was reached first.

A box whose every dimension has zero width is decided by the exact values alone.

References
----------
.. [1] R. E. Moore, R. B. Kearfott and M. J. Cloud, *Introduction to Interval Analysis*,
   SIAM, 2009, Ch. 6 (subdivision) and Ch. 9 (branch and bound on boxes).
.. [2] E. R. Hansen and G. W. Walster, *Global Optimization Using Interval Analysis*, 2nd ed.,
   Marcel Dekker, 2004, Ch. 11 (splitting the widest scaled coordinate) -- from memory.
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

from .interval_poly import BoxPolynomial

__all__ = ["BoxSearch", "MAX_CORNERS", "box_corners", "search_box"]

#: The corners of the whole box are tried first when there are at most this many.
MAX_CORNERS = 1024

Box = tuple[tuple[float, float], ...]
Refute = Callable[[tuple[Fraction, ...], tuple[int, ...]], Any]


@dataclass(frozen=True)
class BoxSearch:
    """The outcome of :func:`search_box`.

    Attributes
    ----------
    status : str
        ``"proved"``, ``"refuted"`` or ``"undecided"``.
    boxes : int
        Boxes whose enclosures were evaluated.
    seconds : float
    point : tuple of Fraction or None
        Where ``refute`` confirmed a violated condition.
    witness : object
        What ``refute`` returned there (None unless refuted).
    violated : tuple of str
        Names of the conditions ``≤ 0`` at ``point``; when undecided, the conditions still
        open on the boxes left.
    open_boxes : int
        Boxes left unexamined when the cap was reached.
    """

    status: str
    boxes: int
    seconds: float
    point: tuple[Fraction, ...] | None = None
    witness: Any = None
    violated: tuple[str, ...] = ()
    open_boxes: int = 0


def box_corners(box: Sequence[tuple[Fraction, Fraction]]) -> list[tuple[Fraction, ...]]:
    """Every corner of a box given by exact bounds (one per distinct combination)."""
    axes = [sorted({lo, hi}) for lo, hi in box]
    return [tuple(c) for c in itertools.product(*axes)]


def _centre(box: Box, exact: Sequence[tuple[Fraction, Fraction]]) -> tuple[Fraction, ...]:
    """The box's centre as exact rationals, kept inside the declared bounds."""
    out = []
    for (lo, hi), (elo, ehi) in zip(box, exact, strict=True):
        c = (Fraction(lo) + Fraction(hi)) / 2
        out.append(min(max(c, elo), ehi))
    return tuple(out)


def _split(box: Box, widths: Sequence[float]) -> tuple[Box, Box] | None:
    """Halve the box along its widest scaled dimension; None when every width is zero."""
    best, score = -1, 0.0
    for i, ((lo, hi), w) in enumerate(zip(box, widths, strict=True)):
        if w > 0 and hi > lo and (hi - lo) / w > score:
            best, score = i, (hi - lo) / w
    if best < 0:
        return None
    lo, hi = box[best]
    mid = 0.5 * lo + 0.5 * hi
    if not lo < mid < hi:
        return None  # adjacent floats: cannot be split further
    left = box[:best] + ((lo, mid),) + box[best + 1 :]
    right = box[:best] + ((mid, hi),) + box[best + 1 :]
    return left, right


def _violated(
    conditions: Sequence[BoxPolynomial], active: Sequence[int], point: tuple[Fraction, ...]
) -> tuple[int, ...]:
    return tuple(i for i in active if conditions[i].exact(point) <= 0)


def _try_points(conditions, points, refute) -> tuple[tuple[Fraction, ...], Any, tuple] | None:
    everything = range(len(conditions))
    for point in points:
        bad = _violated(conditions, everything, point)
        if bad:
            witness = refute(point, bad)
            if witness is not None:
                return point, witness, bad
    return None


def search_box(
    conditions: Sequence[BoxPolynomial],
    bounds: Sequence[tuple[Fraction, Fraction]],
    outer: Box,
    *,
    refute: Refute | None = None,
    max_boxes: int = 20_000,
    time_limit: float | None = None,
) -> BoxSearch:
    """Prove every condition positive over a box, refute one at a point, or give up.

    Parameters
    ----------
    conditions : sequence of BoxPolynomial
    bounds : sequence of (Fraction, Fraction)
        The declared box, exactly (points tried and reported lie inside it).
    outer : sequence of (float, float)
        Float bounds holding ``bounds`` (rounded outward); the boxes searched.
    refute : callable, optional
        ``refute(point, violated_indices)`` returns a witness (the point is a counterexample)
        or None (the point is declined; the search goes on).  Default: accept every point.
    max_boxes : int
        Cap on the boxes evaluated; past it the answer is ``"undecided"``.
    time_limit : float, optional
        Seconds; past them the answer is ``"undecided"`` (off by default, so that a report
        does not depend on the machine's speed).
    """
    if refute is None:

        def refute(point, bad):
            return True

    start = time.perf_counter()
    widths = [0.0 if elo == ehi else hi - lo for (lo, hi), (elo, ehi) in zip(outer, bounds)]
    first = box_corners(bounds) if 2 ** len(bounds) <= MAX_CORNERS else []
    first.append(_centre(tuple(outer), bounds))
    hit = _try_points(conditions, first, refute)
    if hit is not None:
        point, witness, bad = hit
        names = tuple(conditions[i].name for i in bad)
        return BoxSearch("refuted", 0, time.perf_counter() - start, point, witness, names)
    stack: list[tuple[Box, tuple[int, ...]]] = [(tuple(outer), tuple(range(len(conditions))))]
    count = 0
    while stack:
        if count >= max_boxes or (
            time_limit is not None and time.perf_counter() - start > time_limit
        ):
            still = sorted({i for _b, act in stack for i in act})
            names = tuple(conditions[i].name for i in still)
            return BoxSearch(
                "undecided", count, time.perf_counter() - start, violated=names,
                open_boxes=len(stack),
            )  # fmt: skip
        box, active = stack.pop()
        count += 1
        still = tuple(i for i in active if conditions[i].lower_bound(box) <= 0)
        if not still:
            continue
        centre = _centre(box, bounds)
        hit = _try_points([conditions[i] for i in still], [centre], _local(refute, still))
        if hit is not None:
            point, witness, bad = hit
            names = tuple(conditions[still[i]].name for i in bad)
            return BoxSearch("refuted", count, time.perf_counter() - start, point, witness, names)
        halves = _split(box, widths)
        if halves is None:  # only exactly known or float-adjacent bounds left
            if all(lo == hi for lo, hi in bounds) and all(
                conditions[i].exact(centre) > 0 for i in still
            ):
                continue  # the declared box is a point: decided exactly
            names = tuple(conditions[i].name for i in still)
            return BoxSearch(
                "undecided", count, time.perf_counter() - start, violated=names,
                open_boxes=len(stack) + 1,
            )  # fmt: skip
        stack.extend((half, still) for half in reversed(halves))
    return BoxSearch("proved", count, time.perf_counter() - start)


def _local(refute: Refute, still: tuple[int, ...]) -> Refute:
    """``refute`` called with indices into the full list of conditions."""

    def call(point, bad):
        return refute(point, tuple(still[i] for i in bad))

    return call
