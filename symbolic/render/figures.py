"""Figures for the memo (matplotlib, no screen needed).

Each function takes finished result objects and returns a matplotlib
``Figure``; :func:`figure_files` turns a figure into a vector PDF (for TeX)
and a PNG (for Markdown).  Lines differ by style as well as colour so the
figures stay legible when printed in black and white.  matplotlib is imported
only inside functions, so the main process of a memo never loads it: the
figures are drawn by the processes of :mod:`symbolic.render.figure_server`.
"""

from __future__ import annotations

import functools
import io
import re
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "blank_figure",
    "control_effort_figure",
    "estimation_error_figure",
    "figure_files",
    "figure_names",
    "observer_study_figure",
    "plain_label",
    "plot_design_poles",
    "pole_map_figure",
    "step_response_figure",
    "warm_up",
]

#: (colour, line style) per case; readable in grey scale too.
_STYLES = {
    "state_feedback": ("#000000", "-"),
    "observer_matched": ("#1f5fa8", (0, (6, 3))),
    "observer_mismatched": ("#c0392b", (0, (2, 2))),
    "limited": ("#6a3d9a", (0, (6, 2, 1, 2))),
}


def _style(r) -> tuple[str, object]:
    key = "limited" if getattr(r, "saturated", False) else r.slug
    return _STYLES.get(key, ("#555555", "-"))


def _name(r) -> str:
    return plain_label(r.name + (" (limited)" if getattr(r, "saturated", False) else ""))


_WIDTH = (6.4, 3.4)


