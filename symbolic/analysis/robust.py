"""Robustness of a finished design: parameter mismatch, gain sensitivities, stability margins.

The controller (K, N) and the observer (L) are designed at the nominal
parameter values (:func:`symbolic.derive`).  The true plant has other values
(A_t, B_t, C_t, D_t); the observer keeps the nominal model (A, B, C, D).

The mismatched loop
-------------------
With the plant ẋ = A_t x + B_t u, y = C_t x + D_t u, the observer
x̂' = A x̂ + B u + L (y − C x̂ − D u) and the control u = −K x̂ + N r, the
estimation error e = x − x̂ obeys (derived step by step in
:func:`mismatch_loop`; ΔA = A_t − A and so on)::

    ẋ = (A_t − B_t K) x + B_t K e + B_t N r
    ė = (ΔA − ΔB K − L (ΔC − ΔD K)) x + (A − L C + (ΔB − L ΔD) K) e + (ΔB − L ΔD) N r

The lower-left block, the *coupling* ΔA − ΔB K − L (ΔC − ΔD K), is what
breaks the separation principle: it vanishes when the true plant equals the
model, and the matrix becomes the block-triangular separated loop whose
eigenvalues are the controller and observer poles.

The study
---------
* eigenvalues of the 2n mismatched loop over a grid of the parameter ranges
  (``points`` values per parameter with a range, which includes all 2^k
  corners; parameters without a range stay nominal), plus the nominal point;
* the Routh–Hurwitz conditions of the state-feedback loop A_t − B_t K (K
  fixed at its nominal value) in closed form in the true parameters for
  n ≤ 3, and a numeric stability boundary on the grid otherwise;
* normalised sensitivities (p/g)·∂g/∂p of every gain entry g to every
  parameter p, in closed form and at the nominal values;
* gain, phase and delay margins of the loop broken at the plant input, for
  state feedback with the true state and for the observer-based
  compensator (:mod:`symbolic.analysis.margins`), side by side.

Caution: every number here describes the linear model.  Before a loop built
from these gains drives a machine that moves, heats or flies, test it on the
real plant with reduced limits and an independent emergency stop; a design
that is robust on paper can still fail through saturation, sampling delay,
sensor noise or dynamics the model leaves out.

References
----------
.. [1] E. J. Routh, *A Treatise on the Stability of a Given State of
   Motion*, Macmillan, 1877.
.. [2] A. Hurwitz, "Ueber die Bedingungen, unter welchen eine Gleichung nur
   Wurzeln mit negativen reellen Theilen besitzt", *Mathematische Annalen*
   46:273–284, 1895. doi:10.1007/BF01446812
.. [3] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
   Sec. 5-6 (Routh's stability criterion) and Sec. 10-5 (observer-based
   control, the separation of controller and observer poles).
.. [4] D. G. Luenberger, "An introduction to observers", *IEEE Transactions
   on Automatic Control* 16(6):596–602, 1971. doi:10.1109/TAC.1971.1099826
.. [5] P. M. Frank, *Introduction to System Sensitivity Theory*, Academic
   Press, 1978, Ch. 2 (the normalised, or relative, sensitivity
   (p/g)·∂g/∂p).
"""

from __future__ import annotations

import functools
import math
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import sympy as sp

from ..derivation.checks import eigenvalue_check
from ..derivation.closed_form import characteristic_coefficients
from ..derivation.numeric import evaluate_matrix, numeric_ackermann
from ..derivation.pipeline import derive
from ..model.design import Design
from ..model.labels import gain_label
from ..model.numbers import format_pole, format_poles
from ..model.results import Check, Derivation
from ..runtime.budget import run_bounded
from ..runtime.errors import BudgetExceeded, DesignFileError
from .margins import MarginComparison, MarginReport, compare_margins

__all__ = [
    "GainSensitivity",
    "MismatchLoop",
    "MismatchStudy",
    "ParameterGrid",
    "RobustnessReport",
    "RouthHurwitzCondition",
    "SensitivityTable",
    "StabilityChange",
    "StateFeedbackStability",
    "MAX_GRID_POINTS",
    "evaluate_on_grid",
    "gain_sensitivities",
    "margin_rows",
    "memo_robustness",
    "mismatch_loop",
    "mismatch_study",
    "parameter_grid",
    "robustness_json",
    "robustness_study",
    "robustness_text",
    "routh_hurwitz_conditions",
    "run_robustness",
    "state_feedback_stability",
]

#: Largest parameter grid accepted (points per parameter ** parameters with a range).
MAX_GRID_POINTS = 200_000
#: Points evaluated per batch of eigenvalue computations (memory guard).
_CHUNK = 20_000
#: Unstable points listed by name in the report.
LISTED_POINTS = 5
#: Stability changes between grid neighbours refined by bisection and listed.
LISTED_CHANGES = 8
#: Expressions with more operations than this are not factored (``factor`` can take minutes).
FACTOR_LIMIT = 400
#: A point is stable when every real part is below −STABILITY_TOLERANCE·max(1, spectral radius).
STABILITY_TOLERANCE = 1e-10


# --------------------------------------------------------------------------
# Vectorised evaluation of design expressions (no code generation)
# --------------------------------------------------------------------------
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


# --------------------------------------------------------------------------
# The grid
# --------------------------------------------------------------------------
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


# --------------------------------------------------------------------------
# The mismatched loop in closed form
# --------------------------------------------------------------------------
def _exact_matrix(value: np.ndarray) -> sp.Matrix:
    """A float matrix as exact rationals (the shortest decimal of each float)."""
    return sp.Matrix([[sp.Rational(repr(float(x))) for x in row] for row in np.atleast_2d(value)])


@dataclass(frozen=True)
class MismatchLoop:
    """The 2n loop in (x, e = x − x̂) coordinates with the true parameters as symbols.

    ``matrix`` = [[A_t − B_t K, B_t K], [coupling, error_block]]; K, L and
    the observer's model (A, B, C, D) are the exact nominal values.
    """

    matrix: sp.Matrix
    state_feedback: sp.Matrix  # A_t − B_t K
    input_block: sp.Matrix  # B_t K
    coupling: sp.Matrix  # ΔA − ΔB K − L (ΔC − ΔD K)
    error_block: sp.Matrix  # A − L C + (ΔB − L ΔD) K
    K: sp.Matrix  # exact nominal gains used
    L: sp.Matrix
    nominal_model: tuple[sp.Matrix, sp.Matrix, sp.Matrix, sp.Matrix]
    gains_exact: bool  # K and L from the closed forms (else rounded floats)


