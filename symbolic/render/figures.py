"""Figures for the memo (matplotlib, no screen needed).

Each function takes finished result objects and returns a matplotlib
``Figure``; :func:`figure_files` turns a figure into a vector PDF (for TeX)
and a PNG (for Markdown).  Lines differ by style as well as colour so the
figures stay legible when printed in black and white.  matplotlib is imported
only inside functions, so the main process of a memo never loads it: the
figures are drawn by the processes of :mod:`symbolic.render.figure_server`.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from ..model.numbers import format_poles
from .figure_layout import (
    DIMENSIONLESS,
    ROUNDOFF_FLOOR,
    above_floor,
    axis_label,
    coincidence_sentence,
    coincident_pairs,
    marker_style,
    mixed_unit,
    place_legend,
    plain_log_labels,
)
from .pole_view import pole_map_inset, pole_map_view

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "POLE_MARKERS",
    "blank_figure",
    "control_effort_figure",
    "curve_label",
    "curves_coincidence",
    "estimation_error_figure",
    "estimation_plan",
    "figure_files",
    "figure_names",
    "input_curves",
    "observer_study_figure",
    "output_curves",
    "plain_label",
    "plot_design_poles",
    "plot_pole_kind",
    "pole_map_figure",
    "pole_map_view",
    "split_zeros",
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

#: Pole-map markers: (marker, colour, size, edge width) per kind.  Zeros are circles and only
#: zeros are; poles are crosses of different shapes or squares (practitioners read circles as
#: zeros).
POLE_MARKERS = {
    "controller": ("x", "#000000", 9, 2.0),
    "observer": ("+", "#c0392b", 11, 2.0),
    "plant": ("s", "#555555", 7, 1.2),
    "zero": ("o", "#1f5fa8", 8, 1.5),
}


def _style(r) -> tuple[str, object]:
    key = "limited" if getattr(r, "saturated", False) else r.slug
    return _STYLES.get(key, ("#555555", "-"))


def curve_label(r) -> str:
    """The legend label of a simulated case (``(limited)`` added unless its name says so)."""
    limited = getattr(r, "saturated", False) and "limited" not in r.name
    return plain_label(r.name + (" (limited)" if limited else ""))


def output_curves(responses: Sequence) -> list[tuple[np.ndarray, np.ndarray]]:
    """``(time, tracked output)`` of each case, as :func:`step_response_figure` draws them."""
    return [(np.asarray(r.time), np.asarray(r.tracked_output)) for r in responses]


def input_curves(responses: Sequence) -> list[tuple[np.ndarray, np.ndarray]]:
    """``(time, first input)`` of each case, as :func:`control_effort_figure` draws them."""
    out = []
    for r in responses:
        u = np.asarray(r.control)
        out.append((np.asarray(r.time), u[:, 0] if u.ndim == 2 else u))
    return out


def curves_coincidence(responses: Sequence, curves) -> str:
    """The caption's sentence on the cases whose curves coincide (:func:`coincident_pairs`)."""
    labels = [curve_label(r) for r in responses]
    return coincidence_sentence(labels, coincident_pairs(curves))


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


def plain_label(text: str) -> str:
    """Keep matplotlib from reading $...$ in user text as mathtext."""
    return text.replace("$", r"\$")


def _draw_cases(ax: Axes, responses: Sequence, curves: list) -> None:
    """One line per case; a curve that coincides with an earlier one gets markers."""
    marked = [j for _i, j in coincident_pairs(curves)]
    for k, (r, (t, y)) in enumerate(zip(responses, curves)):
        colour, style = _style(r)
        extra = marker_style(marked.index(k), len(marked), t.size) if k in marked else {}
        ax.plot(t, y, color=colour, linestyle=style, linewidth=1.6, label=curve_label(r), **extra)


