"""Gain schedules: the closed forms evaluated over a grid of parameter values.

``gainsmith schedule FILE`` evaluates K, L and the reference gain N
(vectorised, :func:`symbolic.render.gain_evaluator.gain_evaluator`) over a grid of the
parameters that have a ``range`` (or those named by ``--vary``), the others at
their values, and writes ``<slug>_schedule.csv`` and a figure
(``<slug>_schedule.png`` / ``.pdf``).  Every grid point is classified:

* **invalid** (``valid = 0``): a validity factor is zero there (the plant is
  uncontrollable, unobservable, has no reference gain, or a denominator
  vanishes) or a gain is not finite.  Its gains are left empty.
* **next to a singularity** (``valid = 0``, gains kept): a validity factor
  changes sign between this point and its neighbour on the grid, so a point
  where the formulas break down lies between them; interpolating the table
  across it would be wrong.
* **SciPy disagrees** (``scipy_agrees = 0``): at the checked points (all
  points up to 2000, else 2000 evenly spread ones) K and L are compared with
  ``scipy.signal.place_poles`` and N with the inverse of the closed loop's
  steady-state gain, at a relative tolerance of 1e-8.

Exit code 0 when every point is valid and every check agrees, 1 otherwise.

References
----------
.. [1] A. L. Tits and Y. Yang, "Globally convergent algorithms for robust pole
   assignment by state feedback", *IEEE Trans. Automatic Control*
   41(10):1432-1452, 1996 (the method of ``scipy.signal.place_poles``).
.. [2] W. J. Rugh and J. S. Shamma, "Research on gain scheduling",
   *Automatica* 36(10):1401-1425, 2000 (gain scheduling: gains designed at
   frozen parameter values and interpolated between them; the table is only
   as good as its validity between grid points).
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
import sympy as sp
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..derivation.numeric import check_eigenvalues, scipy_placement
from ..derivation.pipeline import derive
from ..model.design import Design
from ..model.labels import gain_label
from ..model.results import Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..render.code_printers import PythonPrinter
from ..render.figures import figure_files
from ..render.gain_evaluator import gain_evaluator
from ..render.gain_formulas import CODE_OK, CODE_WORDS, GainFormulas, gain_formulas
from ..runtime.errors import DesignFileError

__all__ = [
    "GainSchedule",
    "ScheduleAxis",
    "gain_schedule",
    "run_schedule",
    "schedule_csv",
    "schedule_figure",
    "schedule_summary",
    "schedule_text",
    "MAX_GRID_POINTS",
    "MAX_SCIPY_CHECKS",
]

#: Largest grid evaluated (memory: about 100 bytes per point per state).
MAX_GRID_POINTS = 1_000_000
#: SciPy is called at every grid point up to this many, else at this many evenly spread points.
MAX_SCIPY_CHECKS = 2000
MIN_POINTS, MAX_POINTS = 2, 1001
#: Lines per panel of the figure (values of the second varying parameter).
MAX_LINES = 6

_FLAG_COLUMNS = ("N", "valid", "scipy_agrees", "note")


# --------------------------------------------------------------------------
# Result objects
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class ScheduleAxis:
    """One varying parameter: its grid values."""

    name: str
    unit: str
    values: np.ndarray  # (points,)


@dataclass(frozen=True)
class GainSchedule:
    """The gains over the grid, with the verdict at every point.

    Points are in row-major order of the axes (the last axis varies fastest).
    """

    derivation: Derivation
    formulas: GainFormulas
    axes: tuple[ScheduleAxis, ...]
    fixed: tuple[tuple[str, float], ...]  # parameters held at their values
    points: np.ndarray  # (P, k) values of the varying parameters
    K: np.ndarray  # (P, m, n), NaN where code != 0
    L: np.ndarray  # (P, n, p)
    N: np.ndarray  # (P,)
    code: np.ndarray  # (P,) 0 valid, else the export's return code
    near_singularity: np.ndarray  # (P,) bool: a validity factor changes sign next to it
    agrees: np.ndarray  # (P,) int8: 1 agrees with SciPy, 0 disagrees, -1 not checked
    notes: tuple[str, ...]  # (P,) one note per point ("" when all is well)
    checked: str  # which points were checked against SciPy, in words
    singularities: tuple[str, ...]  # one sentence per factor that changes sign on the grid

    @property
    def size(self) -> int:
        return int(self.points.shape[0])

    @property
    def valid(self) -> np.ndarray:
        return (self.code == CODE_OK) & ~self.near_singularity

    @property
    def passed(self) -> bool:
        return bool(self.valid.all() and not np.any(self.agrees == 0))

    @property
    def gain_columns(self) -> list[str]:
        n, m, p = self.formulas.shape
        k = [gain_label("K", i, j, (m, n)) for i in range(m) for j in range(n)]
        ell = [gain_label("L", i, j, (n, p)) for i in range(n) for j in range(p)]
        return [*k, *ell, "N"]

    @property
    def gain_table(self) -> np.ndarray:
        """(P, columns): K row-major, L row-major, N."""
        P = self.size
        return np.column_stack([self.K.reshape(P, -1), self.L.reshape(P, -1), self.N])

    def point_text(self, index: int) -> str:
        return ", ".join(
            f"{a.name} = {_num(self.points[index, k])}" for k, a in enumerate(self.axes)
        )


# --------------------------------------------------------------------------
# Validation of the request
# --------------------------------------------------------------------------
def _axes_for(design: Design, points: int, vary: Sequence[str] | None) -> list[ScheduleAxis]:
    if isinstance(points, bool) or not isinstance(points, int | np.integer):
        raise DesignFileError(
            f"expected a whole number of points, got {points!r}", design.path, "--points"
        )
    if not MIN_POINTS <= points <= MAX_POINTS:
        raise DesignFileError(
            f"expected {MIN_POINTS} to {MAX_POINTS} grid points per parameter, got {points}",
            design.path,
            "--points",
        )
    by_name = {p.name: p for p in design.parameters}
    if vary:
        names: list[str] = []
        for name in vary:
            if name not in by_name:
                known = ", ".join(by_name) or "none"
                raise DesignFileError(
                    f"no parameter named {name!r} (the parameters are: {known})",
                    design.path,
                    f"--vary {name}",
                )
            if by_name[name].range is None:
                raise DesignFileError(
                    f"parameter {name} has no range: add range = [low, high] to vary it",
                    design.path,
                    f"parameters.{name}.range",
                )
            if name not in names:
                names.append(name)
    else:
        names = [p.name for p in design.parameters if p.range is not None]
        if not names:
            raise DesignFileError(
                "no parameter has a range: nothing to vary (add range = [low, high] to a"
                " parameter)",
                design.path,
                "parameters",
            )
    total = points ** len(names)
    if total > MAX_GRID_POINTS:
        product = " x ".join([str(points)] * len(names))
        raise DesignFileError(
            f"the grid would have {product} = {total} points, more than the limit of"
            f" {MAX_GRID_POINTS}: use fewer --points or --vary fewer parameters",
            design.path,
            "--points",
        )
    axes = []
    for name in names:
        prm = by_name[name]
        assert prm.range is not None
        lo, hi = float(prm.range[0]), float(prm.range[1])
        values = np.linspace(lo, hi, points)
        values[0], values[-1] = lo, hi  # exactly the ends of the range
        axes.append(ScheduleAxis(name, prm.unit, values))
    return axes


# --------------------------------------------------------------------------
# The schedule
# --------------------------------------------------------------------------
def _plant_stacks(design: Design, values: dict[str, np.ndarray], count: int):
    """A, B, C, D at ``count`` points: arrays (count, rows, cols), vectorised.

    ``lambdify`` with dummy arguments: no text of the design file reaches the
    generated function.
    """
    symbols = [p.symbol for p in design.parameters]
    args = [
        np.broadcast_to(np.asarray(values[p.name], dtype=float), (count,))
        for p in design.parameters
    ]
    mats = [sp.Matrix(getattr(design.plant, name)) for name in ("A", "B", "C", "D")]
    entries = [e for M in mats for e in M]
    f = sp.lambdify(
        symbols, entries, "numpy", printer=PythonPrinter(), dummify=True, docstring_limit=0
    )
    with np.errstate(all="ignore"):
        got = f(*args)
    out = []
    k = 0
    for M in mats:
        stack = np.empty((count,) + M.shape)
        for i in range(M.shape[0]):
            for j in range(M.shape[1]):
                stack[:, i, j] = got[k]
                k += 1
        out.append(stack)
    return out


def _singularities(
    formulas: GainFormulas, factor_values: np.ndarray, shape: tuple[int, ...], axes
) -> tuple[np.ndarray, list[str], dict[int, str]]:
    """Points next to a sign change of a validity factor, and one sentence per factor."""
    near = np.zeros(shape, dtype=bool)
    sentences: list[str] = []
    notes: dict[int, str] = {}
    for k, factor in enumerate(formulas.factors):
        f = factor_values[k].reshape(shape)
        sign = np.sign(f)
        found = None
        for ax, axis in enumerate(axes):
            a = np.take(sign, range(0, shape[ax] - 1), axis=ax)
            b = np.take(sign, range(1, shape[ax]), axis=ax)
            change = (a * b) < 0  # both nonzero and finite, opposite signs
            if not change.any():
                continue
            lower = np.zeros(shape, dtype=bool)
            upper = np.zeros(shape, dtype=bool)
            idx_lo = [slice(None)] * len(shape)
            idx_hi = [slice(None)] * len(shape)
            idx_lo[ax] = slice(0, shape[ax] - 1)
            idx_hi[ax] = slice(1, shape[ax])
            lower[tuple(idx_lo)] = change
            upper[tuple(idx_hi)] = change
            near |= lower | upper
            for flat in np.flatnonzero((lower | upper).ravel()):
                notes.setdefault(
                    int(flat),
                    f"{CODE_WORDS[factor.code]} where {factor.condition}: that happens between"
                    f" this point and its neighbour in {axis.name}",
                )
            if found is None:
                first = np.argwhere(change)[0]
                i = int(first[ax])
                found = (axis.name, axis.values[i], axis.values[i + 1])
        if found is not None:
            name, lo, hi = found
            sentences.append(
                f"{factor.condition} ({CODE_WORDS[factor.code]}) lies between grid points, e.g."
                f" between {name} = {_num(lo)} and {name} = {_num(hi)}: the formulas break down"
                " there and the table must not be interpolated across it"
            )
    return near.ravel(), sentences, notes


def _check_indices(total: int) -> tuple[np.ndarray, str]:
    if total <= MAX_SCIPY_CHECKS:
        return np.arange(total), f"every grid point ({total})"
    idx = np.unique(np.linspace(0, total - 1, MAX_SCIPY_CHECKS).round().astype(np.int64))
    return idx, f"{idx.size} evenly spread points of {total}"


def _relative(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.linalg.norm(a - b) / max(float(np.linalg.norm(b)), 1e-300))


def _scipy_agreement(
    d: Derivation,
    formulas: GainFormulas,
    values: dict[str, np.ndarray],
    indices: np.ndarray,
    K: np.ndarray,
    L: np.ndarray,
    N: np.ndarray,
) -> tuple[np.ndarray, dict[int, str]]:
    """1/0 per checked point (closed form vs scipy.signal.place_poles), with notes."""
    design = d.design
    count = indices.size
    picked = {name: (np.asarray(v)[indices] if np.ndim(v) else v) for name, v in values.items()}
    A, B, C, D = _plant_stacks(design, picked, count)
    ctrl = np.asarray(formulas.controller_poles)
    obs = np.asarray(formulas.observer_poles)
    track = design.tracking.output
    result = np.ones(count, dtype=np.int8)
    notes: dict[int, str] = {}
    for k, point in enumerate(indices):
        problems: list[str] = []
        ok = _compare_gain(A[k], B[k], K[point], ctrl, "K", problems)
        # the observer gain on the dual pair: place_poles(A', C', p).gain_matrix = L'
        ok &= _compare_gain(A[k].T, C[k].T, L[point].T, obs, "L", problems)
        # N against the inverse of the closed loop's steady-state gain
        Acl = A[k] - B[k] @ K[point]
        Ct, Dt = C[k][track : track + 1], D[k][track : track + 1]
        try:
            dc = ((Ct - Dt @ K[point]) @ np.linalg.solve(-Acl, B[k]) + Dt).item()
        except np.linalg.LinAlgError:
            dc = math.nan
        if not abs(N[point] * dc - 1.0) <= GAIN_TOLERANCE:
            problems.append(f"N: steady-state gain from r to the output is {N[point] * dc:.9g}")
            ok = False
        result[k] = 1 if ok else 0
        if problems:
            notes[int(point)] = "; ".join(problems)
    return result, notes


def _compare_gain(A, B, G, poles, name: str, problems: list[str]) -> bool:
    """Compare a gain with place_poles; where SciPy refuses, check the eigenvalues instead."""
    reference, how = scipy_placement(A, B, poles)
    if reference is not None:
        diff = _relative(G, reference)
        if diff <= GAIN_TOLERANCE:
            return True
        problems.append(f"{name} differs from scipy.signal.place_poles by {diff:.1e} (relative)")
        return False
    verdict = check_eigenvalues(
        A - B @ G, poles, terms=(A, (B, G)), weights=np.abs(A) + np.abs(B) @ np.abs(G)
    )
    if verdict.passed:
        problems.append(f"{name}: {how}; the eigenvalues of the closed form's loop match instead")
        return True
    problems.append(f"{name}: {how}; the closed form's poles are off by {verdict.residual:.1e}")
    return False


def gain_schedule(
    d: Derivation, *, points: int = 11, vary: Sequence[str] | None = None
) -> GainSchedule:
    """Evaluate the closed-form gains over a grid of parameter values and check them.

    Parameters
    ----------
    d : Derivation
        With closed forms (single input and output).
    points : int
        Grid points per varying parameter, 2 to 1001 (ends of the range included).
    vary : sequence of str, optional
        The parameters to vary (each must have a ``range``); default: every
        parameter with a range.

    Returns
    -------
    GainSchedule

    Raises
    ------
    DesignFileError
        No closed form; an unknown ``--vary`` name or one without a range;
        ``points`` out of bounds; a grid larger than :data:`MAX_GRID_POINTS`.
    """
    design = d.design
    axes = _axes_for(design, points, vary)
    formulas = gain_formulas(d)
    shape = tuple(a.values.size for a in axes)
    mesh = np.meshgrid(*[a.values for a in axes], indexing="ij")
    flat = [g.ravel() for g in mesh]
    total = int(np.prod(shape))
    varying = {a.name for a in axes}
    values: dict[str, np.ndarray] = {}
    fixed = []
    for prm in design.parameters:
        if prm.name in varying:
            values[prm.name] = flat[[a.name for a in axes].index(prm.name)]
        else:
            values[prm.name] = np.asarray(float(prm.value))
            fixed.append((prm.name, float(prm.value)))
    got = gain_evaluator(formulas)(values)
    assert got.K is not None and got.L is not None and got.reference_gain is not None
    code = np.broadcast_to(got.code, (total,)).copy()
    K = np.broadcast_to(got.K, (total,) + got.K.shape[-2:]).copy()
    L = np.broadcast_to(got.L, (total,) + got.L.shape[-2:]).copy()
    N = np.broadcast_to(got.reference_gain, (total,)).copy()
    index = np.broadcast_to(got.factor_index, (total,))
    factor_values = np.broadcast_to(got.factor_values, (len(formulas.factors), total))

    notes = [""] * total
    for point in np.flatnonzero(code != CODE_OK):
        k = int(index[point])
        if k >= 0:
            f = formulas.factors[k]
            notes[point] = f"{CODE_WORDS[f.code]}: {f.condition}"
        else:
            notes[point] = "not finite: a gain is infinite or NaN at this point"
    near, singular, near_notes = _singularities(formulas, factor_values, shape, axes)
    near &= code == CODE_OK
    for point, text in near_notes.items():
        if near[point]:
            notes[point] = text

    agrees = np.full(total, -1, dtype=np.int8)
    indices, checked = _check_indices(total)
    indices = indices[code[indices] == CODE_OK]
    if indices.size:
        result, check_notes = _scipy_agreement(d, formulas, values, indices, K, L, N)
        agrees[indices] = result
        for point, text in check_notes.items():
            notes[point] = "; ".join(t for t in (notes[point], text) if t)
    return GainSchedule(
        derivation=d,
        formulas=formulas,
        axes=tuple(axes),
        fixed=tuple(fixed),
        points=np.column_stack(flat),
        K=K,
        L=L,
        N=N,
        code=code,
        near_singularity=near,
        agrees=agrees,
        notes=tuple(notes),
        checked=checked,
        singularities=tuple(singular),
    )


# --------------------------------------------------------------------------
# Renderers
# --------------------------------------------------------------------------
def _num(x: float) -> str:
    x = float(x)
    if not math.isfinite(x):
        return str(x)
    return f"{x:.6g}"


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
    lines: list[tuple[str, tuple]] = []
    held = []
    rest: list[int] = []
    for ax in s.axes[2:]:
        nominal = float(next(p.value for p in design.parameters if p.name == ax.name))
        i = int(np.argmin(np.abs(ax.values - nominal)))
        rest.append(i)
        held.append(f"{ax.name} = {_num(ax.values[i])}")
    if len(s.axes) >= 2:
        second = s.axes[1]
        count = second.values.size
        picks = np.unique(np.linspace(0, count - 1, min(MAX_LINES, count)).round().astype(int))
        for j in picks:
            lines.append(
                (f"{second.name} = {_num(second.values[j])}", (slice(None), int(j), *rest))
            )
    else:
        lines.append(("", (slice(None),)))
    states = [sig.name for sig in design.plant.states]
    n, m, p = s.formulas.shape
    titles = []
    for name in columns:
        parts = name.split("_")
        if parts[0] == "K":
            titles.append(f"{name} (on {states[int(parts[-1]) - 1]})")
        elif parts[0] == "L":
            titles.append(f"{name} (into {states[int(parts[1]) - 1]})")
        else:
            titles.append("N (reference gain)")
    ncols = 3 if len(columns) > 4 else 2
    nrows = math.ceil(len(columns) / ncols)
    fig = Figure(figsize=(3.2 * ncols, 2.1 * nrows + 1.4), dpi=100)
    FigureCanvasAgg(fig)
    axs = fig.subplots(nrows, ncols, squeeze=False, sharex=True)
    styles = ["-", (0, (6, 3)), (0, (2, 2)), (0, (6, 2, 1, 2)), (0, (1, 1)), (0, (8, 2, 2, 2))]
    greys = ["#000000", "#1f5fa8", "#c0392b", "#6a3d9a", "#2e7d32", "#8c6d1f"]
    bad_x = set()
    for c in range(len(columns)):
        ax = axs[c // ncols][c % ncols]
        for k, (label, index) in enumerate(lines):
            y = table[index + (c,)]
            ok = valid[index]
            bad_x.update(x_axis.values[~ok].tolist())
            ax.plot(
                x_axis.values,
                y,
                color=greys[k % len(greys)],
                linestyle=styles[k % len(styles)],
                linewidth=1.3,
                marker="." if x_axis.values.size <= 25 else None,
                markersize=3,
                label=_plain(label) if label and c == 0 else None,
            )
        ax.set_title(_plain(titles[c]), fontsize=9)
        ax.grid(True, color="#cccccc", linewidth=0.6)
        ax.tick_params(labelsize=7)
        ax.yaxis.get_offset_text().set_fontsize(7)
    for c in range(len(columns), nrows * ncols):
        axs[c // ncols][c % ncols].set_visible(False)
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
    unit = f" [{x_axis.unit}]" if x_axis.unit else ""
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
        lines.append(f"  {a.name}: {_num(a.values[0])} .. {_num(a.values[-1])}{unit}")
    if s.fixed:
        lines.append("  held at their values: " + ", ".join(f"{n} = {_num(v)}" for n, v in s.fixed))
    lines.append("")
    lines.append("gain ranges over the valid points:")
    width = max(len(c) for c in s.gain_columns)
    for name, r in summary["gain_ranges"].items():
        if r is None:
            lines.append(f"  {name.ljust(width)}  (no valid point)")
        else:
            lines.append(f"  {name.ljust(width)}  {_num(r['min']):>12} .. {_num(r['max']):>12}")
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


def run_schedule(
    design: Design,
    *,
    out_dir: str | Path,
    points: int = 11,
    vary: Sequence[str] | None = None,
    as_json: bool = False,
) -> int:
    """``gainsmith schedule``: derive, evaluate over the grid, write CSV and figure, summarise.

    Returns
    -------
    int
        0 when every grid point is valid and agrees with SciPy, 1 otherwise.

    Raises
    ------
    DesignFileError
        See :func:`gain_schedule` (the command line exits with 2).
    """
    _axes_for(design, points, vary)  # refuse a bad request before the derivation
    d = derive(design)
    s = gain_schedule(d, points=points, vary=vary)
    stem = f"{design.slug}_schedule"
    files = {f"{stem}.csv": schedule_csv(s)}
    files.update(figure_files(schedule_figure(s), stem))
    from ..runtime.publish import publish

    written = publish(files, Path(out_dir))
    if as_json:
        from ..render.report import dumps

        summary = schedule_summary(s)
        summary["files"] = [str(p) for p in written]
        print(dumps(summary))
    else:
        print(schedule_text(s, written))
    return 0 if s.passed else 1