def blank_figure(size) -> Figure:
    """A matplotlib ``Figure`` of ``size`` inches at 100 dpi on an Agg canvas (no pyplot)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, dpi=100)
    FigureCanvasAgg(fig)
    return fig


def _new(size=_WIDTH) -> tuple[Figure, Axes]:
    fig = blank_figure(size)
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.15, top=0.96)
    ax = fig.add_subplot(1, 1, 1)
    ax.grid(True, color="#cccccc", linewidth=0.6)
    return fig, ax


def _label(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def plain_label(text: str) -> str:
    """Keep matplotlib from reading $...$ in user text as mathtext."""
    return text.replace("$", r"\$")


def plot_design_poles(
    ax: Axes,
    controller: np.ndarray,
    observer: np.ndarray,
    *,
    controller_label: str = "controller poles (A − BK)",
    observer_label: str = "observer poles (A − LC)",
    observer_colour: str = "#c0392b",
    observer_size: float = 7,
) -> None:
    """Controller poles as crosses and observer poles as open circles (shared by the maps)."""
    ax.plot(
        controller.real,
        controller.imag,
        linestyle="none",
        marker="x",
        markersize=9,
        markeredgewidth=2,
        color="#000000",
        label=controller_label,
    )
    ax.plot(
        observer.real,
        observer.imag,
        linestyle="none",
        marker="o",
        markersize=observer_size,
        markerfacecolor="none",
        markeredgewidth=1.5,
        color=observer_colour,
        label=observer_label,
    )


def step_response_figure(
    responses: Sequence, output_name: str, output_unit: str, reference: float
) -> Figure:
    """Tracked output of each simulated case against time, with the reference."""
    fig, ax = _new()
    for r in responses:
        colour, style = _style(r)
        ax.plot(
            r.time, r.tracked_output, color=colour, linestyle=style, linewidth=1.6, label=_name(r)
        )
    t = responses[0].time
    ax.axhline(reference, color="#888888", linewidth=0.8, linestyle=(0, (1, 3)), label="reference")
    ax.set_xlabel("time [s]")
    ax.set_ylabel(plain_label(_label(output_name, output_unit)))
    ax.set_xlim(t[0], t[-1])
    ax.legend(loc="best", fontsize=8, frameon=True)
    return fig


def estimation_error_figure(responses: Sequence) -> Figure:
    """Norm of the estimation error x − x̂ on a log scale (observer cases only)."""
    fig, ax = _new()
    plotted = False
    for r in responses:
        e = getattr(r, "estimation_error_norm", None)
        if e is None or not np.any(e > 0):
            continue
        colour, style = _style(r)
        positive = np.where(e > 0, e, np.nan)
        ax.semilogy(r.time, positive, color=colour, linestyle=style, linewidth=1.6, label=_name(r))
        e0 = e[0]
        if e0 > 0:
            ax.axhline(
                0.02 * e0,
                color="#888888",
                linewidth=0.8,
                linestyle=(0, (1, 3)),
                label="2 % of initial error",
            )
        plotted = True
    ax.set_xlabel("time [s]")
    ax.set_ylabel("estimation error norm ‖x − x̂‖")
    if plotted:
        ax.legend(loc="best", fontsize=8)
    else:
        ax.text(0.5, 0.5, "no initial estimation error", transform=ax.transAxes, ha="center")
    return fig


def control_effort_figure(
    responses: Sequence, input_name: str, input_unit: str, u_max: float | None
) -> Figure:
    """Control signal of each case, with the actuator limit drawn when given."""
    fig, ax = _new()
    for r in responses:
        colour, style = _style(r)
        u = np.asarray(r.control)
        ax.plot(
            r.time,
            u[:, 0] if u.ndim == 2 else u,
            color=colour,
            linestyle=style,
            linewidth=1.6,
            label=_name(r),
        )
    if u_max is not None:
        for sign in (1, -1):
            ax.axhline(
                sign * u_max,
                color="#000000",
                linewidth=1.0,
                linestyle=(0, (4, 1, 1, 1)),
                label="actuator limit" if sign == 1 else None,
            )
    ax.set_xlabel("time [s]")
    ax.set_ylabel(plain_label(_label(input_name, input_unit)))
    ax.set_xlim(responses[0].time[0], responses[0].time[-1])
    ax.legend(loc="best", fontsize=8)
    return fig


def pole_map_figure(
    controller: np.ndarray, observer: np.ndarray, region=None, plant: np.ndarray | None = None
) -> Figure:
    """Controller and observer poles in the s-plane with the region that meets the specs.

    ``region`` has ``min_damping_ratio``, ``min_real_part``,
    ``min_natural_frequency`` (see :class:`symbolic.derivation.specs.SpecRegion`).
    """
    fig, ax = _new((6.4, 5.0))
    fig.subplots_adjust(bottom=0.27)
    allp = np.concatenate([controller, observer] + ([plant] if plant is not None else []))
    span = max(1.0, float(np.max(np.abs(allp)))) * 1.15
    left = -span
    ax.set_xlim(left, 0.12 * span)
    ax.set_ylim(-0.75 * span, 0.75 * span)
    if region is not None:
        zeta = region.min_damping_ratio
        sigma = region.min_real_part
        wn = region.min_natural_frequency
        # the admissible set: Re ≤ −σ, inside the damping wedge, outside |s| = ωn
        x = np.linspace(left, 0, 400)
        y = np.linspace(-0.75 * span, 0.75 * span, 400)
        X, Y = np.meshgrid(x, y)
        S = X + 1j * Y
        ok = (X <= -sigma) & (np.abs(S) >= wn)
        if zeta > 0:
            ok &= -X >= zeta * np.abs(S)
        ax.contourf(X, Y, ok.astype(float), levels=[0.5, 1.5], colors=["#d9ead3"], alpha=0.8)
        ax.contour(X, Y, ok.astype(float), levels=[0.5], colors=["#2e7d32"], linewidths=0.8)
        ax.plot([], [], color="#2e7d32", linewidth=6, alpha=0.4, label="meets the specifications")
    ax.axvline(0, color="#000000", linewidth=0.8)
    ax.axhline(0, color="#000000", linewidth=0.5)
    if plant is not None:
        ax.plot(
            plant.real,
            plant.imag,
            linestyle="none",
            marker="s",
            markersize=7,
            markerfacecolor="none",
            markeredgecolor="#555555",
            label="open-loop plant poles",
        )
    plot_design_poles(ax, controller, observer)
    ax.set_xlabel("real part [1/s]")
    ax.set_ylabel("imaginary part [rad/s]")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, fontsize=8)
    return fig


def observer_study_figure(
    factors: np.ndarray,
    overshoot: np.ndarray,
    settling: np.ndarray,
    peak_u: np.ndarray,
    input_name: str,
    input_unit: str,
) -> Figure:
    """Overshoot, settling time and peak control against the observer speed factor."""
    fig = blank_figure((6.4, 5.2))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.1, top=0.97, hspace=0.12)
    axes = fig.subplots(3, 1, sharex=True)
    for ax, values, label, marker in (
        (axes[0], overshoot, "overshoot [%]", "o"),
        (axes[1], settling, "settling time 2 % [s]", "s"),
        (
            axes[2],
            peak_u,
            plain_label(f"peak |{input_name}|" + (f" [{input_unit}]" if input_unit else "")),
            "^",
        ),
    ):
        ax.plot(factors, values, color="#000000", marker=marker, markersize=4, linewidth=1.2)
        ax.set_ylabel(label, fontsize=8)
        ax.grid(True, color="#cccccc", linewidth=0.6)
    axes[-1].set_xlabel("observer speed factor (observer poles / controller poles)")
    axes[-1].set_xscale("log")
    return fig


_SUPERSCRIPT = str.maketrans(
    "-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079"
)
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


def _plain_log_labels(fig: Figure) -> None:
    from matplotlib.ticker import LogFormatterSciNotation

    plain = _plain_log_labels_class()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            if isinstance(axis.get_major_formatter(), LogFormatterSciNotation):
                axis.set_major_formatter(plain(axis.get_major_formatter()))
            if isinstance(axis.get_minor_formatter(), LogFormatterSciNotation):
                axis.set_minor_formatter(plain(axis.get_minor_formatter()))


def figure_files(fig: Figure, stem: str) -> dict[str, bytes]:
    """Render a figure as ``stem.pdf`` (vector, for TeX) and ``stem.png`` (for Markdown).

    Metadata that changes between runs (creation date, software version) is
    left out so the same design gives the same files.  Log-axis tick labels are
    set as plain text (``10⁻²``) rather than mathtext, which is slow to lay out.
    """
    _plain_log_labels(fig)
    out = {}
    buf = io.BytesIO()
    fig.savefig(
        buf, format="pdf", metadata={"CreationDate": None, "Creator": None, "Producer": None}
    )
    out[f"{stem}.pdf"] = buf.getvalue()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=150, metadata={"Software": None})
    out[f"{stem}.png"] = buf.getvalue()
    return out


def figure_names(stem: str) -> list[str]:
    """The file names :func:`figure_files` gives a figure: ``stem.pdf`` and ``stem.png``."""
    return [f"{stem}.pdf", f"{stem}.png"]


def warm_up() -> None:
    """Draw and save a throw-away figure: imports the backends and loads the fonts."""
    fig, ax = _new()
    ax.semilogy([1.0, 2.0], [1e-3, 1.0], label="warm-up")
    ax.set_xlabel("t [s]")
    ax.legend()
    figure_files(fig, "warm-up")
