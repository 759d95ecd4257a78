"""Figures of the loop shapes (matplotlib ``Figure`` objects, no pyplot).

* :func:`sensitivity_figure`: |S| and |T| in dB against frequency, their peaks marked, and
  below them the gain from measurement noise to the plant input;
* :func:`input_disturbance_figure`: the tracked output and the input demand after a step
  input disturbance.

The functions take plain data (arrays, numbers, strings), so that
:func:`symbolic.render.figure_server.render_figures` can draw them in its workers.  Curves
differ by line style as well as colour; legends sit below the axes, clear of the data.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from .figures import blank_figure, plain_label

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["input_disturbance_figure", "sensitivity_figure"]

_BLACK, _BLUE, _RED, _GREY = "#000000", "#1f5fa8", "#c0392b", "#777777"
_DASHED, _DOTTED = (0, (6, 3)), (0, (1, 2))
#: Lowest level drawn in the |S|, |T| panel [dB]: below it a curve only says "small".
FLOOR_DB = -60.0
#: Decades of the noise gain drawn below its peak.
NOISE_DECADES = 4.0

#: (colour, line style, peak marker) of each curve of the sensitivity panel, by key.
_CURVES = {
    "S_input": (_BLACK, "-", "o"),
    "T_input": (_BLUE, _DASHED, "s"),
    "S_output": (_RED, (0, (4, 1, 1, 1)), "^"),
    "T_output": ("#6a3d9a", _DOTTED, "D"),
}


_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def _num(x: float) -> str:
    """Three significant figures, ``1670`` or ``1.99×10⁵`` (no ``e`` notation in a figure)."""
    x = float(x)
    if x == 0 or not np.isfinite(x) or 1e-3 <= abs(x) < 1e5:
        return np.format_float_positional(x, precision=3, unique=False, fractional=False, trim="-")
    mantissa, exponent = f"{x:.2e}".split("e")
    return f"{mantissa.rstrip('0').rstrip('.')}×10{str(int(exponent)).translate(_SUPERSCRIPT)}"


def _band(frequency: np.ndarray, crossovers: Sequence[float], peaks: Sequence[float], top):
    """The frequencies worth drawing: two decades around the crossovers and peaks."""
    marks = [w for w in (*crossovers, *peaks) if np.isfinite(w) and w > 0]
    lo = max(float(frequency[0]), min(marks) / 100.0) if marks else float(frequency[0])
    hi = min(float(frequency[-1]), max(marks) * 100.0) if marks else float(frequency[-1])
    if top is not None:
        hi = float(top)
    return (frequency >= lo) & (frequency <= hi), lo, hi


def sensitivity_figure(
    frequency: np.ndarray,
    curves: Sequence[tuple[str, str, np.ndarray]],
    peaks: Sequence[tuple[str, float, float]],
    crossovers: Sequence[float],
    noise: np.ndarray,
    controller_gain: np.ndarray,
    noise_peak: tuple[float, float],
    noise_unit: str,
    nyquist: float | None = None,
) -> Figure:
    """|S|, |T| [dB] (top) and the noise-to-input gain (bottom) against ω [rad/s].

    ``curves`` are ``(key, label, magnitude)`` (keys of ``_CURVES``); ``peaks`` are
    ``(key, ω, magnitude)``; ``noise_peak`` is ``(ω, gain)``; ``nyquist`` (digital) ends the
    axis at π/T.
    """
    fig = blank_figure((6.4, 4.8))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.22, top=0.97, hspace=0.12)
    ax_s, ax_n = fig.subplots(2, 1, sharex=True)
    keep, lo, hi = _band(frequency, crossovers, [p[1] for p in peaks], nyquist)
    handles = _sensitivity_panel(
        ax_s, frequency[keep], [(k, lab, np.asarray(m)[keep]) for k, lab, m in curves], peaks
    )
    _noise_panel(
        ax_n,
        frequency[keep],
        np.asarray(noise)[keep],
        np.asarray(controller_gain)[keep],
        noise_peak,
        noise_unit,
    )
    for ax in (ax_s, ax_n):
        for wc in crossovers:
            ax.axvline(wc, color=_GREY, linewidth=0.8, linestyle=(0, (3, 3)))
        ax.grid(True, which="major", color="#cccccc", linewidth=0.6)
        ax.minorticks_off()  # seven decades: the decades suffice, and minor ticks cost time
    ax_n.set_xlim(lo, hi)
    more, _names = ax_n.get_legend_handles_labels()
    fig.legend(handles=handles + more, loc="lower center", ncol=2, fontsize=8, frameon=False)
    return fig


def _sensitivity_panel(ax, w: np.ndarray, curves, peaks) -> list:
    """The |S|, |T| curves in dB with their peaks marked; the legend handles (values in them)."""
    from matplotlib.lines import Line2D

    peak_of = {key: (wp, value) for key, wp, value in peaks}
    handles = []
    top = 6.0
    for key, label, mag in curves:
        colour, style, marker = _CURVES[key]
        with np.errstate(divide="ignore"):
            db = 20.0 * np.log10(mag)
        ax.semilogx(w, np.maximum(db, FLOOR_DB - 10.0), color=colour, linestyle=style, lw=1.5)
        top = max(top, float(np.nanmax(db)))
        mark = {"markersize": 7, "markerfacecolor": "none", "markeredgewidth": 1.4}
        if key in peak_of:
            wp, value = peak_of[key]
            label = f"{label}, peak {20.0 * np.log10(value):.1f} dB at {_num(wp)} rad/s"
            ax.plot(
                [wp],
                [20.0 * np.log10(value)],
                marker=marker,
                color=colour,
                ls="none",
                clip_on=False,
                **mark,
            )  # not clipped: a peak at the Nyquist frequency sits on the axis' edge
        handles.append(
            Line2D(
                [],
                [],
                color=colour,
                linestyle=style,
                lw=1.5,
                label=label,
                marker=marker if key in peak_of else None,
                **mark,
            )
        )
    ax.axhline(0.0, color=_GREY, linewidth=0.8, linestyle=_DOTTED)
    ax.set_ylim(FLOOR_DB, top + 6.0)
    ax.set_ylabel("magnitude [dB]")
    return handles


def _noise_panel(ax, w, noise, controller_gain, noise_peak, noise_unit: str) -> None:
    """The closed-loop noise-to-input gain (peak circled) and the controller's own gain."""
    mark = {"markersize": 7, "markerfacecolor": "none", "markeredgewidth": 1.4}
    ax.loglog(
        w,
        noise,
        color=_BLACK,
        linewidth=1.5,
        marker="o",
        label=plain_label(
            f"noise to plant input, closed loop, peak {_num(noise_peak[1])} {noise_unit} at"
            f" {_num(noise_peak[0])} rad/s"
        ),
        markevery=[],
        **mark,
    )
    ax.plot(
        [noise_peak[0]], [noise_peak[1]], marker="o", color=_BLACK, ls="none", clip_on=False, **mark
    )
    ax.loglog(w, controller_gain, color=_RED, linestyle=_DASHED, lw=1.2, label="controller alone")
    finite = noise[np.isfinite(noise) & (noise > 0)]
    if finite.size:
        ax.set_ylim(float(finite.max()) / 10**NOISE_DECADES, float(finite.max()) * 5.0)
    ax.set_ylabel(plain_label(f"gain [{noise_unit}]" if noise_unit else "gain"))
    ax.set_xlabel("frequency ω [rad/s]")