def plot_design_poles(
    ax: Axes,
    controller: np.ndarray,
    observer: np.ndarray,
    *,
    controller_label: str = "controller poles (A − BK)",
    observer_label: str = "observer poles (A − LC)",
) -> None:
    """Controller poles as ×, observer poles as + (shared by the maps; circles mean zeros)."""
    for kind, values, label in (
        ("controller", controller, controller_label),
        ("observer", observer, observer_label),
    ):
        plot_pole_kind(ax, kind, np.asarray(values, dtype=complex), label)


def plot_pole_kind(ax: Axes, kind: str, values: np.ndarray, label: str) -> None:
    """Points of one kind of :data:`POLE_MARKERS` in the s-plane."""
    marker, colour, size, width = POLE_MARKERS[kind]
    ax.plot(
        values.real,
        values.imag,
        linestyle="none",
        marker=marker,
        markersize=size,
        markeredgewidth=width,
        markerfacecolor="none",
        color=colour,
        label=label,
    )


def step_response_figure(
    responses: Sequence, output_name: str, output_unit: str, reference: float
) -> Figure:
    """Tracked output of each simulated case against time, with the reference."""
    fig, ax = _new()
    _draw_cases(ax, responses, output_curves(responses))
    t = responses[0].time
    ax.axhline(reference, color="#888888", linewidth=0.8, linestyle=(0, (1, 3)), label="reference")
    ax.set_xlabel("time [s]")
    ax.set_ylabel(plain_label(axis_label(output_name, output_unit)))
    ax.set_xlim(t[0], t[-1])
    place_legend(ax)
    return fig


def estimation_plan(responses: Sequence) -> dict:
    """What :func:`estimation_error_figure` draws: the round-off floor (:data:`ROUNDOFF_FLOOR`
    times the largest state norm of the runs), the cases drawn, the cases whose error is zero
    to rounding (not drawn) and the case whose initial error sets the 2 % line (or None)."""
    observed = [k for k, r in enumerate(responses) if r.estimation_error_norm is not None]
    scale = max(
        (
            float(np.max(np.linalg.norm(np.atleast_2d(responses[k].state), axis=1)))
            for k in observed
        ),
        default=0.0,
    )
    floor = ROUNDOFF_FLOOR * scale
    drawn = [k for k in observed if above_floor(responses[k].estimation_error_norm, scale)]
    zero = [k for k in observed if k not in drawn]
    starts = {k: float(responses[k].estimation_error_norm[0]) for k in drawn}
    first = max((k for k in drawn if starts[k] > floor), key=starts.get, default=None)
    return {"floor": floor, "drawn": drawn, "zero": zero, "initial": first}


def estimation_error_figure(responses: Sequence, state_units: Sequence[str] = ()) -> Figure:
    """Norm of the estimation error x − x̂ on a log scale (observer cases only).

    Values below the round-off floor (:func:`estimation_plan`) are not drawn, and a case
    whose whole error lies below it is named in the legend as zero to rounding.
    """
    fig, ax = _new()
    plan = estimation_plan(responses)
    floor = plan["floor"]
    for k in plan["drawn"]:
        r = responses[k]
        e = np.asarray(r.estimation_error_norm, dtype=float)
        colour, style = _style(r)
        shown = np.where(e > floor, e, np.nan)
        ax.semilogy(
            r.time, shown, color=colour, linestyle=style, linewidth=1.6, label=curve_label(r)
        )
    if plan["initial"] is not None:
        r = responses[plan["initial"]]
        ax.axhline(
            0.02 * float(r.estimation_error_norm[0]),
            color="#888888",
            linewidth=0.8,
            linestyle=(0, (1, 3)),
            label="2 % of the initial error",
        )
    for k in plan["zero"]:
        ax.plot([], [], linestyle="none", label=curve_label(responses[k]) + ": zero to rounding")
    ax.set_xlabel("time [s]")
    ax.set_xlim(responses[0].time[0], responses[0].time[-1])
    ax.set_ylabel(
        plain_label(axis_label("error norm ‖x − x̂‖", mixed_unit(state_units))), fontsize=9
    )
    if plan["drawn"]:
        top = ax.get_ylim()[1]
        ax.set_ylim(max(floor, top * 1e-12), top)
        place_legend(ax)
    else:
        ax.set_yscale("log")
        ax.set_ylim(max(floor, 1e-300), max(floor, 1e-300) * 1e3)
        ax.text(0.5, 0.5, "estimation error zero to rounding", transform=ax.transAxes, ha="center")
    return fig


