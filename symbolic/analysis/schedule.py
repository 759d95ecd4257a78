"""Gain schedules: the closed forms evaluated over a grid of parameter values.

``gainsmith schedule FILE`` evaluates K, L and the reference gain N over a grid of the
parameters that have a ``range`` (or those named by ``--vary``), the others at their
values, and writes ``<slug>_schedule.csv`` and a figure (``<slug>_schedule.png`` /
``.pdf``).  Every grid point is classified:

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

This module holds the grid, the result and the classification of the points; the gains
and validity factors are evaluated with the exported code
(:func:`symbolic.render.schedule_code.gain_schedule`, through
:func:`symbolic.render.export.gain_evaluator`), and the table, the figure and the summary
are written by :mod:`symbolic.render.schedule_pages`.

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

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..derivation.numeric import check_eigenvalues, scipy_placement
from ..model.design import Design
from ..model.labels import gain_label
from ..model.results import Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime.errors import DesignFileError

__all__ = [
    "GainSchedule",
    "ScheduleAxis",
    "ScheduleGrid",
    "check_indices",
    "scipy_agreement",
    "schedule_axes",
    "schedule_grid",
    "singular_points",
    "value_text",
    "MAX_GRID_POINTS",
    "MAX_SCIPY_CHECKS",
]

#: Largest grid evaluated (memory: about 100 bytes per point per state).
MAX_GRID_POINTS = 1_000_000
#: SciPy is called at every grid point up to this many, else at this many evenly spread points.
MAX_SCIPY_CHECKS = 2000
MIN_POINTS, MAX_POINTS = 2, 1001


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
    formulas: Any  # the symbolic.render.export.GainFormulas evaluated
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
    valid: np.ndarray  # (P,) bool: code 0 and not next to a singularity

    @property
    def size(self) -> int:
        return int(self.points.shape[0])

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
            f"{a.name} = {value_text(self.points[index, k])}" for k, a in enumerate(self.axes)
        )


def value_text(x: float) -> str:
    """A grid value or gain as the schedule writes it: 6 significant figures."""
    x = float(x)
    if not math.isfinite(x):
        return str(x)
    return f"{x:.6g}"


# --------------------------------------------------------------------------
# Validation of the request
# --------------------------------------------------------------------------
def schedule_axes(design: Design, points: int, vary: Sequence[str] | None) -> list[ScheduleAxis]:
    """The axes of the grid: ``points`` values over the range of each parameter varied.

    Raises
    ------
    DesignFileError
        An unknown ``--vary`` name or one without a range; no parameter with a range;
        ``points`` out of bounds; a grid larger than :data:`MAX_GRID_POINTS`.
    """
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
# The grid
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class ScheduleGrid:
    """Every point of the grid: the varying parameters as columns, every parameter by name."""

    shape: tuple[int, ...]  # one axis per varying parameter
    points: np.ndarray  # (P, k) values of the varying parameters, row-major
    values: dict[str, np.ndarray]  # every parameter: (P,) when varying, else its value
    fixed: tuple[tuple[str, float], ...]  # parameters held at their values

    @property
    def size(self) -> int:
        return int(np.prod(self.shape))


def schedule_grid(design: Design, axes: Sequence[ScheduleAxis]) -> ScheduleGrid:
    """The full grid over ``axes`` (row-major: the last axis varies fastest)."""
    shape = tuple(a.values.size for a in axes)
    mesh = np.meshgrid(*[a.values for a in axes], indexing="ij")
    flat = [g.ravel() for g in mesh]
    varying = {a.name for a in axes}
    values: dict[str, np.ndarray] = {}
    fixed = []
    for prm in design.parameters:
        if prm.name in varying:
            values[prm.name] = flat[[a.name for a in axes].index(prm.name)]
        else:
            values[prm.name] = np.asarray(float(prm.value))
            fixed.append((prm.name, float(prm.value)))
    return ScheduleGrid(shape, np.column_stack(flat), values, tuple(fixed))


# --------------------------------------------------------------------------
# Classification of the points
# --------------------------------------------------------------------------
def singular_points(
    factors: Sequence[tuple[str, str]],
    factor_values: np.ndarray,
    shape: tuple[int, ...],
    axes: Sequence[ScheduleAxis],
) -> tuple[np.ndarray, list[str], dict[int, str]]:
    """Points next to a sign change of a validity factor, and one sentence per factor.

    ``factors`` holds, per validity factor, what breaks when it vanishes and the condition
    (``("uncontrollable", "kf = 0")``); ``factor_values`` its value at every point.
    """
    near = np.zeros(shape, dtype=bool)
    sentences: list[str] = []
    notes: dict[int, str] = {}
    for k, (broken, condition) in enumerate(factors):
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
                    f"{broken} where {condition}: that happens between"
                    f" this point and its neighbour in {axis.name}",
                )
            if found is None:
                first = np.argwhere(change)[0]
                i = int(first[ax])
                found = (axis.name, axis.values[i], axis.values[i + 1])
        if found is not None:
            name, lo, hi = found
            sentences.append(
                f"{condition} ({broken}) lies between grid points, e.g."
                f" between {name} = {value_text(lo)} and {name} = {value_text(hi)}: the formulas"
                " break down"
                " there and the table must not be interpolated across it"
            )
    return near.ravel(), sentences, notes


def check_indices(total: int) -> tuple[np.ndarray, str]:
    """The points compared with SciPy: all up to :data:`MAX_SCIPY_CHECKS`, else that many
    evenly spread ones; and which, in words."""
    if total <= MAX_SCIPY_CHECKS:
        return np.arange(total), f"every grid point ({total})"
    idx = np.unique(np.linspace(0, total - 1, MAX_SCIPY_CHECKS).round().astype(np.int64))
    return idx, f"{idx.size} evenly spread points of {total}"


def _relative(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.linalg.norm(a - b) / max(float(np.linalg.norm(b)), 1e-300))


def scipy_agreement(
    d: Derivation,
    plant: Sequence[np.ndarray],
    indices: np.ndarray,
    gains: tuple[np.ndarray, np.ndarray, np.ndarray],
    poles: tuple[Sequence[complex], Sequence[complex]],
) -> tuple[np.ndarray, dict[int, str]]:
    """1/0 per checked point (closed form vs scipy.signal.place_poles), with notes.

    ``plant`` holds A, B, C, D at the checked points (arrays (count, rows, cols)),
    ``indices`` those points' rows in ``gains`` = (K, L, N) over the whole grid, and
    ``poles`` the controller and observer poles of the formulas.
    """
    A, B, C, D = plant
    K, L, N = gains
    count = indices.size
    ctrl = np.asarray(poles[0])
    obs = np.asarray(poles[1])
    track = d.design.tracking.output
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
