"""Figures of the extended loop: the sampled-data loop and the integral-action study.

* :func:`sampled_data_figure`: the continuous plant driven by the zero-order-held digital
  controller (the output between the samples, the samples the controller saw, the held
  input) against the continuous design;
* :func:`integral_action_figure`: reference step then a step input disturbance, reference
  gain against integral action, on the nominal plant and on the mismatched plants;
* :func:`anti_windup_figure`: the integral loop with a limited input, with and without the
  back-calculation anti-windup.

Each returns a matplotlib ``Figure`` (no pyplot); lines differ by style as well as colour, so
the figures stay legible in black and white.  They are drawn by
:func:`symbolic.render.figure_server.render_figures`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from matplotlib.figure import Figure

from .figure_layout import axis_label, place_legend
from .figures import blank_figure, plain_label

__all__ = ["anti_windup_figure", "integral_action_figure", "sampled_data_figure"]

_BLACK, _BLUE, _RED, _PURPLE = "#000000", "#1f5fa8", "#c0392b", "#6a3d9a"
_DASHED, _DOTTED, _DASH_DOT = (0, (6, 3)), (0, (2, 2)), (0, (6, 2, 1, 2))


def _figure(rows: int, height: float = 5.2) -> tuple[Figure, list]:
    fig = blank_figure((6.4, height))
    axes = [fig.add_subplot(rows, 1, k + 1) for k in range(rows)]
    for ax in axes:
        ax.grid(True, color="#cccccc", linewidth=0.6)
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.1, top=0.97, hspace=0.32)
    return fig, axes


def _label(name: str, unit: str) -> str:
    return plain_label(axis_label(name, unit))


def sampled_data_figure(
    study,
    output_name: str,
    output_unit: str,
    input_name: str,
    input_unit: str,
    reference: float,
    *,
    tracked: int = 0,
    zoom: bool = True,
) -> Figure:
    """The sampled-data loop against the continuous design (a
    :class:`symbolic.verification.sampled_data.SampledDataStudy`).

    Top: the tracked output of the continuous plant between the samples (solid), the values
    the controller sampled (dots) and the continuous design (dashed).  Bottom: the held input
    (a staircase).  With ``zoom`` the time axis shows the first part of the response (where
    the samples can be told apart), at least 25 samples.
    """
    fig, (top, bottom) = _figure(2)
    t_end = float(study.time[-1])
    if zoom:
        settle = getattr(study.metrics, "settling_time_2pct", None) or t_end / 3
        T = (
            float(study.sample_times[1] - study.sample_times[0])
            if study.sample_times.size > 1
            else t_end
        )
        t_end = min(t_end, max(1.5 * settle, 25 * T))
    top.plot(
        study.continuous_time,
        study.continuous_output,
        color=_BLUE,
        linestyle=_DASHED,
        linewidth=1.5,
        label="continuous design",
    )
    top.plot(
        study.time,
        study.tracked_output,
        color=_BLACK,
        linewidth=1.3,
        label=f"sampled-data loop ({plain_label(study.form)}), between samples",
    )
    keep = study.sample_times <= t_end
    top.plot(
        study.sample_times[keep],
        study.sampled_output[keep, tracked],
        linestyle="none",
        marker="o",
        markersize=3,
        markerfacecolor="white",
        color=_BLACK,
        label="samples seen by the controller",
    )
    top.axhline(reference, color="#888888", linewidth=0.8, linestyle=(0, (1, 3)), label="reference")
    top.set_ylabel(_label(output_name, output_unit))
    top.set_xlim(0.0, t_end)
    bottom.step(
        study.sample_times,
        study.controls[:, 0],
        where="post",
        color=_BLACK,
        linewidth=1.3,
        label="held input u[k] (zero-order hold)",
    )
    bottom.set_xlim(0.0, t_end)
    bottom.set_xlabel("time [s]")
    bottom.set_ylabel(_label(input_name, input_unit))
    place_legend(top, fontsize=7)
    place_legend(bottom, fontsize=7)
    return fig


def integral_action_figure(study, output_name: str, output_unit: str) -> Figure:
    """Reference gain against integral action (an :class:`symbolic.derivation.integral_study.IntegralStudy`).

    Top: the nominal plant.  Bottom: the mismatched plants (low and high end of the parameter
    ranges).  The step input disturbance is marked by a vertical line.
    """
    fig, (top, bottom) = _figure(2)
    styles = {"reference gain": (_RED, _DASHED), "integral action": (_BLACK, "-")}
    runs = {(r.loop, r.plant): r for r in study.runs}  # fields only: drawn from a plain copy
    plants = [r.plant for r in study.runs if r.loop == "integral action"]
    mismatched = [p for p in plants if p != "nominal"]
    for ax, which in ((top, ["nominal"]), (bottom, mismatched)):
        for k, plant in enumerate(which):
            for loop, (colour, style) in styles.items():
                run = runs[loop, plant]
                if k == 1:
                    style = _DOTTED if loop == "reference gain" else _DASH_DOT
                ax.plot(
                    run.time,
                    run.tracked_output,
                    color=colour,
                    linestyle=style,
                    linewidth=1.4,
                    label=plain_label(f"{loop}, {plant}" if ax is bottom else loop),
                )
        ax.axhline(study.reference, color="#888888", linewidth=0.8, linestyle=(0, (1, 3)))
        ax.axvline(study.disturbance_time, color=_PURPLE, linewidth=0.8, linestyle=(0, (4, 2)))
        ax.set_ylabel(_label(output_name, output_unit))
        ax.set_xlim(0.0, study.horizon)
    top.text(
        study.disturbance_time,
        top.get_ylim()[0],
        " input disturbance",
        color=_PURPLE,
        fontsize=7,
        va="bottom",
    )
    bottom.set_xlabel("time [s]")
    place_legend(top, fontsize=7, title="nominal plant", title_fontsize=7)
    if mismatched:
        place_legend(bottom, fontsize=7, title="mismatched plants", title_fontsize=7)
    else:
        bottom.text(0.5, 0.5, "no parameters: no mismatch", transform=bottom.transAxes, ha="center")
    return fig


def anti_windup_figure(
    runs: Sequence,
    output_name: str,
    output_unit: str,
    input_name: str,
    input_unit: str,
    reference: float,
    u_max: float,
) -> Figure:
    """The integral loop with a limited input, without and with anti-windup
    (:class:`symbolic.derivation.integral_study.WindupRun` pairs)."""
    fig, (top, bottom) = _figure(2)
    for run in runs:
        colour, style = (_BLACK, "-") if run.anti_windup else (_RED, _DASHED)
        label = "with anti-windup" if run.anti_windup else "without anti-windup"
        top.plot(
            run.time, run.tracked_output, color=colour, linestyle=style, linewidth=1.4, label=label
        )
        u = np.asarray(run.control)
        bottom.plot(
            run.time,
            u[:, 0] if u.ndim == 2 else u,
            color=colour,
            linestyle=style,
            linewidth=1.4,
            label=label,
        )
    top.axhline(reference, color="#888888", linewidth=0.8, linestyle=(0, (1, 3)), label="reference")
    for sign in (1, -1):
        bottom.axhline(
            sign * u_max,
            color=_PURPLE,
            linewidth=0.9,
            linestyle=(0, (4, 1, 1, 1)),
            label=f"actuator limit ±{u_max:g}" if sign == 1 else None,
        )
    top.set_ylabel(_label(output_name, output_unit))
    bottom.set_ylabel(_label(input_name, input_unit))
    bottom.set_xlabel("time [s]")
    t_end = float(runs[0].time[-1]) / 2  # the reference step: the first half of the study
    for ax in (top, bottom):
        ax.set_xlim(0.0, t_end)
        place_legend(ax, fontsize=7)
    return fig