def mismatch_loop(d: Derivation) -> MismatchLoop:
    """Derive the mismatched closed loop in closed form.

    Derivation (ΔA = A_t − A, ΔB = B_t − B, ΔC = C_t − C, ΔD = D_t − D).
    With u = −K x̂ + N r and x̂ = x − e, u = −K x + K e + N r, so

    * ẋ = A_t x + B_t u = (A_t − B_t K) x + B_t K e + B_t N r;
    * the innovation y − C x̂ − D u = C_t x + D_t u − C (x − e) − D u
      = ΔC x + C e + ΔD u;
    * x̂' = A (x − e) + (B + L ΔD) u + L ΔC x + L C e;
    * ė = ẋ − x̂' = (ΔA − L ΔC) x + (A − L C) e + (ΔB − L ΔD) u, and with u
      substituted, ė = (ΔA − ΔB K − L (ΔC − ΔD K)) x
      + (A − L C + (ΔB − L ΔD) K) e + (ΔB − L ΔD) N r.

    For the matched plant every Δ vanishes and the loop is the separated
    [[A − BK, BK], [0, A − LC]] (Ogata, *Modern Control Engineering*, 5th
    ed., Sec. 10-5; Luenberger 1971).
    """
    design = d.design
    plant = design.plant
    values = design.values
    At, Bt, Ct, Dt = (sp.Matrix(M) for M in (plant.A, plant.B, plant.C, plant.D))
    A, B, C, D = (M.xreplace(values) for M in (At, Bt, Ct, Dt))
    exact = d.K.closed_form is not None and d.L.closed_form is not None
    if exact:
        K = sp.Matrix(d.K.closed_form).xreplace(values)
        L = sp.Matrix(d.L.closed_form).xreplace(values)
    else:
        K, L = _exact_matrix(d.K.value), _exact_matrix(d.L.value)
    dA, dB, dC, dD = At - A, Bt - B, Ct - C, Dt - D
    state_feedback = At - Bt * K
    input_block = Bt * K
    coupling = dA - dB * K - L * (dC - dD * K)
    error_block = A - L * C + (dB - L * dD) * K
    top = state_feedback.row_join(input_block)
    bottom = coupling.row_join(error_block)
    return MismatchLoop(
        matrix=top.col_join(bottom),
        state_feedback=state_feedback,
        input_block=input_block,
        coupling=coupling,
        error_block=error_block,
        K=K,
        L=L,
        nominal_model=(A, B, C, D),
        gains_exact=exact,
    )


# --------------------------------------------------------------------------
# Numeric study over the grid
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class StabilityChange:
    """Neighbouring grid points on either side of a stability boundary, refined by bisection."""

    loop: str  # "state feedback" or "observer-based"
    parameter: str
    stable_value: float
    unstable_value: float
    boundary: float  # the parameter value where stability changes (bisection)
    others: dict[str, float]  # the other varied parameters at this grid line

    def text(self) -> str:
        rest = ", ".join(f"{k} = {_g(v)}" for k, v in self.others.items())
        return (
            f"{self.loop}: stability is lost between {self.parameter} = {_g(self.stable_value)}"
            f" (stable) and {_g(self.unstable_value)}, at {self.parameter} ≈ {_g(self.boundary)}"
            + (f" (with {rest})" if rest else "")
        )


@dataclass(frozen=True)
class MismatchStudy:
    """Eigenvalues of the mismatched loops at every point of the grid."""

    grid: ParameterGrid
    poles: np.ndarray  # (P, 2n) the observer-based loop
    state_feedback_poles: np.ndarray  # (P, n) A_t − B_t K
    stable: np.ndarray  # (P,) bool, observer-based loop
    state_feedback_stable: np.ndarray  # (P,) bool
    worst_damping_ratio: float
    worst_damping_at: dict[str, float]
    least_stable_pole: complex
    least_stable_at: dict[str, float]
    unstable_points: tuple[dict[str, float], ...]  # the first few
    unstable_count: int
    nominal_poles: np.ndarray
    changes: tuple[StabilityChange, ...]
    checks: tuple[Check, ...]

    @property
    def all_stable(self) -> bool:
        return self.unstable_count == 0


def _g(x: float) -> str:
    return f"{float(x):.6g}"


def _stable_rows(eig: np.ndarray) -> np.ndarray:
    radius = np.maximum(1.0, np.max(np.abs(eig), axis=1))
    return np.max(eig.real, axis=1) < -STABILITY_TOLERANCE * radius