def control_effort_figure(
    responses: Sequence, input_name: str, input_unit: str, u_max: float | None
) -> Figure:
    """Control signal of each case, with the actuator limit drawn when given."""
    fig, ax = _new()
    _draw_cases(ax, responses, input_curves(responses))
    if u_max is not None:
        for sign in (1, -1):
            ax.axhline(
                sign * u_max,
                color="#000000",
                linewidth=1.0,
                linestyle=(0, (4, 1, 1, 1)),
                label=f"actuator limit ±{u_max:g}" if sign == 1 else None,
            )
    ax.set_xlabel("time [s]")
    ax.set_ylabel(plain_label(axis_label(input_name, input_unit)))
    ax.set_xlim(responses[0].time[0], responses[0].time[-1])
    place_legend(ax)
    return fig


def split_zeros(zeros, left: float, span: float) -> tuple[np.ndarray, np.ndarray]:
    """The plant zeros inside the pole map's view (:func:`pole_map_view`), and those outside."""
    zeros = np.asarray(zeros, dtype=complex).ravel()
    inside = (zeros.real >= left) & (zeros.real <= 0.12 * span)
    inside &= np.abs(zeros.imag) <= 0.75 * span
    return zeros[inside], zeros[~inside]


def pole_map_figure(
    controller: np.ndarray,
    observer: np.ndarray,
    region=None,
    plant: np.ndarray | None = None,
    zeros: np.ndarray | None = None,
    *,
    controller_label: str = "controller poles (A − BK)",
    observer_label: str = "observer poles (A − LC)",
) -> Figure:
    """Controller poles (×), observer poles (+), plant poles (□) and plant zeros (○) in the
    s-plane, with the region that meets the specs.

    ``region`` has ``min_damping_ratio``, ``min_real_part``,
    ``min_natural_frequency`` (see :class:`symbolic.derivation.specs.SpecRegion`).  Plant
    zeros too far out for the view are named in the legend (:func:`pole_map_view`).
    """
    fig, ax = _new((6.4, 5.0))
    fig.subplots_adjust(bottom=0.27)
    left, span = pole_map_view(controller, observer, plant)
    ax.set_xlim(left, 0.12 * span)
    ax.set_ylim(-0.75 * span, 0.75 * span)
    if region is not None:
        _draw_region(ax, region, left, span)
    ax.axvline(0, color="#000000", linewidth=0.8)
    ax.axhline(0, color="#000000", linewidth=0.5)
    if plant is not None:
        plot_pole_kind(ax, "plant", np.asarray(plant, dtype=complex), "open-loop plant poles")
    plot_design_poles(
        ax, controller, observer, controller_label=controller_label, observer_label=observer_label
    )
    if zeros is not None:
        shown, off = split_zeros(zeros, left, span)
        far = format_poles(off, 3).replace("-", "−")
        if shown.size:
            label = "plant zeros" + (f" (also at {far}, outside the view)" if off.size else "")
            plot_pole_kind(ax, "zero", shown, plain_label(label))
        else:
            label = f"plant zeros: at {far}, outside the view" if off.size else "plant zeros: none"
            ax.plot([], [], linestyle="none", label=plain_label(label))
    ax.set_xlabel("real part [1/s]")
    ax.set_ylabel("imaginary part [rad/s]")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, fontsize=8)
    inset = pole_map_inset(controller, observer, plant)
    if inset is not None:
        _draw_inset(ax, inset, controller, observer, region, plant, zeros)
    return fig