def _scale(values: np.ndarray, name: str, unit: str) -> tuple[float, str]:
    """A power of ten that brings the values to 0.01 ... 1000, and the axis label with it
    (``gap [10⁻⁴ m]``), so that tick labels stay short."""
    top = float(np.nanmax(np.abs(values))) if np.size(values) else 0.0
    k = int(np.floor(np.log10(top))) if top > 0 and np.isfinite(top) else 0
    if -2 <= k <= 3:
        return 1.0, plain_label(f"{name} [{unit}]" if unit else name)
    power = f"10{str(k).translate(_SUPERSCRIPT)}"
    return 10.0**-k, plain_label(f"{name} [{power} {unit}]" if unit else f"{name} [{power}]")


def input_disturbance_figure(
    time: np.ndarray,
    output: np.ndarray,
    control: np.ndarray,
    size: float,
    steady_output: float | None,
    peak: tuple[float, float],
    output_signal: tuple[str, str],
    input_signal: tuple[str, str],
    held: bool = False,
) -> Figure:
    """Tracked output (top) and input demand (bottom) after a step input disturbance at t = 0.

    ``peak`` is ``(t, value)`` of the largest deviation; the steady output and ``−size`` are
    drawn as dotted lines; a ``held`` (digital) demand is drawn as steps.  The signals are
    ``(name, unit)``; an axis is scaled by a power of ten when its values are very small or
    large (the label says so).
    """
    fig = blank_figure((6.4, 3.9))
    fig.subplots_adjust(left=0.14, right=0.97, bottom=0.28, top=0.97, hspace=0.12)
    ax_y, ax_u = fig.subplots(2, 1, sharex=True)
    ky, y_label = _scale(np.append(output, steady_output or 0.0), *output_signal)
    ku, u_label = _scale(np.append(control, size), *input_signal)
    ax_y.plot(time, ky * np.asarray(output), color=_BLACK, linewidth=1.5, label="tracked output")
    ax_y.plot(
        [peak[0]],
        [ky * peak[1]],
        marker="o",
        markersize=7,
        color=_BLACK,
        markerfacecolor="none",
        markeredgewidth=1.4,
        linestyle="none",
        label="largest deviation",
    )
    if steady_output is not None:
        ax_y.axhline(
            ky * steady_output,
            color=_BLUE,
            linewidth=1.0,
            linestyle=_DOTTED,
            label="steady-state value",
        )
    ax_u.plot(
        time,
        ku * np.asarray(control),
        color=_RED,
        linestyle=_DASHED,
        linewidth=1.5,
        drawstyle="steps-post" if held else "default",
        label="controller input demand" + (", held between samples" if held else ""),
    )
    ax_u.axhline(
        -ku * size, color=_GREY, linewidth=1.0, linestyle=_DOTTED, label="minus the disturbance"
    )
    ax_y.set_ylabel(y_label)
    ax_u.set_ylabel(u_label)
    ax_u.set_xlabel("time since the disturbance step [s]")
    for ax in (ax_y, ax_u):
        ax.grid(True, color="#cccccc", linewidth=0.6)
        ax.set_xlim(float(time[0]), float(time[-1]))
    handles, labels = ax_y.get_legend_handles_labels()
    more, names = ax_u.get_legend_handles_labels()
    fig.legend(
        handles + more, labels + names, loc="lower center", ncol=2, fontsize=8, frameon=False
    )
    return fig