class _Assembler:
    """Numeric mismatched-loop matrices at parameter points (vectorised)."""

    def __init__(self, d: Derivation, grid: ParameterGrid):
        plant = d.design.plant
        self.d = d
        self.grid = grid
        self.mats = (plant.A, plant.B, plant.C, plant.D)
        self.A0, self.B0, self.C0, self.D0 = d.plant.A, d.plant.B, d.plant.C, d.plant.D
        self.K, self.L = d.K.value, d.L.value

    def true_plant(self, values: np.ndarray):
        out = [evaluate_on_grid(M, self.grid.symbols, values) for M in self.mats]
        for name, arr in zip("ABCD", out, strict=True):
            bad = np.argwhere(~np.isfinite(arr))
            if bad.size:
                r, i, j = bad[0]
                where = ", ".join(
                    f"{n} = {_g(v)}" for n, v in zip(self.grid.names, values[r], strict=True)
                )
                raise DesignFileError(
                    f"'{self.mats['ABCD'.index(name)][i, j]}' is not a finite real number at"
                    f" {where} (inside the parameter ranges)",
                    self.d.design.path,
                    f"plant.{name}[{i}][{j}]",
                )
        return out

    def loops(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(state-feedback matrices (P, n, n), mismatched 2n matrices (P, 2n, 2n))."""
        At, Bt, Ct, Dt = self.true_plant(values)
        K, L = self.K, self.L
        dA, dB, dC, dD = At - self.A0, Bt - self.B0, Ct - self.C0, Dt - self.D0
        sf = At - Bt @ K
        top = np.concatenate([sf, Bt @ K], axis=2)
        coupling = dA - dB @ K - L @ (dC - dD @ K)
        err = (self.A0 - L @ self.C0)[None] + (dB - L @ dD) @ K
        bottom = np.concatenate([coupling, err], axis=2)
        return sf, np.concatenate([top, bottom], axis=1)

    def stability(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        sf, full = self.loops(values)
        return _stable_rows(np.linalg.eigvals(sf)), _stable_rows(np.linalg.eigvals(full))


def _damping(eig: np.ndarray) -> np.ndarray:
    mag = np.abs(eig)
    with np.errstate(divide="ignore", invalid="ignore"):
        zeta = np.where(mag > 1e-300, -eig.real / np.where(mag > 1e-300, mag, 1.0), 0.0)
    return zeta


def _changes(
    assembler: _Assembler, grid: ParameterGrid, stable: np.ndarray, loop: str
) -> list[StabilityChange]:
    """Grid neighbours (along one parameter) on both sides of the boundary, bisected."""
    if not grid.shape:
        return []
    out: list[StabilityChange] = []
    mask = stable[: grid.size].reshape(grid.shape)
    index = {n: i for i, n in enumerate(grid.names)}
    which = 0 if loop == "state feedback" else 1
    for axis, name in enumerate(grid.varied):
        a = np.moveaxis(mask, axis, -1)
        diff = a[..., :-1] != a[..., 1:]
        for pos in np.argwhere(diff):
            if len(out) >= LISTED_CHANGES:
                return out
            lead, j = tuple(pos[:-1]), int(pos[-1])
            idx_a = list(lead)
            idx_a.insert(axis, j)
            idx_b = list(lead)
            idx_b.insert(axis, j + 1)
            ra = int(np.ravel_multi_index(idx_a, grid.shape))
            rb = int(np.ravel_multi_index(idx_b, grid.shape))
            col = index[name]
            point = grid.values[ra].copy()
            lo, hi = grid.values[ra, col], grid.values[rb, col]
            stable_lo = bool(stable[ra])
            for _ in range(50):
                mid = 0.5 * (lo + hi)
                point[col] = mid
                s = assembler.stability(point[None, :])[which][0]
                if s == stable_lo:
                    lo = mid
                else:
                    hi = mid
                if abs(hi - lo) <= 1e-10 * max(abs(hi), abs(lo), 1e-300):
                    break
            sv, uv = (grid.values[ra, col], grid.values[rb, col])
            if not stable_lo:
                sv, uv = uv, sv
            others = {n: float(grid.values[ra, index[n]]) for n in grid.varied if n != name}
            out.append(StabilityChange(loop, name, float(sv), float(uv), 0.5 * (lo + hi), others))
    return out


def mismatch_study(d: Derivation, points: int = 5) -> MismatchStudy:
    """Eigenvalues of the mismatched loops over the parameter grid.

    Parameters
    ----------
    d : Derivation
        K, L and the observer's model at the nominal values.
    points : int
        Values per parameter range (≥ 2; the grid includes all corners).

    Returns
    -------
    MismatchStudy

    Raises
    ------
    DesignFileError
        For a bad ``points``, a grid over :data:`MAX_GRID_POINTS`, or a plant
        entry that is not finite somewhere in the ranges.
    """
    grid = parameter_grid(d.design, points)
    asm = _Assembler(d, grid)
    P = grid.values.shape[0]
    n = d.plant.A.shape[0]
    poles = np.empty((P, 2 * n), dtype=complex)
    sf_poles = np.empty((P, n), dtype=complex)
    for start in range(0, P, _CHUNK):
        chunk = grid.values[start : start + _CHUNK]
        sf, full = asm.loops(chunk)
        sf_poles[start : start + chunk.shape[0]] = np.linalg.eigvals(sf)
        poles[start : start + chunk.shape[0]] = np.linalg.eigvals(full)
    stable = _stable_rows(poles)
    sf_stable = _stable_rows(sf_poles)
    zeta = _damping(poles)
    flat = int(np.argmin(zeta))
    wi, _wj = divmod(flat, zeta.shape[1])
    re = poles.real
    flat = int(np.argmax(re))
    li, lj = divmod(flat, re.shape[1])
    least = complex(poles[li, lj])
    if least.imag < 0:
        least = least.conjugate()
    bad = np.nonzero(~stable)[0]
    nominal = poles[grid.nominal_index]
    union = np.concatenate([d.controller_poles.values, d.observer_poles.values])
    at = grid.nominal_index
    A, B, C = d.plant.A, d.plant.B, d.plant.C
    K, L = d.K.value, d.L.value
    checks = [
        eigenvalue_check(
            "mismatch study: poles at the nominal point vs the controller and observer poles (relative)",
            asm.loops(grid.values[at : at + 1])[1][0],
            union,
            terms=(A, (B, K), (B, K), (L, C)),
            achieved=nominal,
        )
    ]
    changes = _changes(asm, grid, sf_stable, "state feedback") + _changes(
        asm, grid, stable, "observer-based"
    )
    return MismatchStudy(
        grid=grid,
        poles=poles,
        state_feedback_poles=sf_poles,
        stable=stable,
        state_feedback_stable=sf_stable,
        worst_damping_ratio=float(zeta.min()),
        worst_damping_at=grid.point(wi),
        least_stable_pole=least,
        least_stable_at=grid.point(li),
        unstable_points=tuple(grid.point(int(i)) for i in bad[:LISTED_POINTS]),
        unstable_count=int(bad.size),
        nominal_poles=nominal,
        changes=tuple(changes),
        checks=tuple(checks),
    )


# --------------------------------------------------------------------------
# Routh–Hurwitz in closed form
# --------------------------------------------------------------------------
def routh_hurwitz_conditions(coefficients: Sequence[sp.Expr]) -> tuple[sp.Expr, ...]:
    """Expressions that must all be positive for s^n + a_{n−1}s^{n−1} + … + a_0 to be Hurwitz.

    Parameters
    ----------
    coefficients : sequence
        [1, a_{n−1}, …, a_0] (monic), n = 1, 2 or 3.

    Returns
    -------
    tuple of Expr
        n = 1: (a0,); n = 2: (a1, a0); n = 3: (a2, a0, a2·a1 − a0).

    Raises
    ------
    ValueError
        For another order or a polynomial that is not monic.

    Notes
    -----
    Necessary and sufficient (Routh 1877; Hurwitz 1895).  For n = 3 the
    Routh array's first column is 1, a2, (a2 a1 − a0)/a2, a0, so with
    a2 > 0 the three conditions above are equivalent to it (a1 > 0
    follows).  K. Ogata, *Modern Control Engineering*, 5th ed., 2010,
    Sec. 5-6.

    Examples
    --------
    >>> import sympy as sp
    >>> k = sp.Symbol("k")
    >>> routh_hurwitz_conditions((1, 3, 2, k))      # s(s+1)(s+2) + k
    (3, k, 6 - k)
    """
    c = tuple(sp.Integer(x) if isinstance(x, int) else x for x in coefficients)
    n = len(c) - 1
    if c[0] != 1:
        raise ValueError("the characteristic polynomial must be monic")
    if n == 1:
        return (c[1],)
    if n == 2:
        return (c[1], c[2])
    if n == 3:
        a2, a1, a0 = c[1], c[2], c[3]
        return (a2, a0, sp.expand(a2 * a1 - a0))
    raise ValueError("closed-form Routh–Hurwitz conditions are given for orders 1 to 3")


@dataclass(frozen=True)
class RouthHurwitzCondition:
    """One Routh–Hurwitz condition ``expression > 0`` in the true parameters."""

    name: str  # "a1 > 0", "a2·a1 − a0 > 0"
    expression: sp.Expr  # exact (rational function of the parameters)
    reduced: sp.Expr  # sign-equivalent: factors of known sign removed
    assumption: str  # what the reduction assumed

    def text(self, digits: int = 6) -> str:
        if self.reduced.is_number:
            verdict = "always holds" if self.reduced > 0 else "never holds"
            return f"{self.name}:  {verdict} ({sp.sstr(_rounded(self.expression, digits))} > 0)"
        shown = _rounded(self.reduced, digits)
        return f"{self.name}:  {sp.sstr(shown)} > 0"


def _rounded(expr: sp.Expr, digits: int) -> sp.Expr:
    """For display: rational coefficients (and integers of 8 digits or more) as floats.

    Exponents are left exact (``sqrt(a)`` stays ``sqrt(a)``, not ``a**0.5``).
    """
    if expr.is_Rational:
        if expr.is_Integer and abs(expr) < 10**7:
            return expr
        return sp.Float(expr, digits)
    if expr.is_Pow:
        return sp.Pow(_rounded(expr.base, digits), expr.exp)
    if expr.args:
        return expr.func(*[_rounded(a, digits) for a in expr.args])
    return expr


def _factored(expr: sp.Expr) -> sp.Expr:
    if sp.count_ops(expr) > FACTOR_LIMIT:
        return expr
    try:
        return sp.factor(expr)
    except (sp.PolynomialError, NotImplementedError):
        return expr


def _sign_reduced(expr: sp.Expr, design: Design) -> tuple[sp.Expr, list[str]]:
    """Drop factors whose sign is fixed over the ranges; return the rest (same sign as expr)."""
    sign_of: dict[sp.Symbol, int] = {}
    for p in design.parameters:
        lo, hi = p.range if p.range is not None else (p.value, p.value)
        if lo > 0 and p.value > 0:
            sign_of[p.symbol] = 1
        elif hi < 0 and p.value < 0:
            sign_of[p.symbol] = -1
    used: list[str] = []
    num, den = sp.fraction(sp.factor(expr) if sp.count_ops(expr) <= FACTOR_LIMIT else expr)
    sign = 1
    kept = []
    for part, power in ((num, 1), (den, -1)):
        if sp.count_ops(part) > FACTOR_LIMIT:
            kept.append(part**power)
            continue
        try:
            const, factors = sp.factor_list(part)
        except (sp.PolynomialError, NotImplementedError):
            kept.append(part**power)
            continue
        if const.is_number and const != 0:
            sign *= 1 if const > 0 else -1
        else:
            kept.append(const**power)
        for f, mult in factors:
            if mult % 2 == 0 and f.free_symbols:
                used.append(f"({f})^{mult} ≥ 0")
                continue
            if f.is_Symbol and f in sign_of:
                sign *= sign_of[f] ** mult
                used.append(str(f))
                continue
            kept.append(f ** (mult * power))
    reduced = sign * sp.Mul(*kept) if kept else sp.Integer(sign)
    return reduced, used


@dataclass(frozen=True)
class StateFeedbackStability:
    """Stability of A_t − B_t K in the true parameters (K fixed at its nominal value)."""

    order: int
    coefficients: tuple[sp.Expr, ...] | None  # det(sI − (A_t − B_t K)), closed form
    conditions: tuple[RouthHurwitzCondition, ...] | None  # None for n > 3
    lines: tuple[str, ...]  # the report's statements


def state_feedback_stability(d: Derivation, study: MismatchStudy) -> StateFeedbackStability:
    """Routh–Hurwitz conditions of A_t − B_t K (n ≤ 3) or the numeric boundary (n > 3).

    The conditions are factored and reduced to a sign-equivalent form by
    removing factors whose sign cannot change (parameters whose range and
    nominal value are positive, squares, constants); the statements then
    assume each parameter keeps the sign of its nominal value.  The
    mismatched 2n loop is always checked numerically (its eigenvalues on
    the grid).
    """
    n = d.plant.A.shape[0]
    loop = mismatch_loop(d)
    lines: list[str] = []
    coeffs = None
    conds: list[RouthHurwitzCondition] | None = None
    if n <= 3:
        coeffs = tuple(_factored(c) for c in characteristic_coefficients(loop.state_feedback))
        raw = routh_hurwitz_conditions(coeffs)
        names = {
            1: ("a0 > 0",),
            2: ("a1 > 0", "a0 > 0"),
            3: ("a2 > 0", "a0 > 0", "a2·a1 − a0 > 0"),
        }[n]
        conds = []
        for name, expr in zip(names, raw, strict=True):
            expr = _factored(sp.together(expr))
            reduced, used = _sign_reduced(expr, d.design)
            assumption = (
                "dropped factors of fixed sign: " + ", ".join(used) if used else "no factor dropped"
            )
            conds.append(RouthHurwitzCondition(name, expr, reduced, assumption))
        poly = " + ".join(
            f"a{n - i}·s^{n - i}" if n - i > 1 else (f"a{n - i}·s" if n - i == 1 else "a0")
            for i in range(1, n + 1)
        )
        lines.append(
            f"state feedback with the true state, det(sI − (A_t − B_t K)) = s^{n} + {poly},"
            " K fixed at its nominal value; stable if and only if (Routh 1877, Hurwitz 1895;"
            " Ogata, Modern Control Engineering, 5th ed., Sec. 5-6):"
        )
        for c in conds:
            lines.append("  " + c.text())
        lines.append(
            "  (each parameter keeping the sign of its nominal value; positive parameters and"
            " squared factors were divided out)"
        )
    else:
        sf_changes = [c for c in study.changes if c.loop == "state feedback"]
        if not study.grid.varied:
            lines.append(
                f"state feedback with the true state (order {n} > 3, no closed form given): no"
                " parameter has a range, so only the nominal point was checked"
            )
        elif not sf_changes and bool(np.all(study.state_feedback_stable)):
            lines.append(
                f"state feedback with the true state (order {n} > 3, checked numerically): stable"
                f" over the whole grid ({study.grid.size} points)"
            )
        elif not sf_changes:
            lines.append(
                f"state feedback with the true state (order {n} > 3, checked numerically):"
                f" unstable at {int(np.sum(~study.state_feedback_stable))} of"
                f" {study.grid.size} grid points"
            )
        else:
            lines.append(
                f"state feedback with the true state (order {n} > 3, checked numerically);"
                " stability boundary on the grid:"
            )
            lines.extend("  " + c.text() for c in sf_changes)
    ob_changes = [c for c in study.changes if c.loop == "observer-based"]
    count = study.grid.values.shape[0]
    status = (
        "stable at every point"
        if study.all_stable
        else f"unstable at {study.unstable_count} of {count} points"
    )
    lines.append(
        f"observer-based loop with mismatch (order {2 * n}): Routh–Hurwitz checked numerically"
        f" through its eigenvalues at {count} points (grid and nominal): {status}"
    )
    lines.extend("  " + c.text() for c in ob_changes)
    return StateFeedbackStability(
        n, coeffs, tuple(conds) if conds is not None else None, tuple(lines)
    )


# --------------------------------------------------------------------------
# Sensitivities
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class GainSensitivity:
    """(p/g)·∂g/∂p for one gain entry g and one parameter p."""

    gain: str  # "K_2", "L_3", "N" (symbolic.model.labels.gain_label)
    parameter: str
    closed_form: sp.Expr | None
    value: float | None  # at the nominal values; None where g = 0 there


@dataclass(frozen=True)
class SensitivityTable:
    entries: tuple[GainSensitivity, ...]
    gains: tuple[str, ...]
    parameters: tuple[str, ...]
    method: str
    notes: tuple[str, ...]

    def value(self, gain: str, parameter: str) -> float | None:
        for e in self.entries:
            if e.gain == gain and e.parameter == parameter:
                return e.value
        raise KeyError((gain, parameter))


def _entry_labels(d: Derivation, style: Literal["text", "tex"] = "text") -> list[str]:
    """Labels of every entry of K, L (row-major) and N, as :func:`gain_label` writes them."""
    gains = [(g.name, g.value.shape) for g in (d.K, d.L)]
    if d.reference is not None:
        gains.append(("N", d.reference.value.shape))
    return [
        gain_label(name, i, j, shape, style)
        for name, shape in gains
        for i in range(shape[0])
        for j in range(shape[1])
    ]


def _gain_entries(d: Derivation) -> list[tuple[str, sp.Expr | None, float]]:
    """(label, closed form or None, value) of every entry, in the order of :func:`_entry_labels`."""
    forms: list[tuple[sp.Expr | None, float]] = []
    for g in (d.K, d.L):
        cf = g.closed_form
        for i in range(g.value.shape[0]):
            for j in range(g.value.shape[1]):
                forms.append((None if cf is None else cf[i, j], float(g.value[i, j])))
    if d.reference is not None:
        ref = d.reference
        single = ref.value.shape[0] == 1
        for i in range(ref.value.shape[0]):
            forms.append((ref.closed_form if single else None, float(ref.value[i, 0])))
    return [(label, f, v) for label, (f, v) in zip(_entry_labels(d), forms, strict=True)]


def _sensitivity_forms(
    entries: list[tuple[str, sp.Expr]], symbols: list[sp.Symbol], factor: bool = True
) -> list[list[sp.Expr]]:
    """(p/g)·∂g/∂p for each entry and symbol, factored within FACTOR_LIMIT (runs bounded)."""
    table = []
    for _label, g in entries:
        row = []
        for p in symbols:
            if p not in g.free_symbols:
                row.append(sp.Integer(0))
                continue
            expr = p * sp.diff(g, p) / g
            row.append(_factored(expr) if factor else expr)
        table.append(row)
    return table


def _numeric_gains(d: Derivation, values: np.ndarray) -> np.ndarray:
    """K, L and N (flattened, the order of :func:`_gain_entries`) at one parameter point."""
    plant = d.design.plant
    syms = [p.symbol for p in d.design.parameters]
    A, B, C, D = (
        evaluate_on_grid(M, syms, values[None, :])[0] for M in (plant.A, plant.B, plant.C, plant.D)
    )
    K = numeric_ackermann(A, B, d.controller_poles.values)
    L = numeric_ackermann(A.T, C.T, d.observer_poles.values).T
    parts = [K.ravel(), L.ravel()]
    if d.reference is not None:
        i = d.reference.tracked_index
        Ct, Dt = C[i : i + 1], D[i : i + 1]
        M = (Ct - Dt @ K) @ np.linalg.solve(-(A - B @ K), B) + Dt
        parts.append(np.array([1.0 / M.item()]))
    return np.concatenate(parts)


def gain_sensitivities(
    d: Derivation, *, budget: float | None = None, factor: bool = True
) -> SensitivityTable:
    """Normalised sensitivities (p/g)·∂g/∂p of every gain entry at the nominal values.

    Closed form by differentiating the closed-form gains (``sympy.diff``),
    factored when small (``count_ops`` ≤ 400), evaluated exactly at the
    nominal values; the symbolic step runs within the design's time budget
    (``budget`` seconds; ≤ 0 runs in this process).  Without closed forms
    (over budget, or several inputs or outputs) the sensitivities of a
    single-input, single-output design come from central differences of the
    floating-point Ackermann gains instead (step 1e-6 relative).
    ``factor=False`` leaves the formulas unfactored (for callers that show
    only the numbers); the values are the same exact evaluations.

    The normalised sensitivity is the relative change of the gain per
    relative change of the parameter (P. M. Frank, *Introduction to System
    Sensitivity Theory*, 1978, Ch. 2).
    """
    params = d.design.parameters
    names = tuple(p.name for p in params)
    symbols = [p.symbol for p in params]
    values = d.design.values
    entries = _gain_entries(d)
    notes: list[str] = []
    forms = None
    if entries and all(e[1] is not None for e in entries) and params:
        seconds = d.design.symbolic_budget_seconds if budget is None else budget
        try:
            forms = run_bounded(
                _sensitivity_forms,
                ([(lab, g) for lab, g, _v in entries], symbols, factor),
                seconds=None if seconds <= 0 else seconds,
                what="the closed-form sensitivities",
            )
        except BudgetExceeded as exc:
            notes.append(f"{exc}; the sensitivities are finite differences instead")
    out: list[GainSensitivity] = []
    if forms is not None:
        method = (
            "closed form: (p/g)·∂g/∂p from sympy.diff of the closed-form gains, exact at nominal"
        )
        for (label, _g_expr, g_val), row in zip(entries, forms, strict=True):
            for name, expr in zip(names, row, strict=True):
                if g_val == 0:
                    val = None
                else:
                    v = sp.N(expr.xreplace(values), 30)
                    val = float(v) if v.is_real and v.is_finite else None
                out.append(GainSensitivity(label, name, expr, val))
    elif d.plant.B.shape[1] == 1 and d.plant.C.shape[0] == 1 and params:
        method = "central differences (step 1e-6 relative) of floating-point Ackermann gains"
        nominal = np.array([float(p.value) for p in params])
        base = _numeric_gains(d, nominal)
        cols = []
        for j in range(len(params)):
            h = 1e-6 * max(abs(nominal[j]), 1e-300)
            up, down = nominal.copy(), nominal.copy()
            up[j] += h
            down[j] -= h
            cols.append((_numeric_gains(d, up) - _numeric_gains(d, down)) / (2 * h) * nominal[j])
        for i, (label, _g_expr, _g_val) in enumerate(entries):
            for j, name in enumerate(names):
                val = None if base[i] == 0 else float(cols[j][i] / base[i])
                out.append(GainSensitivity(label, name, None, val))
    else:
        method = "not computed"
        if params:
            notes.append(
                "sensitivities are not computed for several inputs or outputs without closed forms"
                " (the gains are not unique)"
            )
    zero = (
        sorted({e.gain for e in out if e.value is None and e.parameter == names[0]})
        if names
        else []
    )
    if zero:
        notes.append(
            "no relative sensitivity for "
            + ", ".join(zero)
            + ": the gain is zero at the nominal values"
        )
    return SensitivityTable(
        tuple(out), tuple(lab for lab, _g, _v in entries), names, method, tuple(notes)
    )


# --------------------------------------------------------------------------
# The whole study
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class RobustnessReport:
    """Everything ``gainsmith robustness`` reports."""

    derivation: Derivation
    mismatch: MismatchStudy
    stability: StateFeedbackStability
    sensitivities: SensitivityTable
    margins: MarginComparison | None
    checks: tuple[Check, ...]
    notes: tuple[str, ...]
    points: int
    timings: dict[str, float] = field(default_factory=dict, compare=False)
    #: the shipped controller's stability (nominal, over the ranges) and margins
    #: (:func:`symbolic.analysis.verdict.robustness_table`); None when not computed
    shipped: Any = None

    @property
    def passed(self) -> bool:
        """No unstable point, margins computed, every check passed, and the shipped controller
        stable over the ranges with its margins met."""
        return (
            self.mismatch.all_stable
            and self.margins is not None
            and all(c.passed is not False for c in self.checks)
            and (self.shipped is None or self.shipped.passed)
        )


CAUTION = (
    "These results describe the linear model. Before a loop built from these gains drives a"
    " machine that moves, heats or flies, test it on the real plant with reduced limits and an"
    " independent emergency stop: saturation, sampling delay, sensor noise and unmodelled dynamics"
    " erode these margins."
)


def robustness_study(
    d: Derivation, points: int = 5, *, budget: float | None = None, factor: bool = True
) -> RobustnessReport:
    """Mismatch study, Routh–Hurwitz conditions, sensitivities and margins of a derivation.

    The sensitivities always come from :func:`gain_sensitivities` with the exact
    derivatives of the closed-form gains when these exist, so ``gainsmith robustness`` and
    the memo print the same numbers; ``factor=False`` (the memo, which prints the
    sensitivities as numbers only) merely skips factoring their formulas for display.
    """
    import time

    timings = {}
    t = time.perf_counter()
    study = mismatch_study(d, points)
    timings["mismatch"] = time.perf_counter() - t
    t = time.perf_counter()
    stability = state_feedback_stability(d, study)
    timings["routh_hurwitz"] = time.perf_counter() - t
    t = time.perf_counter()
    sens = gain_sensitivities(d, budget=budget, factor=factor)
    timings["sensitivities"] = time.perf_counter() - t
    t = time.perf_counter()
    notes: list[str] = list(sens.notes)
    margins = None
    if d.plant.B.shape[1] == 1:
        margins = compare_margins(d)
        notes.extend(margins.notes)
        for r in (margins.state_feedback, margins.observer_based):
            notes.extend(r.notes)
    else:
        notes.append(
            "stability margins are computed for single-input plants only (the loop broken at the"
            " plant input); this plant has several inputs"
        )
    timings["margins"] = time.perf_counter() - t
    checks = list(study.checks)
    if margins is not None:
        checks.extend(margins.checks)
        checks.extend(margins.state_feedback.checks)
        checks.extend(margins.observer_based.checks)
    if not study.grid.varied:
        notes.append("no parameter has a range: the mismatch study has only the nominal point")
    from ..verification.shipped import shipped_controller
    from .verdict import robustness_table

    t = time.perf_counter()
    shipped = robustness_table(d, shipped_controller(d), points)
    timings["shipped"] = time.perf_counter() - t
    return RobustnessReport(
        shipped=shipped,
        derivation=d,
        mismatch=study,
        stability=stability,
        sensitivities=sens,
        margins=margins,
        checks=tuple(checks),
        notes=tuple(notes),
        points=points,
        timings=timings,
    )


# --------------------------------------------------------------------------
# Output
# --------------------------------------------------------------------------
def _clean(x) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _margin_json(r: MarginReport) -> dict:
    return {
        "gain_margin_db_upper": _clean(r.gain_margin_db_upper),
        "gain_margin_db_lower": _clean(r.gain_margin_db_lower),
        "gain_factor_upper": _clean(r.gain_factor_upper),
        "gain_factor_lower": _clean(r.gain_factor_lower),
        "phase_margin_deg": _clean(r.phase_margin_deg),
        "delay_margin_s": _clean(r.delay_margin_s),
        "crossover_rad_s": _clean(r.crossover_rad_s),
        "gain_crossovers_rad_s": [float(w) for w in r.gain_crossovers_rad_s],
        "phase_margins_deg": [float(p) for p in r.phase_margins_deg],
        "phase_crossovers_rad_s": [float(w) for w in r.phase_crossovers_rad_s],
        "open_loop_unstable_poles": r.open_loop_unstable_poles,
        "imaginary_axis_poles": r.imaginary_axis_poles,
        "encirclements_counterclockwise": r.nyquist.counterclockwise,
        "nyquist_criterion_holds": r.nyquist.consistent,
        "closed_loop_stable": r.closed_loop_stable,
    }


def _check_json(c: Check) -> dict:
    return {
        "name": c.name,
        "value": _clean(c.value),
        "tolerance": c.tolerance,
        "passed": c.passed,
        "note": c.note,
    }


def _sensitivity_values(table: SensitivityTable) -> dict[str, dict[str, float | None]]:
    """``{gain: {parameter: value}}``, None where the gain is zero at the nominal values."""
    sens: dict[str, dict[str, float | None]] = {}
    for e in table.entries:
        sens.setdefault(e.gain, {})[e.parameter] = _clean(e.value)
    return sens


def robustness_json(r: RobustnessReport) -> dict:
    """The machine-readable result of ``gainsmith robustness --json``."""
    m = r.mismatch
    sens = _sensitivity_values(r.sensitivities)
    return {
        "title": r.derivation.design.title,
        "design_file": r.derivation.design.path,
        "mismatch": {
            "points": int(m.grid.values.shape[0]),
            "grid_points_per_parameter": r.points,
            "varied": list(m.grid.varied),
            "unstable_points": list(m.unstable_points),
            "unstable_count": m.unstable_count,
            "worst_damping_ratio": _clean(m.worst_damping_ratio),
            "worst_damping_at": m.worst_damping_at,
            "least_stable_pole": [float(m.least_stable_pole.real), float(m.least_stable_pole.imag)],
            "at": m.least_stable_at,
            "nominal_poles": [
                [float(z.real), float(z.imag)]
                for z in sorted(m.nominal_poles, key=lambda z: (z.real, z.imag))
            ],
            "state_feedback_unstable_count": int(np.sum(~m.state_feedback_stable)),
            "stability_changes": [c.text() for c in m.changes],
        },
        "routh_hurwitz": list(r.stability.lines),
        "sensitivities": sens,
        "sensitivity_method": r.sensitivities.method,
        "margins": None
        if r.margins is None
        else {
            "state_feedback": _margin_json(r.margins.state_feedback),
            "observer_based": _margin_json(r.margins.observer_based),
        },
        "checks": [_check_json(c) for c in r.checks],
        "notes": list(r.notes),
        "caution": CAUTION,
        "shipped_controller": None if r.shipped is None else r.shipped.to_json(),
        "passed": r.passed,
    }


def _db_text(x: float | None) -> str:
    return "none" if x is None else f"{x:.3g} dB"


def _pair_text(z: complex) -> str:
    """A pole as text, a complex one as the member of its pair above the real axis."""
    z = complex(z)
    text = format_pole(complex(z.real, abs(z.imag)))
    return text + " (and its conjugate)" if text.endswith("j") else text


def _point_text(p: Mapping[str, float], only: Sequence[str] | None = None) -> str:
    keys = list(only) if only else list(p)
    return ", ".join(f"{k} = {_g(p[k])}" for k in keys) if keys else "nominal values"


def margin_rows(c: MarginComparison) -> list[tuple[str, str, str]]:
    """(quantity, state feedback, observer-based) rows of the side-by-side table."""

    def pm(r: MarginReport) -> str:
        return "none (no crossover)" if r.phase_margin_deg is None else f"{r.phase_margin_deg:.3g}°"

    def ms(x: float | None, unit: str, digits: int = 4) -> str:
        return "none" if x is None else f"{x:.{digits}g} {unit}"

    def gf(r: MarginReport) -> str:
        lo = "0" if r.gain_factor_lower is None else f"{r.gain_factor_lower:.4g}"
        hi = "∞" if r.gain_factor_upper is None else f"{r.gain_factor_upper:.4g}"
        return f"({lo}, {hi})"

    a, b = c.state_feedback, c.observer_based
    rows = [
        ("stable gain factors k", gf(a), gf(b)),
        (
            "upper gain margin (gain may grow by)",
            _db_text(a.gain_margin_db_upper),
            _db_text(b.gain_margin_db_upper),
        ),
        (
            "lower gain margin (gain may shrink by)",
            _db_text(a.gain_margin_db_lower),
            _db_text(b.gain_margin_db_lower),
        ),
        ("phase margin", pm(a), pm(b)),
        ("at gain crossover", ms(a.crossover_rad_s, "rad/s"), ms(b.crossover_rad_s, "rad/s")),
        ("delay margin", ms(a.delay_margin_s, "s"), ms(b.delay_margin_s, "s")),
        (
            "open-loop unstable poles P",
            str(a.open_loop_unstable_poles),
            str(b.open_loop_unstable_poles),
        ),
        ("poles on the imaginary axis", str(a.imaginary_axis_poles), str(b.imaginary_axis_poles)),
        (
            "encirclements of −1 (counter-clockwise)",
            str(a.nyquist.counterclockwise),
            str(b.nyquist.counterclockwise),
        ),
    ]
    return rows


def robustness_text(r: RobustnessReport) -> str:
    """The terminal report."""
    d = r.derivation
    m = r.mismatch
    out: list[str] = []
    w = out.append
    w(f"{d.design.title}: robustness study")
    w(f"design file {d.design.path}")
    w("")
    w("Parameter mismatch (K, N and L designed at the nominal values; the true plant varies)")
    g = m.grid
    if g.varied:
        w(
            f"  grid: {g.size} points ({r.points} per range over {', '.join(g.varied)}; corners"
            " included) and the nominal point; other parameters nominal"
        )
    else:
        w("  no parameter has a range: only the nominal point")
    n = d.plant.A.shape[0]
    total = g.values.shape[0]
    if m.all_stable:
        w(f"  observer-based loop (order {2 * n}): stable at all {total} points")
    else:
        w(
            f"  observer-based loop (order {2 * n}): UNSTABLE at {m.unstable_count} of {total} points"
        )
        for p in m.unstable_points:
            w(f"    unstable at {_point_text(p, g.varied)}")
    sf_bad = int(np.sum(~m.state_feedback_stable))
    w(
        f"  state feedback with the true state (order {n}): "
        + ("stable at every point" if sf_bad == 0 else f"unstable at {sf_bad} of {total} points")
        + " (for comparison)"
    )
    w(
        f"  worst damping ratio {m.worst_damping_ratio:.4g} at"
        f" {_point_text(m.worst_damping_at, g.varied)}"
    )
    w(
        f"  least stable pole {_pair_text(m.least_stable_pole)} at"
        f" {_point_text(m.least_stable_at, g.varied)}"
    )
    w(
        "  nominal point: "
        + format_poles(_sorted_poles(m.nominal_poles))
        + " (the controller and observer poles)"
    )
    w("")
    w("Routh–Hurwitz")
    for line in r.stability.lines:
        for part in textwrap.wrap(line, 100, subsequent_indent="    ") or [""]:
            w("  " + part)
    w("")
    s = r.sensitivities
    w(f"Normalised sensitivities (p/g)·∂g/∂p at the nominal values [{s.method}]")
    if s.entries:
        width = max(10, *(len(p) + 2 for p in s.parameters))
        w("  " + "gain".ljust(10) + "".join(p.rjust(width) for p in s.parameters))
        for gname in s.gains:
            cells = []
            for p in s.parameters:
                v = s.value(gname, p)
                cells.append(("-" if v is None else f"{v:.4g}").rjust(width))
            w("  " + gname.ljust(10) + "".join(cells))
    else:
        w("  (none)")
    w("")
    w("Stability margins, loop broken at the plant input")
    if r.margins is None:
        w("  not computed (several inputs)")
    else:
        rows = margin_rows(r.margins)
        w1 = max(len(q) for q, _a, _b in rows) + 2
        w2 = max(16, *(len(a) + 2 for _q, a, _b in rows))
        w("  " + "".ljust(w1) + "state feedback".ljust(w2) + "observer-based")
        for q, a, b in rows:
            w("  " + q.ljust(w1) + a.ljust(w2) + b)
    w("")
    w("Checks")
    for c in r.checks:
        status = {True: "pass", False: "FAIL", None: "n/a "}[c.passed]
        val = "" if c.value is None else f"  {c.value:.2e}"
        tol = "" if c.tolerance is None else f" <= {c.tolerance:.0e}"
        w(f"  {status}  {c.name}{val}{tol}" + (f"  ({c.note})" if c.note else ""))
    if r.notes:
        w("")
        w("Notes")
        for note in r.notes:
            w("  - " + note)
    if r.shipped is not None:
        from .study import requirements_text

        w("")
        out.extend(requirements_text(r.shipped))
    w("")
    w("Caution: " + CAUTION)
    w("")
    if r.passed:
        w("stable at every point of the study; margins met")
    elif r.shipped is not None and not r.shipped.passed:
        w("THE SHIPPED CONTROLLER FAILS: " + "; ".join(r.shipped.open_items))
    elif not m.all_stable:
        w("UNSTABLE SOMEWHERE IN THE PARAMETER RANGES")
    elif r.margins is None:
        w("no margins: not a single-input design")
    else:
        w("SOME CHECKS FAILED")
    return "\n".join(out)


def _sorted_poles(poles: np.ndarray) -> list[complex]:
    """Slowest first; a conjugate pair together, the member above the real axis first."""
    return sorted((complex(z) for z in poles), key=lambda z: (-z.real, abs(z.imag), -z.imag))


def run_robustness(design: Design, points: int = 5, as_json: bool = False) -> int:
    """The ``gainsmith robustness`` command.

    Returns 0 when every point of the study is stable and the margins exist,
    1 otherwise (an unstable point, a plant with several inputs, or a failed
    check).  Bad input raises :class:`~symbolic.runtime.errors.DesignFileError`
    (exit code 2 from the command line).
    """
    from ..render.report import dumps

    parameter_grid(design, points)  # refuse a bad grid before the derivation
    d = derive(design)
    r = robustness_study(d, points)
    if as_json:
        print(dumps(robustness_json(r)))
    else:
        print(robustness_text(r))
    return 0 if r.passed else 1


# --------------------------------------------------------------------------
# For the memo
# --------------------------------------------------------------------------
def memo_robustness(
    d: Derivation, points: int = 5, *, budget: float | None = None
) -> tuple[dict, dict[str, bytes]]:
    """Plain data of the memo's robustness section, and its figures (PDF and PNG).

    Returns
    -------
    context : dict
        Strings, numbers, lists and dicts only (no LaTeX markup except in
        keys ending in ``_latex``, which hold ``sympy.latex`` output of our
        own expressions); the memo escapes and lays it out.
    figures : dict
        ``{file name: bytes}`` from :func:`symbolic.render.figures.figure_files`.
    """
    from ..render import figures as _figures
    from ..render import robust_figures as rf

    # the memo shows the sensitivities as numbers: the same exact derivatives as the
    # robustness command, only their formulas are not factored
    r = robustness_study(d, points, budget=budget, factor=False)
    m = r.mismatch
    name = d.design.slug
    makers = {
        f"{name}-mismatch-poles": functools.partial(  # pickles: the figure server draws it
            rf.mismatch_pole_figure,
            m.poles[:-1] if m.grid.varied else m.poles,
            m.stable[:-1] if m.grid.varied else m.stable,
            d.controller_poles.values,
            d.observer_poles.values,
        )
    }
    captions = []
    captions.append(
        {
            "stem": f"{name}-mismatch-poles",
            "caption": (
                f"Closed-loop poles of the observer-based loop at {m.grid.values.shape[0]} parameter"
                " points (controller and observer designed at the nominal values); nominal"
                " controller poles are crosses, observer poles circles, poles at unstable points"
                " triangles."
            ),
        }
    )
    margins_ctx = None
    if r.margins is not None:
        loops = (r.margins.state_feedback, r.margins.observer_based)
        makers[f"{name}-loop-bode"] = functools.partial(rf.loop_magnitude_phase_figure, loops)
        makers[f"{name}-loop-nyquist"] = functools.partial(rf.loop_polar_figure, loops)
        captions.append(
            {
                "stem": f"{name}-loop-bode",
                "caption": (
                    "Bode plot of the loop broken at the plant input: state feedback with the true"
                    " state (solid) and the observer-based compensator (dashed); gain crossovers"
                    " are marked by circles and phase crossovers by diamonds."
                ),
            }
        )
        captions.append(
            {
                "stem": f"{name}-loop-nyquist",
                "caption": (
                    "Nyquist plot of both loops (ω from −∞ to ∞; the mirror image for negative ω"
                    " is drawn thin) with the unit circle and the critical point −1; right: near −1."
                ),
            }
        )
        margins_ctx = {
            "headers": ["quantity", "state feedback", "observer-based"],
            "rows": [list(row) for row in margin_rows(r.margins)],
            "state_feedback": _margin_json(r.margins.state_feedback),
            "observer_based": _margin_json(r.margins.observer_based),
            "definitions": (
                "The loop is broken at the plant input and multiplied by a gain factor k; the"
                " closed loop is stable for k between the two limits (confirmed by its eigenvalues"
                " on both sides of each limit). Upper gain margin 20 log10(k_high), lower"
                " 20 log10(1/k_low). Phase margin arg L(jω_c) + 180° at each gain crossover ω_c (the"
                " one of least magnitude is shown); delay margin min((arg L(jω_c) + π) mod 2π)/ω_c."
                " The Nyquist criterion (encirclements of −1 = open-loop unstable poles) is"
                " verified for both loops."
            ),
        }
    figures = _figures.render_figures(makers)  # drawn in parallel, same bytes
    conds = []
    if r.stability.conditions is not None:
        for c in r.stability.conditions:
            conds.append(
                {
                    "name": c.name,
                    "text": c.text(),
                    "expression_latex": sp.latex(_rounded(c.reduced, 6)) + " > 0",
                    "assumption": c.assumption,
                }
            )
    ctx = {
        "points": r.points,
        "grid_size": m.grid.size,
        "varied": list(m.grid.varied),
        "all_stable": m.all_stable,
        "unstable_count": m.unstable_count,
        "unstable_points": [_point_text(p, m.grid.varied) for p in m.unstable_points],
        "worst_damping_ratio": m.worst_damping_ratio,
        "worst_damping_at": _point_text(m.worst_damping_at, m.grid.varied),
        "least_stable_pole": _pair_text(m.least_stable_pole),
        "least_stable_at": _point_text(m.least_stable_at, m.grid.varied),
        "stability_changes": [c.text() for c in m.changes],
        "routh_hurwitz": list(r.stability.lines),
        "routh_hurwitz_conditions": conds,
        "sensitivity_method": r.sensitivities.method,
        "sensitivities": _sensitivity_values(r.sensitivities),
        "sensitivity_headers": ["gain", *r.sensitivities.parameters],
        "sensitivity_gains_latex": _entry_labels(d, "tex"),
        "sensitivity_rows": [
            [g]
            + [
                "–" if r.sensitivities.value(g, p) is None else f"{r.sensitivities.value(g, p):.4g}"
                for p in r.sensitivities.parameters
            ]
            for g in r.sensitivities.gains
        ],
        "margins": margins_ctx,
        "checks": [_check_json(c) for c in r.checks],
        "notes": list(r.notes),
        "caution": CAUTION,
        "figures": captions,
        "passed": r.passed,
    }
    return ctx, figures
