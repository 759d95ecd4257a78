"""Figures of the shipped controller on the nonlinear plant (matplotlib, no pyplot).

* :func:`nonlinear_steps_figure`: reference steps of several sizes, nonlinear plant against
  the linear prediction, each divided by its step size (so that the curves of a linear loop
  would coincide);
* :func:`reach_figure`: the estimated reach along each state axis, as a fraction of the
  search bound on each side.

Plain data in, so that the figure server's workers can draw them.  Curves differ by line
style as well as colour; legends are placed clear of the data.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from .figure_layout import axis_label, place_legend, unit_text
from .figures import blank_figure, plain_label

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["nonlinear_steps_figure", "reach_figure"]

_COLOURS = ("#000000", "#1f5fa8", "#c0392b", "#2e7d32", "#6a3d9a", "#8d6e00", "#00838f", "#777777")


def _number(x: float) -> str:
    return np.format_float_positional(
        float(x), precision=3, unique=False, fractional=False, trim="-"
    )


def nonlinear_steps_figure(
    runs: Sequence[tuple], output: tuple[str, str], control: tuple[str, str], u_max
) -> Figure:
    """``runs``: ``(size, t, y, y_linear, u)`` per step; ``output``, ``control``: (name, unit)."""
    fig = blank_figure((6.4, 5.0))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.1, top=0.97, hspace=0.3)
    top, bottom = fig.add_subplot(2, 1, 1), fig.add_subplot(2, 1, 2, sharex=None)
    y_unit = unit_text(output[1])
    for k, (size, t, y, y_lin, u) in enumerate(runs):
        colour = _COLOURS[k % len(_COLOURS)]
        label = f"step {_number(size)} {y_unit}".rstrip()
        top.plot(t, y / size, color=colour, linewidth=1.4, label=label)
        top.plot(t, y_lin / size, color=colour, linewidth=1.0, linestyle=(0, (5, 3)))
        bottom.plot(t, u, color=colour, linewidth=1.2)
    top.plot(
        [], [], color="#000000", linewidth=1.0, linestyle=(0, (5, 3)), label="linear prediction"
    )
    if u_max is not None:
        for level in (u_max, -u_max):
            bottom.axhline(level, color="#777777", linewidth=0.9, linestyle=(0, (1, 2)))
    for ax in (top, bottom):
        ax.grid(True, color="#cccccc", linewidth=0.6)
    top.set_ylabel(plain_label(f"{output[0]} / step [–]"))
    bottom.set_ylabel(plain_label(axis_label(f"{control[0]} − {control[0]}*", control[1])))
    bottom.set_xlabel("time [s]")
    top.set_xlim(0, float(runs[0][1][-1]))
    bottom.set_xlim(0, float(runs[0][1][-1]))
    place_legend(top)
    return fig


def reach_figure(axes: Sequence[tuple]) -> Figure:
    """``axes``: ``(state, unit, below, above, bound_below, bound_above, required)`` each."""
    fig = blank_figure((6.4, 0.55 * len(axes) + 1.4))
    height = 0.55 * len(axes) + 1.4
    fig.subplots_adjust(left=0.2, right=0.78, bottom=0.75 / height, top=1 - 0.3 / height)
    ax = fig.add_subplot(1, 1, 1)
    rows = np.arange(len(axes))[::-1]
    for row, (_state, unit, below, above, bb, ba, required) in zip(rows, axes, strict=True):
        left = -below / bb if bb > 0 else 0.0
        right = above / ba if ba > 0 else 0.0
        ax.barh(row, right - left, left=left, height=0.5, color="#9ecae1", edgecolor="#1f5fa8")
        if required is not None:
            marks = [-required / bb if bb > 0 else 0.0, required / ba if ba > 0 else 0.0]
            ax.plot(marks, [row, row], linestyle="none", marker="D", color="#c0392b", markersize=6)
        ax.text(
            1.03,
            row,
            f"−{_number(bb)} / +{_number(ba)} {unit_text(unit)}".rstrip(),
            va="center",
            fontsize=7,
            transform=ax.get_yaxis_transform(),
        )
    ax.axvline(0.0, color="#000000", linewidth=0.8)
    ax.set_yticks(rows, [plain_label(a[0]) for a in axes])
    ax.set_xlim(-1.05, 1.05)
    ax.set_xlabel("initial offset / search bound on that side [–]")
    ax.grid(True, axis="x", color="#cccccc", linewidth=0.6)
    return fig
