"""The gain schedule evaluated with the exported code: the closed forms at every grid point.

The gains and their validity factors are evaluated by the same vectorised code as
``gainsmith export`` (:func:`symbolic.render.export.gain_evaluator`), and the plant at the
points checked against SciPy by ``lambdify`` with the export's printer; the points are
classified by :mod:`symbolic.analysis.schedule`.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import sympy as sp

from ..analysis.schedule import (
    GainSchedule,
    ScheduleGrid,
    check_indices,
    schedule_axes,
    schedule_grid,
    scipy_agreement,
    singular_points,
)
from ..model.design import Design
from ..model.results import Derivation
from .code_printers import PythonPrinter
from .gain_evaluator import gain_evaluator
from .gain_formulas import CODE_OK, CODE_WORDS, GainFormulas, gain_formulas

__all__ = ["gain_schedule", "plant_stacks"]


def plant_stacks(design: Design, values: dict[str, np.ndarray], count: int):
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
        ``points`` out of bounds; a grid larger than
        :data:`~symbolic.analysis.schedule.MAX_GRID_POINTS`.
    """
    axes = schedule_axes(d.design, points, vary)
    formulas = gain_formulas(d)
    grid = schedule_grid(d.design, axes)
    total = grid.size
    got = gain_evaluator(formulas)(grid.values)
    assert got.K is not None and got.L is not None and got.reference_gain is not None
    code = np.broadcast_to(got.code, (total,)).copy()
    K = np.broadcast_to(got.K, (total,) + got.K.shape[-2:]).copy()
    L = np.broadcast_to(got.L, (total,) + got.L.shape[-2:]).copy()
    N = np.broadcast_to(got.reference_gain, (total,)).copy()
    index = np.broadcast_to(got.factor_index, (total,))
    factor_values = np.broadcast_to(got.factor_values, (len(formulas.factors), total))

    notes = _invalid_notes(formulas, code, index)
    factors = [(CODE_WORDS[f.code], f.condition) for f in formulas.factors]
    near, singular, near_notes = singular_points(factors, factor_values, grid.shape, axes)
    near &= code == CODE_OK
    for point, text in near_notes.items():
        if near[point]:
            notes[point] = text
    agrees, checked = _checked_against_scipy(d, formulas, grid, code, (K, L, N), notes)
    return GainSchedule(
        derivation=d,
        formulas=formulas,
        axes=tuple(axes),
        fixed=grid.fixed,
        points=grid.points,
        K=K,
        L=L,
        N=N,
        code=code,
        near_singularity=near,
        agrees=agrees,
        notes=tuple(notes),
        checked=checked,
        singularities=tuple(singular),
        valid=(code == CODE_OK) & ~near,
    )


def _invalid_notes(formulas: GainFormulas, code: np.ndarray, index: np.ndarray) -> list[str]:
    """One note per point: why the exported code refused it ("" where it did not)."""
    notes = [""] * code.size
    for point in np.flatnonzero(code != CODE_OK):
        k = int(index[point])
        if k >= 0:
            f = formulas.factors[k]
            notes[point] = f"{CODE_WORDS[f.code]}: {f.condition}"
        else:
            notes[point] = "not finite: a gain is infinite or NaN at this point"
    return notes


def _checked_against_scipy(
    d: Derivation,
    formulas: GainFormulas,
    grid: ScheduleGrid,
    code: np.ndarray,
    gains: tuple[np.ndarray, np.ndarray, np.ndarray],
    notes: list[str],
) -> tuple[np.ndarray, str]:
    """1 / 0 / −1 (not checked) per point against SciPy, and which points were checked.

    The notes of the points that disagree (or that SciPy refused) are appended to ``notes``.
    """
    agrees = np.full(grid.size, -1, dtype=np.int8)
    indices, checked = check_indices(grid.size)
    indices = indices[code[indices] == CODE_OK]
    if indices.size:
        picked = {
            name: (np.asarray(v)[indices] if np.ndim(v) else v) for name, v in grid.values.items()
        }
        plant = plant_stacks(d.design, picked, indices.size)
        poles = (formulas.controller_poles, formulas.observer_poles)
        result, check_notes = scipy_agreement(d, plant, indices, gains, poles)
        agrees[indices] = result
        for point, text in check_notes.items():
            notes[point] = "; ".join(t for t in (notes[point], text) if t)
    return agrees, checked
