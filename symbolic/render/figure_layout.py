"""Rules every figure of the memo follows: what is drawn, how it is labelled, where the legend goes.

* *No curves of round-off*: a series whose values all lie below :data:`ROUNDOFF_FLOOR` times
  its scale is not drawn (:func:`above_floor`); the caption and the legend say "zero to
  rounding" instead.
* *Distinguishable curves*: curves that lie within :data:`COINCIDE_FRACTION` of the plotted
  range of each other (:func:`coincident_pairs`) are drawn with markers of their own, and the
  caption says that they coincide (:func:`coincidence_sentence`).
* *Units on every axis*: :func:`axis_label` (``name [unit]``, ``^2`` set as ``²``).
* *Legends clear of data and limits*: :func:`place_legend` puts a legend in a corner of the
  axes that no line, marker or text crosses, makes room above the data when no corner is
  free, and otherwise puts it below the axes.

The planning functions use NumPy only, so the main process of a memo builds its captions from
the same decisions the figure workers draw; :func:`place_legend` works on the matplotlib
objects it is given and imports nothing itself.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.legend import Legend

__all__ = [
    "COINCIDE_FRACTION",
    "DIMENSIONLESS",
    "ROUNDOFF_FLOOR",
    "above_floor",
    "axis_label",
    "coincidence_sentence",
    "coincident_pairs",
    "legend_obstacles",
    "marker_style",
    "mixed_unit",
    "place_legend",
    "plain_log_labels",
    "ratio_unit",
    "unit_text",
]

#: A series whose magnitude stays below this fraction of its scale (the largest state norm of
#: the run, say) is round-off of an exact zero: about 10⁴ times double-precision round-off
#: accumulated over a few thousand steps (common practice, no source).
ROUNDOFF_FLOOR = 1e-9

#: Two curves closer than this fraction of the plotted range everywhere cannot be told apart at
#: the memo's figure size (about two line widths on a 2.7 in tall axes; common practice, no
#: source).
COINCIDE_FRACTION = 0.02

#: The unit label of a dimensionless quantity.
DIMENSIONLESS = "–"

#: Markers given, in turn, to curves that coincide with one drawn before them.
COINCIDENT_MARKERS = ("o", "s", "^", "D", "v")

_POWER = re.compile(r"\^\(?(-?[0-9]+)\)?")
_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def unit_text(unit: str) -> str:
    """A unit as a figure prints it: ``kg m^2`` as ``kg m²``, ``m/s^2`` as ``m/s²``."""
    return _POWER.sub(lambda m: m.group(1).translate(_SUPERSCRIPT), unit.strip())


def axis_label(name: str, unit: str) -> str:
    """``name [unit]``; a quantity without a unit in the design file gets ``[–]``."""
    return f"{name} [{unit_text(unit) if unit.strip() else DIMENSIONLESS}]"


def ratio_unit(numerator: str, denominator: str) -> str:
    """The unit of a gain from ``denominator`` to ``numerator``: ``A/rad``, ``A/(rad/s)``."""
    num, den = unit_text(numerator), unit_text(denominator)
    if not den:
        return num
    if " " in den or "/" in den:
        den = f"({den})"
    return f"{num or '1'}/{den}"


def mixed_unit(units: Sequence[str]) -> str:
    """The unit of a norm over signals with ``units``: theirs when they share one, else a list."""
    distinct = list(dict.fromkeys(unit_text(u) for u in units if u.strip()))
    if len(distinct) == 1 and all(u.strip() for u in units):
        return distinct[0]
    return ", ".join(distinct) if distinct else DIMENSIONLESS


def above_floor(values: np.ndarray | None, scale: float, floor: float = ROUNDOFF_FLOOR) -> bool:
    """Whether any value of the series stands above round-off (``floor × scale``)."""
    if values is None:
        return False
    v = np.abs(np.asarray(values, dtype=float))
    v = v[np.isfinite(v)]
    return bool(v.size and v.max() > floor * max(scale, np.finfo(float).tiny))


def _on_grid(t: np.ndarray, y: np.ndarray, grid: np.ndarray) -> np.ndarray:
    if t.shape == grid.shape and np.array_equal(t, grid):
        return y
    return np.interp(grid, t, y, left=np.nan, right=np.nan)


def coincident_pairs(
    curves: Sequence[tuple[np.ndarray, np.ndarray]],
    fraction: float = COINCIDE_FRACTION,
    *,
    log: bool = False,
) -> list[tuple[int, int]]:
    """``(i, j)`` for each curve ``j`` that lies within ``fraction`` of the plotted range of an
    earlier curve ``i`` (the first such ``i``), compared on the first curve's time grid.

    ``curves`` are ``(time, values)`` pairs; with ``log`` the values are compared as decades
    (a log-scale axis), NaN where a value is not positive.
    """
    if len(curves) < 2:
        return []
    grid = np.asarray(curves[0][0], dtype=float)
    ys = []
    for t, y in curves:
        v = _on_grid(np.asarray(t, dtype=float), np.asarray(y, dtype=float), grid)
        if log:
            with np.errstate(divide="ignore", invalid="ignore"):
                v = np.where(v > 0, np.log10(np.where(v > 0, v, 1.0)), np.nan)
        ys.append(v)
    finite = np.concatenate([v[np.isfinite(v)] for v in ys])
    if not finite.size:
        return []
    tolerance = fraction * max(float(np.ptp(finite)), np.finfo(float).tiny)
    pairs = []
    for j in range(1, len(ys)):
        for i in range(j):
            both = np.isfinite(ys[i]) & np.isfinite(ys[j])
            same_gaps = np.array_equal(np.isfinite(ys[i]), np.isfinite(ys[j]))
            if both.any() and same_gaps and np.max(np.abs(ys[i][both] - ys[j][both])) <= tolerance:
                pairs.append((i, j))
                break
    return pairs


def coincidence_sentence(labels: Sequence[str], pairs: Sequence[tuple[int, int]]) -> str:
    """' The curves “A” and “B” coincide (…); the second is drawn with markers.' — or ''."""
    if not pairs:
        return ""
    groups: dict[int, list[int]] = {}
    for i, j in pairs:
        root = next((r for r, members in groups.items() if i in members), i)
        groups.setdefault(root, [root]).append(j)
    parts = []
    for members in groups.values():
        names = [f"“{labels[k]}”" for k in members]
        joined = ", ".join(names[:-1]) + " and " + names[-1]
        later = "the second is" if len(members) == 2 else "all but the first are"
        parts.append(
            f" The curves {joined} coincide (closer than {100 * COINCIDE_FRACTION:g} % of the"
            f" plotted range); {later} drawn with markers."
        )
    return "".join(parts)


def marker_style(k: int, count: int, points: int) -> dict[str, Any]:
    """Plot keywords giving the ``k``-th of ``count`` coincident curves markers of its own,
    spaced so that the markers of different curves do not fall on each other."""
    every = max(1, points // 12)
    return {
        "marker": COINCIDENT_MARKERS[k % len(COINCIDENT_MARKERS)],
        "markevery": (int(every * (k + 1) / (count + 1)), every),
        "markersize": 5,
        "markerfacecolor": "none",
    }


# --------------------------------------------------------------------------------------
# Legends
# --------------------------------------------------------------------------------------
_CORNERS = (
    "upper right",
    "lower right",
    "upper left",
    "lower left",
    "center right",
    "center left",
    "upper center",
    "lower center",
)


def _segments_cross(p0: np.ndarray, p1: np.ndarray, box: tuple[float, ...]) -> np.ndarray:
    """Which segments p0→p1 (display coordinates) cross the box (Liang–Barsky clipping)."""
    x0, y0, x1, y1 = box
    d = p1 - p0
    lo = np.zeros(len(p0))
    hi = np.ones(len(p0))
    missed = np.zeros(len(p0), dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        for p, q in (
            (-d[:, 0], p0[:, 0] - x0),
            (d[:, 0], x1 - p0[:, 0]),
            (-d[:, 1], p0[:, 1] - y0),
            (d[:, 1], y1 - p0[:, 1]),
        ):
            missed |= (p == 0) & (q < 0)
            r = q / p
            lo = np.where(p < 0, np.maximum(lo, r), lo)
            hi = np.where(p > 0, np.minimum(hi, r), hi)
    return ~missed & (lo <= hi)


def _line_points(line) -> np.ndarray:
    """The vertices of a Line2D as drawn, in display coordinates (steps expanded)."""
    from matplotlib import cbook

    xy = np.asarray(line.get_xydata(), dtype=float)
    style = line.get_drawstyle()
    if style in cbook.STEP_LOOKUP_MAP and style != "default" and len(xy) > 1:
        xs, ys = cbook.STEP_LOOKUP_MAP[style](xy[:, 0], xy[:, 1])
        xy = np.column_stack([xs, ys])
    return line.get_transform().transform(xy)


def legend_obstacles(ax: Axes, box) -> list[str]:
    """The labels (or kinds) of what lies under ``box`` (display coordinates) in ``ax``: every
    line, marker and text of the axes except the legend itself; empty when the box is clear."""
    dpi = ax.figure.dpi
    hits = []
    for line in ax.lines:
        if not line.get_visible():
            continue
        pts = _line_points(line)
        pad = 4.0
        if line.get_marker() not in (None, "", "None", "none", " "):
            pad += 0.5 * line.get_markersize() * dpi / 72
        area = (box.x0 - pad, box.y0 - pad, box.x1 + pad, box.y1 + pad)
        ok = np.all(np.isfinite(pts), axis=1)
        inside = (
            ok
            & (pts[:, 0] >= area[0])
            & (pts[:, 0] <= area[2])
            & (pts[:, 1] >= area[1])
            & (pts[:, 1] <= area[3])
        )
        crossed = False
        if line.get_linestyle() not in ("None", "none", "", " ") and len(pts) > 1:
            seg = ok[:-1] & ok[1:]
            crossed = bool(_segments_cross(pts[:-1][seg], pts[1:][seg], area).any())
        if crossed or inside.any():
            hits.append(str(line.get_label()))
    renderer = ax.figure.canvas.get_renderer()
    for text in ax.texts:
        if text.get_visible() and text.get_text().strip():
            if text.get_window_extent(renderer).overlaps(box):
                hits.append(f"text {text.get_text().strip()!r}")
    return hits


def _raise_top(ax: Axes, fraction: float) -> None:
    """Extend the y-axis upwards so that the top ``fraction`` of the axes is free of data."""
    scale = ax.yaxis.get_transform()
    lo, hi = ax.get_ylim()
    a, b = scale.transform([lo, hi])
    top = b + (b - a) * fraction / (1.0 - fraction)
    ax.set_ylim(lo, float(scale.inverted().transform([top])[0]))


def _grow_below(fig, inches: float) -> None:
    """Add ``inches`` at the bottom of the figure, keeping the size of every axes."""
    h = fig.get_figheight()
    sp = fig.subplotpars
    fig.set_figheight(h + inches)
    fig.subplots_adjust(
        bottom=(sp.bottom * h + inches) / (h + inches), top=sp.top * h / (h + inches)
    )


def place_legend(ax: Axes, *, gap: float = 0.5, **kwargs) -> Legend:
    """A legend of ``ax`` where it covers no data, limit line or text.

    Tries the corners and edges of the axes; when none is free, raises the top of the y-axis
    by the legend's height and tries the upper corners again (the band above the data is
    empty); otherwise the legend goes below the axes (``gap`` inches under them, clear of the
    tick labels) and the figure grows to hold it.  The axes limits and the figure layout must
    be final; the last resort assumes ``ax`` is the lowest axes of its figure.
    """
    kwargs.setdefault("fontsize", 8)
    fig = ax.figure
    renderer = fig.canvas.get_renderer()
    ax.get_xlim(), ax.get_ylim()  # settle the autoscaled limits before measuring
    legend = None
    for loc in _CORNERS:
        legend = ax.legend(loc=loc, **kwargs)
        if not legend_obstacles(ax, legend.get_window_extent(renderer)):
            return legend
    height = legend.get_window_extent(renderer).height / ax.get_window_extent(renderer).height
    if height < 0.6:
        _raise_top(ax, height + 0.05)
        for loc in ("upper right", "upper left", "upper center"):
            legend = ax.legend(loc=loc, **kwargs)
            if not legend_obstacles(ax, legend.get_window_extent(renderer)):
                return legend
    kwargs.setdefault("ncol", 2)
    legend = ax.legend(loc="upper center", bbox_to_anchor=(0.5, 0.0), **kwargs)
    extra = legend.get_window_extent(renderer).height / fig.dpi + gap
    _grow_below(fig, extra)
    axes_height = ax.get_window_extent(renderer).height / fig.dpi
    legend.set_bbox_to_anchor((0.5, -gap / axes_height), transform=ax.transAxes)
    return legend


# --------------------------------------------------------------------------------------
# Log-axis labels
# --------------------------------------------------------------------------------------
#: The labels matplotlib's log-axis formatter writes: $\mathdefault{10^{-2}}$ and
#: $\mathdefault{2\times10^{-1}}$ (minor ticks of a short range).
_LOG_LABEL = re.compile(r"^\$\\mathdefault\{(?:([0-9.]+)\\times\s*)?10\^\{(-?[0-9]+)\}\}\$$")


def _unicode_label(label: str) -> str:
    """10⁻² for $\\mathdefault{10^{-2}}$: plain text, set without the mathtext parser."""
    match = _LOG_LABEL.match(label)
    if match is None:
        return label  # anything else stays as matplotlib wrote it
    factor, exponent = match.groups()
    power = "10" + exponent.translate(_SUPERSCRIPT)
    return f"{factor}\u00d7{power}" if factor else power


@functools.cache
def _plain_log_labels_class() -> type:
    from matplotlib.ticker import Formatter

    class PlainLogLabels(Formatter):
        """The labels of a log-axis formatter, as plain Unicode text instead of mathtext.

        Parsing mathtext took about a fifth of the time of saving the memo's figures
        (measured: the log axes of the estimation-error, observer-study and Bode figures);
        which ticks get a label is still decided by matplotlib's formatter.
        """

        def __init__(self, inner: Formatter):
            self.inner = inner

        def set_axis(self, axis) -> None:
            super().set_axis(axis)
            self.inner.set_axis(axis)

        def set_locs(self, locs) -> None:
            self.inner.set_locs(locs)

        def __call__(self, x, pos=None) -> str:
            return _unicode_label(self.inner(x, pos))

    return PlainLogLabels


def plain_log_labels(fig) -> None:
    """Set the log-axis tick labels of ``fig`` as plain Unicode text (``10⁻²``)."""
    from matplotlib.ticker import LogFormatterSciNotation

    plain = _plain_log_labels_class()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            if isinstance(axis.get_major_formatter(), LogFormatterSciNotation):
                axis.set_major_formatter(plain(axis.get_major_formatter()))
            if isinstance(axis.get_minor_formatter(), LogFormatterSciNotation):
                axis.set_minor_formatter(plain(axis.get_minor_formatter()))
