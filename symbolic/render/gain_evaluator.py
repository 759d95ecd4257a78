"""The exported gain formulas evaluated vectorised over many parameter points.

:func:`gain_evaluator` turns :class:`~symbolic.render.gain_formulas.GainFormulas` into a
NumPy function with the validity checks of the generated C function; ``gainsmith
schedule`` and the export's own self-check use it.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import sympy as sp

from .code_printers import PythonPrinter
from .gain_formulas import (
    CODE_NOT_FINITE,
    CODE_OK,
    ZERO_TOLERANCE,
    GainFormulas,
    common_subexpressions,
)

__all__ = ["BLOCK", "GainValues", "gain_evaluator"]

#: Points per block in the vectorised evaluator: blocks of this size keep the
#: temporaries in cache (common practice, no source).
BLOCK = 16384


@dataclass(frozen=True)
class GainValues:
    """Gains evaluated at many parameter points (leading axes: the points' shape).

    ``code`` is the return code of the C function at each point (0 valid); the
    gains are NaN wherever ``code`` is nonzero.  Parts not requested are None.
    """

    K: np.ndarray | None  # (..., m, n)
    L: np.ndarray | None  # (..., n, p)
    reference_gain: np.ndarray | None  # (...)
    code: np.ndarray | None  # (...) int8
    #: index into ``GainFormulas.factors`` of the factor that set ``code``, -1 if none
    factor_index: np.ndarray | None = None  # (...) int16
    #: value of every validity factor, (factors, ...)
    factor_values: np.ndarray | None = None
    #: the extra parts requested (``K_integral``, ``Ke``, ...), name -> (..., rows, cols)
    extra: Mapping[str, np.ndarray] | None = None

    @property
    def valid(self) -> np.ndarray:
        return self.code == CODE_OK


def gain_evaluator(
    formulas: GainFormulas,
    parts: Sequence[str] = ("K", "L", "reference_gain"),
    *,
    validity: bool = True,
) -> Callable[[Mapping[str, np.ndarray]], GainValues]:
    """A vectorised function of the parameters that evaluates the closed forms.

    Parameters
    ----------
    formulas : GainFormulas
    parts : sequence of {"K", "L", "reference_gain"}
        What to compute (fewer parts, less work).
    validity : bool
        Also evaluate the validity factors and fill ``code`` (as the C function
        does); the gains are NaN wherever ``code`` is nonzero.

    Returns
    -------
    callable
        ``evaluate(values)`` with ``values`` mapping every parameter name to a
        float or an array (broadcast together); returns :class:`GainValues`.

    Notes
    -----
    Built with ``sympy.lambdify(..., "numpy", cse=..., dummify=True)``: the
    arguments are dummies, so no text of the design file reaches the
    generated function.  Integer powers are printed as products, the points
    are evaluated in blocks of :data:`BLOCK` so that temporaries stay in cache.
    """
    design = formulas.design
    names = [p.name for p in design.parameters]
    exprs = formulas.entries(parts)
    sizes = []
    for part in parts:
        shape_ = formulas.part_shape(part)
        sizes.append(1 if shape_ is None else shape_[0] * shape_[1])
    factor_exprs: list[sp.Expr] = []
    if validity:
        for f in formulas.factors:
            factor_exprs += [f.factor, f.scale]
    count = len(exprs) + len(factor_exprs)
    func = sp.lambdify(
        [p.symbol for p in design.parameters],
        exprs + factor_exprs,
        modules="numpy",
        printer=PythonPrinter(),
        cse=common_subexpressions,
        dummify=True,
        docstring_limit=0,
    )
    codes = [f.code for f in formulas.factors] if validity else []

    def evaluate(values: Mapping[str, np.ndarray]) -> GainValues:
        shape, results = _evaluate_blocks(func, names, count, values)
        gains, offset = _gather_parts(formulas, parts, sizes, shape, results)
        code = index = factor_values = None
        if validity:
            code, index, factor_values = _apply_validity(
                gains, parts, codes, results[offset:], shape
            )
        return GainValues(
            K=gains.get("K"),
            L=gains.get("L"),
            reference_gain=gains.get("reference_gain"),
            code=code,
            factor_index=index,
            factor_values=factor_values,
            extra={k: v for k, v in gains.items() if k not in ("K", "L", "reference_gain")},
        )

    return evaluate


def _evaluate_blocks(
    func: Callable, names: list[str], count: int, values: Mapping[str, np.ndarray]
) -> tuple[tuple[int, ...], list[np.ndarray]]:
    """The broadcast shape of the values, and every expression at every point (flat)."""
    unknown = sorted(set(values) - set(names))
    if unknown:
        raise ValueError(f"unknown parameter {unknown[0]!r}")
    missing = [nm for nm in names if nm not in values]
    if missing:
        raise ValueError(f"missing parameter {missing[0]!r}")
    arrays = np.broadcast_arrays(*[np.asarray(values[nm], dtype=float) for nm in names])
    shape = arrays[0].shape if arrays else ()
    total = int(np.prod(shape, dtype=np.int64))
    flat = [np.ascontiguousarray(a).reshape(-1) for a in arrays]
    results = [np.empty(total) for _ in range(count)]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for start in range(0, max(total, 1), BLOCK):
            stop = min(start + BLOCK, total)
            if stop <= start:
                break
            got = func(*[a[start:stop] for a in flat])
            for k, g in enumerate(got):
                results[k][start:stop] = g
    return shape, results


def _gather_parts(
    formulas: GainFormulas,
    parts: Sequence[str],
    sizes: list[int],
    shape: tuple[int, ...],
    results: list[np.ndarray],
) -> tuple[dict[str, np.ndarray], int]:
    """Each part's entries reshaped to ``shape + part shape``; and where the factors start."""
    gains = {}
    offset = 0
    for part, size in zip(parts, sizes, strict=True):
        block = results[offset : offset + size]
        offset += size
        shape_ = formulas.part_shape(part)
        if shape_ is not None:
            gains[part] = np.stack(block, axis=-1).reshape(shape + tuple(shape_))
        else:
            gains[part] = block[0].reshape(shape)
    return gains, offset


def _apply_validity(
    gains: dict[str, np.ndarray],
    parts: Sequence[str],
    codes: list[int],
    pairs: list[np.ndarray],
    shape: tuple[int, ...],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The code of every point (as the C function returns it), the index of the factor
    that set it and every factor's value; the gains are set to NaN where the code is not 0."""
    total = int(np.prod(shape, dtype=np.int64))
    code = np.zeros(total, dtype=np.int8)
    index = np.full(total, -1, dtype=np.int16)
    for k in reversed(range(len(codes))):
        f, scale = pairs[2 * k], pairs[2 * k + 1]
        zero = np.abs(f) <= ZERO_TOLERANCE * scale
        code[zero] = codes[k]
        index[zero] = k
    factor_values = np.array(pairs[0::2]).reshape((len(codes),) + shape)
    index = index.reshape(shape)
    finite = np.ones(total, dtype=bool)
    for part in parts:
        g = gains[part].reshape(total, -1)
        finite &= np.isfinite(g).all(axis=1)
    code[(code == CODE_OK) & ~finite] = CODE_NOT_FINITE
    bad = code != CODE_OK
    if bad.any():
        for part in parts:
            gains[part].reshape(total, -1)[bad] = np.nan
    return code.reshape(shape), index, factor_values