def _draw_inset(ax: Axes, inset, controller, observer, region, plant, zeros) -> None:
    """The enlarged view of :func:`pole_map_inset`, with the same markers and region."""
    half, place = inset
    box = ax.inset_axes(place)
    box.set_xlim(-half, 0.12 * half)
    box.set_ylim(-0.75 * half, 0.75 * half)
    if region is not None:
        _draw_region(box, region, -half, half)
    box.axvline(0, color="#000000", linewidth=0.8)
    box.axhline(0, color="#000000", linewidth=0.5)
    if plant is not None:
        plot_pole_kind(box, "plant", np.asarray(plant, dtype=complex), "")
    plot_design_poles(box, controller, observer)
    if zeros is not None and np.asarray(zeros).size:
        plot_pole_kind(box, "zero", np.asarray(zeros, dtype=complex), "")
    box.tick_params(labelsize=7)
    box.grid(True, color="#dddddd", linewidth=0.5)
    box.set_facecolor("#ffffff")
    ax.indicate_inset_zoom(box, edgecolor="#555555")


def _draw_region(ax: Axes, region, left: float, span: float) -> None:
    """The admissible set: Re ≤ −σ, inside the damping wedge, outside |s| = ωn."""
    zeta = region.min_damping_ratio
    sigma = region.min_real_part
    wn = region.min_natural_frequency
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


def observer_study_figure(
    factors: np.ndarray,
    overshoot: np.ndarray,
    settling: np.ndarray,
    peak_u: np.ndarray,
    input_name: str,
    input_unit: str,
    chosen: tuple[float, float] | None = None,
    chosen_values: tuple[float | None, float | None, float | None] | None = None,
) -> Figure:
    """Overshoot, settling time and peak control against the observer speed factor.

    ``chosen`` marks the design: a vertical line at its speed factor (``lo == hi``) or a band
    over the ratios of its observer to its controller pole magnitudes; ``chosen_values`` (the
    shipped loop's own overshoot, settling time and peak input) are drawn as stars on it.
    """
    fig = blank_figure((6.4, 5.4))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.16, top=0.97, hspace=0.12)
    axes = fig.subplots(3, 1, sharex=True)
    for k, (ax, values, label, marker) in enumerate(
        (
            (axes[0], overshoot, "overshoot [%]", "o"),
            (axes[1], settling, "settling time 2 % [s]", "s"),
            (axes[2], peak_u, plain_label(axis_label(f"peak |{input_name}|", input_unit)), "^"),
        )
    ):
        ax.plot(
            factors,
            values,
            color="#000000",
            marker=marker,
            markersize=4,
            linewidth=1.2,
            label="sweep",
        )
        if chosen is not None:
            lo, hi = chosen
            if np.isclose(lo, hi, rtol=1e-6):
                ax.axvline(
                    lo,
                    color="#c0392b",
                    linewidth=1.2,
                    linestyle=(0, (4, 2)),
                    label=f"design: {lo:.3g}",
                )
            else:
                ax.axvspan(lo, hi, color="#c0392b", alpha=0.18, label=f"design: {lo:.3g}–{hi:.3g}")
        v = None if chosen_values is None else chosen_values[k]
        if v is not None and chosen is not None and np.isclose(chosen[0], chosen[1], rtol=1e-6):
            ax.plot(
                [chosen[0]],
                [v],
                linestyle="none",
                marker="*",
                markersize=11,
                color="#c0392b",
                label="shipped design",
            )
        ax.set_ylabel(label, fontsize=8)
        ax.grid(True, color="#cccccc", linewidth=0.6)
    axes[-1].set_xlabel(
        f"observer speed factor (observer poles / controller poles) [{DIMENSIONLESS}]"
    )
    axes[-1].set_xscale("log")
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower center", ncol=len(handles), fontsize=8, frameon=False)
    return fig


def figure_files(fig: Figure, stem: str) -> dict[str, bytes]:
    """Render a figure as ``stem.pdf`` (vector, for TeX) and ``stem.png`` (for Markdown).

    Metadata that changes between runs (creation date, software version) is
    left out so the same design gives the same files.  Log-axis tick labels are
    set as plain text (``10⁻²``) rather than mathtext, which is slow to lay out.
    """
    plain_log_labels(fig)
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
