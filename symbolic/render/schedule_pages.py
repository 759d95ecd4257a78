"""The gain schedule as files and text: the CSV table, the figure, the summary.

Renders a finished :class:`~symbolic.analysis.schedule.GainSchedule`
(:func:`symbolic.render.schedule_code.gain_schedule`); :func:`publish_schedule` writes the
table and the figure through :func:`symbolic.runtime.publish.publish` (``gainsmith schedule``).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..analysis.schedule import GainSchedule, value_text
from ..model.results import Derivation
from ..runtime.publish import publish
from .figure_layout import DIMENSIONLESS, coincident_pairs, marker_style, ratio_unit, unit_text
from .figures import figure_files
from .gain_formulas import CODE_OK
from .schedule_code import gain_schedule

__all__ = [
    "PublishedSchedule",
    "publish_schedule",
    "schedule_csv",
    "schedule_figure",
    "schedule_json",
    "schedule_summary",
    "schedule_text",
]

#: Lines per panel of the figure (values of the second varying parameter).
MAX_LINES = 6

_FLAG_COLUMNS = ("N", "valid", "scipy_agrees", "note")
#: Line styles and colours of the figure's lines, in turn.
_STYLES = ["-", (0, (6, 3)), (0, (2, 2)), (0, (6, 2, 1, 2)), (0, (1, 1)), (0, (8, 2, 2, 2))]
_COLOURS = ["#000000", "#1f5fa8", "#c0392b", "#6a3d9a", "#2e7d32", "#8c6d1f"]


def _csv_names(s: GainSchedule) -> list[str]:
    taken = set(s.gain_columns) | set(_FLAG_COLUMNS)
    return [f"param_{a.name}" if a.name in taken else a.name for a in s.axes]


def schedule_csv(s: GainSchedule) -> bytes:
    """The table: varying parameters, K, L, N, valid, scipy_agrees, note (one row per point).

    A varying parameter whose name is also a column name (``N``, ``valid``,
    ``K_1`` ...) is written as ``param_<name>``.  Gains of invalid points are
    left empty; ``scipy_agrees`` is empty where SciPy was not consulted.
    """
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([*_csv_names(s), *s.gain_columns, "valid", "scipy_agrees", "note"])
    table = s.gain_table
    valid = s.valid
    for i in range(s.size):
        gains = (
            [repr(float(x)) for x in table[i]] if s.code[i] == CODE_OK else [""] * table.shape[1]
        )
        agree = {1: "1", 0: "0"}.get(int(s.agrees[i]), "")
        writer.writerow(
            [repr(float(x)) for x in s.points[i]]
            + gains
            + ["1" if valid[i] else "0", agree, s.notes[i]]
        )
    return buf.getvalue().encode("utf-8")


def _plain(text: str) -> str:
    """Keep matplotlib from reading $...$ in names as mathtext."""
    return text.replace("$", r"\$")


def schedule_figure(s: GainSchedule) -> Figure:
    """Each gain against the first varying parameter.

    With two or more varying parameters, one line per value of the second
    (at most six, evenly subsampled); any further ones are held at the grid
    value nearest their nominal value (named in the title).  Invalid points
    are gaps in the lines, marked by a dotted vertical line.
    """
    design = s.derivation.design
    columns = s.gain_columns
    shape = tuple(a.values.size for a in s.axes)
    table = s.gain_table.reshape(shape + (len(columns),)).copy()
    valid = s.valid.reshape(shape)
    table[~valid] = np.nan
    x_axis = s.axes[0]
    lines, held = _lines(s)
    ncols = 3 if len(columns) > 4 else 2
    nrows = math.ceil(len(columns) / ncols)
    fig = Figure(figsize=(3.2 * ncols, 2.1 * nrows + 1.4), dpi=100)
    FigureCanvasAgg(fig)
    axs = fig.subplots(nrows, ncols, squeeze=False, sharex=True)
    titles = _panel_titles(columns, [sig.name for sig in design.plant.states])
    bad_x = set()
    for c in range(len(columns)):
        ax = axs[c // ncols][c % ncols]
        bad_x |= _draw_panel(ax, titles[c], x_axis.values, table[..., c], valid, lines, c == 0)
    for c in range(len(columns), nrows * ncols):
        axs[c // ncols][c % ncols].set_visible(False)
    _mark_nominal(s, [axs[c // ncols][c % ncols] for c in range(len(columns))])
    for c in range(len(columns)):
        ax = axs[c // ncols][c % ncols]
        for k, xb in enumerate(sorted(bad_x)):
            ax.axvline(
                xb,
                color="#c0392b",
                linewidth=0.8,
                linestyle=(0, (1, 2)),
                label="invalid point" if (c == 0 and k == 0) else None,
            )
    unit = f" [{unit_text(x_axis.unit) or DIMENSIONLESS}]"
    for c in range(max(0, len(columns) - ncols), len(columns)):
        axs[c // ncols][c % ncols].set_xlabel(_plain(f"{x_axis.name}{unit}"), fontsize=8)
        axs[c // ncols][c % ncols].xaxis.set_tick_params(labelbottom=True)
    title = f"Gains of {design.title or design.name} against {x_axis.name}"
    if held:
        title += " (" + ", ".join(held) + ")"
    fig.suptitle(_plain(title), fontsize=9)
    handles, labels = axs[0][0].get_legend_handles_labels()
    if handles:
        fig.legend(handles, labels, loc="lower center", ncol=min(4, len(handles)), fontsize=7)
    height = fig.get_figheight()
    fig.subplots_adjust(
        left=0.09,
        right=0.98,
        top=1 - 0.5 / height,
        bottom=1.0 / height,
        hspace=0.5,
        wspace=0.35,
    )
    return fig


def nominal_gains(s: GainSchedule) -> np.ndarray:
    """The derivation's gains at the nominal parameter values, in the schedule's columns."""
    d = s.derivation
    n_value = float(np.ravel(d.reference.value)[0]) if d.reference is not None else np.nan
    return np.concatenate([np.ravel(d.K.value), np.ravel(d.L.value), [n_value]])


def gain_units(s: GainSchedule) -> list[str]:
    """The unit of each column from the design's signal units: K_ij [u_i/x_j],
    L_ij [x_i/(y_j s)], N [u/r]."""
    plant = s.derivation.design.plant
    n, m, p = s.formulas.shape
    units = [
        ratio_unit(plant.inputs[i].unit, plant.states[j].unit) for i in range(m) for j in range(n)
    ]
    units += [
        ratio_unit(plant.states[i].unit, f"{plant.outputs[j].unit} s".strip())
        for i in range(n)
        for j in range(p)
    ]
    tracked = s.derivation.reference.tracked.unit if s.derivation.reference else ""
    return [*units, ratio_unit(plant.inputs[0].unit, tracked)]


def _mark_nominal(s: GainSchedule, axes: list) -> None:
    """The nominal design on every panel: a star at the nominal gain, a line at the nominal
    value of the first varying parameter; each panel's y-axis gets the gain's unit."""
    design = s.derivation.design
    name = s.axes[0].name
    x0 = float(next(p.value for p in design.parameters if p.name == name))
    for ax, g, unit in zip(axes, nominal_gains(s), gain_units(s)):
        ax.axvline(x0, color="#555555", linewidth=0.8, linestyle=(0, (4, 2)), label=None)
        ax.plot(
            [x0],
            [g],
            linestyle="none",
            marker="*",
            markersize=9,
            color="#c0392b",
            label="nominal design" if ax is axes[0] else None,
        )
        ax.set_ylabel(_plain(f"[{unit or DIMENSIONLESS}]"), fontsize=7)


def _lines(s: GainSchedule) -> tuple[list[tuple[str, tuple]], list[str]]:
    """The lines of each panel (label, index into the grid) and the parameters held."""
    design = s.derivation.design
    lines: list[tuple[str, tuple]] = []
    held = []
    rest: list[int] = []
    for ax in s.axes[2:]:
        nominal = float(next(p.value for p in design.parameters if p.name == ax.name))
        i = int(np.argmin(np.abs(ax.values - nominal)))
        rest.append(i)
        held.append(f"{ax.name} = {value_text(ax.values[i])}")
    if len(s.axes) >= 2:
        second = s.axes[1]
        count = second.values.size
        picks = np.unique(np.linspace(0, count - 1, min(MAX_LINES, count)).round().astype(int))
        for j in picks:
            lines.append(
                (f"{second.name} = {value_text(second.values[j])}", (slice(None), int(j), *rest))
            )
    else:
        lines.append(("", (slice(None),)))
    return lines, held


def _panel_titles(columns: list[str], states: list[str]) -> list[str]:
    """'K_1 (on x)', 'L_2 (into v)', 'N (reference gain)': each gain with the state it acts on."""
    titles = []
    for name in columns:
        parts = name.split("_")
        if parts[0] == "K":
            titles.append(f"{name} (on {states[int(parts[-1]) - 1]})")
        elif parts[0] == "L":
            titles.append(f"{name} (into {states[int(parts[1]) - 1]})")
        else:
            titles.append("N (reference gain)")
    return titles


def _draw_panel(ax, title: str, x: np.ndarray, gain: np.ndarray, valid: np.ndarray, lines, first):
    """One gain's panel: a line per value of the second parameter; returns the invalid x.

    Lines that coincide (:func:`symbolic.render.figure_layout.coincident_pairs`) get markers
    of their own, and the title says so.
    """
    bad_x = set()
    marked = [j for _i, j in coincident_pairs([(x, gain[index]) for _label, index in lines])]
    for k, (label, index) in enumerate(lines):
        ok = valid[index]
        bad_x.update(x[~ok].tolist())
        style = {"marker": "." if x.size <= 25 else None, "markersize": 3}
        if k in marked:
            style = marker_style(marked.index(k), len(marked), x.size)
            style["markevery"] = (marked.index(k) % 2, 2) if x.size <= 25 else style["markevery"]
        ax.plot(
            x,
            gain[index],
            color=_COLOURS[k % len(_COLOURS)],
            linestyle=_STYLES[k % len(_STYLES)],
            linewidth=1.3,
            label=_plain(label) if label and first else None,
            **style,
        )
    ax.set_title(_plain(title + (" (lines coincide)" if marked else "")), fontsize=9)
    ax.grid(True, color="#cccccc", linewidth=0.6)
    ax.tick_params(labelsize=7)
    ax.yaxis.get_offset_text().set_fontsize(7)
    return bad_x


def schedule_summary(s: GainSchedule) -> dict[str, Any]:
    """The machine-readable summary (``gainsmith schedule --json``)."""
    design = s.derivation.design
    table = s.gain_table
    valid = s.valid
    ranges = {}
    for k, name in enumerate(s.gain_columns):
        col = table[valid, k]
        ranges[name] = {"min": float(col.min()), "max": float(col.max())} if col.size else None
    invalid = np.flatnonzero(~valid)
    disagree = np.flatnonzero(s.agrees == 0)

    def point(i: int) -> dict[str, Any]:
        return {
            "row": int(i) + 1,
            "point": {a.name: float(s.points[i, k]) for k, a in enumerate(s.axes)},
            "note": s.notes[i],
        }

    return {
        "design": design.path,
        "sha256": design.sha256,
        "grid_points": s.size,
        "axes": [
            {
                "name": a.name,
                "unit": a.unit,
                "low": float(a.values[0]),
                "high": float(a.values[-1]),
                "points": int(a.values.size),
            }
            for a in s.axes
        ],
        "fixed": {name: value for name, value in s.fixed},
        "gain_ranges": ranges,
        "invalid_points": int(invalid.size),
        "first_invalid": point(int(invalid[0])) if invalid.size else None,
        "singularities_between_points": list(s.singularities),
        "scipy_checked": s.checked,
        "scipy_checked_points": int(np.count_nonzero(s.agrees >= 0)),
        "disagreements": int(disagree.size),
        "first_disagreement": point(int(disagree[0])) if disagree.size else None,
        "passed": s.passed,
    }


def schedule_text(s: GainSchedule, files: Sequence[Path] = ()) -> str:
    """The terminal summary."""
    summary = schedule_summary(s)
    design = s.derivation.design
    lines = [f"{design.title or design.name}: gain schedule", ""]
    grid = " x ".join(f"{a.values.size} {a.name}" for a in s.axes)
    lines.append(f"grid: {s.size} points ({grid})")
    for a in s.axes:
        unit = f" {a.unit}" if a.unit else ""
        lines.append(f"  {a.name}: {value_text(a.values[0])} .. {value_text(a.values[-1])}{unit}")
    if s.fixed:
        lines.append(
            "  held at their values: " + ", ".join(f"{n} = {value_text(v)}" for n, v in s.fixed)
        )
    lines.append("")
    lines.append("gain ranges over the valid points:")
    width = max(len(c) for c in s.gain_columns)
    for name, r in summary["gain_ranges"].items():
        if r is None:
            lines.append(f"  {name.ljust(width)}  (no valid point)")
        else:
            lines.append(
                f"  {name.ljust(width)}  {value_text(r['min']):>12} .. {value_text(r['max']):>12}"
            )
    lines.append("")
    count = summary["invalid_points"]
    if count:
        first = summary["first_invalid"]
        lines.append(
            f"invalid points: {count} of {s.size}; the first is row {first['row']}"
            f" ({s.point_text(first['row'] - 1)}): {first['note']}"
        )
    else:
        lines.append(f"invalid points: none of {s.size}")
    for text in s.singularities:
        lines.append(f"  warning: {text}")
    lines.append(
        f"compared with scipy.signal.place_poles at {s.checked}; invalid points are not compared"
    )
    dis = summary["disagreements"]
    if dis:
        first = summary["first_disagreement"]
        lines.append(
            f"disagreements: {dis}; the first is row {first['row']}"
            f" ({s.point_text(first['row'] - 1)}): {first['note']}"
        )
    else:
        lines.append("disagreements: none")
    for path in files:
        lines.append(f"wrote {path}")
    lines.append("")
    lines.append(
        "schedule valid and checked" if s.passed else "SCHEDULE HAS INVALID OR DISAGREEING POINTS"
    )
    return "\n".join(lines)


@dataclass(frozen=True)
class PublishedSchedule:
    """What ``gainsmith schedule`` did: the schedule, and the files it wrote."""

    schedule: GainSchedule
    files: tuple[Path, ...]

    @property
    def passed(self) -> bool:
        """Every grid point valid and agreeing with SciPy (exit 0, else 1)."""
        return self.schedule.passed


def publish_schedule(
    d: Derivation,
    *,
    out_dir: str | Path,
    points: int = 11,
    vary: Sequence[str] | None = None,
) -> PublishedSchedule:
    """``gainsmith schedule``: evaluate over the grid, write the CSV table and the figure.

    Raises
    ------
    DesignFileError
        See :func:`~symbolic.render.schedule_code.gain_schedule` (the command line exits
        with 2).
    """
    s = gain_schedule(d, points=points, vary=vary)
    stem = f"{d.design.slug}_schedule"
    files = {f"{stem}.csv": schedule_csv(s)}
    files.update(figure_files(schedule_figure(s), stem))
    return PublishedSchedule(s, tuple(publish(files, Path(out_dir))))


def schedule_json(result: PublishedSchedule) -> dict[str, Any]:
    """The summary of ``gainsmith schedule --json``: :func:`schedule_summary` and the files."""
    summary = schedule_summary(result.schedule)
    summary["files"] = [str(p) for p in result.files]
    return summary
