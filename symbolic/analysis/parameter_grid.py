"""The grid of true parameter values over the declared ranges, and design expressions on it.

The robustness study (:mod:`symbolic.analysis.robust`) and the stability of the shipped loop
over the ranges (:mod:`symbolic.analysis.shipped_stability`) evaluate the plant at every
point of a full grid over the parameter ranges (corners included).  The entries are
evaluated by walking their SymPy trees with NumPy operations: nothing is compiled or
executed from text.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..derivation.numeric import evaluate_matrix
from ..model.design import Design
from ..runtime.errors import DesignFileError

__all__ = ["MAX_GRID_POINTS", "ParameterGrid", "evaluate_on_grid", "parameter_grid"]

#: Largest parameter grid accepted (points per parameter ** parameters with a range).
MAX_GRID_POINTS = 200_000


_NUMPY_FUNCTIONS = {
    sp.sin: np.sin,
    sp.cos: np.cos,
    sp.tan: np.tan,
    sp.exp: np.exp,
    sp.log: np.log,
    sp.atan: np.arctan,
    sp.sinh: np.sinh,
    sp.cosh: np.cosh,
    sp.tanh: np.tanh,
    sp.Abs: np.abs,
}


class _NotVectorised(Exception):
    pass


def _vector(expr: sp.Expr, env: Mapping[sp.Symbol, np.ndarray]):
    """Evaluate a SymPy tree on arrays by walking it (the design grammar's node types only)."""
    if expr.is_Symbol:
        return env[expr]
    if expr.is_Number or expr.is_NumberSymbol:
        return float(expr)
    if expr.is_Add:
        out = 0.0
        for a in expr.args:
            out = out + _vector(a, env)
        return out
    if expr.is_Mul:
        out = 1.0
        for a in expr.args:
            out = out * _vector(a, env)
        return out
    if expr.is_Pow:
        base, power = expr.args
        b = _vector(base, env)
        if power.is_Integer:
            return np.asarray(b, dtype=float) ** int(power)
        if power == sp.Rational(1, 2):
            return np.sqrt(b)
        return np.power(b, _vector(power, env))
    func = _NUMPY_FUNCTIONS.get(expr.func)
    if func is not None and len(expr.args) == 1:
        return func(_vector(expr.args[0], env))
    raise _NotVectorised(type(expr).__name__)


def evaluate_on_grid(
    M: sp.MatrixBase, symbols: Sequence[sp.Symbol], values: np.ndarray
) -> np.ndarray:
    """Evaluate a SymPy matrix at many parameter points.

    Parameters
    ----------
    M : Matrix
        Entries built by the design-file parser (numbers, parameters, + − × ÷,
        powers and the allowed functions).
    symbols : sequence of Symbol
        Column order of ``values``.
    values : (P, k) array
        One row per point.

    Returns
    -------
    (P, rows, cols) array
        NaN where an entry is not a finite real number.

    Notes
    -----
    The expression tree is walked with NumPy operations; nothing is
    compiled or executed from text.  An entry of an unexpected kind falls
    back to exact substitution point by point.
    """
    values = np.asarray(values, dtype=float)
    P = values.shape[0]
    env = {sym: values[:, i] for i, sym in enumerate(symbols)}
    out = np.empty((P,) + tuple(M.shape), dtype=float)
    for i in range(M.shape[0]):
        for j in range(M.shape[1]):
            e = M[i, j]
            try:
                with np.errstate(all="ignore"):
                    v = _vector(e, env)
                out[:, i, j] = np.broadcast_to(np.real_if_close(np.asarray(v, dtype=float)), (P,))
            except (_NotVectorised, TypeError, KeyError):
                for r in range(P):
                    sub = {
                        sym: sp.Rational(repr(float(values[r, c]))) for c, sym in enumerate(symbols)
                    }
                    out[r, i, j] = evaluate_matrix(sp.Matrix([[e]]), sub)[0, 0]
    out[~np.isfinite(out)] = np.nan
    return out


@dataclass(frozen=True)
class ParameterGrid:
    """Points of the mismatch study: a full grid over the ranges, then the nominal point.

    ``values[i, j]`` is parameter ``names[j]`` at point i; the last row is
    the nominal point.  The grid part has ``shape`` (one axis per varied
    parameter, C order) and contains every corner of the box.
    """

    names: tuple[str, ...]
    symbols: tuple[sp.Symbol, ...]
    varied: tuple[str, ...]
    axes: tuple[np.ndarray, ...]  # the values of each varied parameter
    shape: tuple[int, ...]
    values: np.ndarray
    nominal: np.ndarray

    @property
    def size(self) -> int:
        """Number of grid points (without the nominal point)."""
        return int(np.prod(self.shape)) if self.shape else 0

    @property
    def nominal_index(self) -> int:
        return self.values.shape[0] - 1

    def point(self, i: int) -> dict[str, float]:
        """The parameter values of point i by name."""
        return {n: float(v) for n, v in zip(self.names, self.values[i], strict=True)}


def parameter_grid(design: Design, points: int = 5) -> ParameterGrid:
    """The grid of true parameter values: ``points`` per range, corners included.

    Raises
    ------
    DesignFileError
        When ``points`` < 2 or the grid would exceed :data:`MAX_GRID_POINTS`.
    """
    if isinstance(points, bool) or not isinstance(points, int | np.integer) or points < 2:
        raise DesignFileError(
            f"expected at least 2 points per parameter range, got {points!r}",
            design.path,
            "--points",
        )
    params = design.parameters
    varied = [p for p in params if p.range is not None]
    k = len(varied)
    total = points**k if k else 0
    if total > MAX_GRID_POINTS:
        raise DesignFileError(
            f"the mismatch grid would have {points}^{k} = {total} points ({k} parameters with a"
            f" range); the limit is {MAX_GRID_POINTS}: use fewer --points",
            design.path,
            "--points",
        )
    nominal = np.array([float(p.value) for p in params])
    axes = tuple(np.linspace(float(p.range[0]), float(p.range[1]), points) for p in varied)
    if k:
        mesh = np.meshgrid(*axes, indexing="ij")
        grid = np.tile(nominal, (total, 1))
        index = {p.name: i for i, p in enumerate(params)}
        for p, m in zip(varied, mesh, strict=True):
            grid[:, index[p.name]] = m.ravel()
        values = np.vstack([grid, nominal[None, :]])
    else:
        values = nominal[None, :].copy()
    return ParameterGrid(
        names=tuple(p.name for p in params),
        symbols=tuple(p.symbol for p in params),
        varied=tuple(p.name for p in varied),
        axes=axes,
        shape=tuple(points for _ in varied),
        values=values,
        nominal=nominal,
    )
