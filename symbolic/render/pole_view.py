"""Where the pole map looks: its view of the s-plane, and the inset for poles crowded at the
origin.

Both the figure (:func:`symbolic.render.figures.pole_map_figure`) and the memo's caption
(:mod:`symbolic.render.study_memo`) ask these functions, so that the caption says what is
drawn.  Plain NumPy: no matplotlib here.
"""

from __future__ import annotations

import numpy as np

__all__ = ["CROWDED", "INSET_RATIO", "pole_map_inset", "pole_map_view"]


def pole_map_view(controller, observer, plant=None) -> tuple[float, float]:
    """The left edge and the half-span of the pole map's view (zeros do not widen it)."""
    allp = np.concatenate(
        [np.asarray(controller), np.asarray(observer)]
        + ([np.asarray(plant)] if plant is not None else [])
    )
    span = max(1.0, float(np.max(np.abs(allp)))) * 1.15
    return -span, span


#: An inset enlarges the poles near the origin when the view is this many times wider.
INSET_RATIO = 12.0
#: ... and two of them lie closer than this fraction of the view's width (their markers,
#: about 2 % of the width, would touch).
CROWDED = 0.03
#: Where the inset may sit, in axes fractions (x0, y0, width, height): upper left, lower left.
INSET_PLACES = ((0.09, 0.55, 0.38, 0.4), (0.09, 0.05, 0.38, 0.4))
#: Room for the inset's tick labels, left of it and below it (axes fractions).
INSET_LABELS = (0.08, 0.1)


def pole_map_inset(controller, observer, plant=None) -> tuple[float, tuple] | None:
    """``(half-span, place)`` of an inset around the poles crowded at the origin, or None.

    Poles within 1/:data:`INSET_RATIO` of the view's half-span are crowded when two of them
    lie closer than :data:`CROWDED` of the view's width but not of the inset's (a repeated
    pole is drawn as one marker in both); the inset shows them at 1.3 times their largest
    magnitude, in the first of :data:`INSET_PLACES` whose box (with its
    tick labels) covers no pole of the main view (none free: no inset).  The memo's caption
    asks this function too, so that it describes what is drawn.
    """
    allp = np.concatenate(
        [np.asarray(controller, dtype=complex), np.asarray(observer, dtype=complex)]
        + ([np.asarray(plant, dtype=complex)] if plant is not None else [])
    )
    left, span = pole_map_view(controller, observer, plant)
    width, height = 0.12 * span - left, 1.5 * span
    near = np.unique(np.round(allp[np.abs(allp) <= span / INSET_RATIO], 9))
    if near.size < 2:
        return None
    half = 1.3 * max(float(np.max(np.abs(near))), 1e-9 * span)
    gaps = np.abs(near[:, None] - near[None, :])[np.triu_indices(near.size, 1)]
    # a pair that touches here but stands apart in the inset (a repeated pole touches in both)
    helped = (gaps < CROWDED * width) & (gaps >= CROWDED * 1.12 * half)
    if not helped.any():
        return None
    for place in INSET_PLACES:
        x0 = left + (place[0] - INSET_LABELS[0]) * width
        y0 = -0.75 * span + (place[1] - INSET_LABELS[1]) * height
        x1 = left + (place[0] + place[2]) * width
        y1 = -0.75 * span + (place[1] + place[3]) * height
        inside = (allp.real >= x0) & (allp.real <= x1) & (allp.imag >= y0) & (allp.imag <= y1)
        if not inside.any():
            return half, place
    return None
