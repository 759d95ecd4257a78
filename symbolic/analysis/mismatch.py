"""The mismatched loop: the controller and observer designed at the nominal values, the true
plant elsewhere in the parameter ranges.

With the plant ẋ = A_t x + B_t u, y = C_t x + D_t u, the observer
x̂' = A x̂ + B u + L (y − C x̂ − D u) and the control u = −K x̂ + N r, the
estimation error e = x − x̂ obeys (derived step by step in
:func:`mismatch_loop`; ΔA = A_t − A and so on)::

    ẋ = (A_t − B_t K) x + B_t K e + B_t N r
    ė = (ΔA − ΔB K − L (ΔC − ΔD K)) x + (A − L C + (ΔB − L ΔD) K) e + (ΔB − L ΔD) N r

The lower-left block, the *coupling* ΔA − ΔB K − L (ΔC − ΔD K), is what
breaks the separation principle: it vanishes when the true plant equals the
model, and the matrix becomes the block-triangular separated loop whose
eigenvalues are the controller and observer poles.  :func:`mismatch_study`
computes the eigenvalues of this loop at every point of the parameter grid
(:mod:`symbolic.analysis.parameter_grid`).

References
----------
.. [1] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
   Sec. 10-5 (observer-based control, the separation of controller and observer poles).
.. [2] D. G. Luenberger, "An introduction to observers", *IEEE Transactions
   on Automatic Control* 16(6):596–602, 1971. doi:10.1109/TAC.1971.1099826
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..derivation.checks import eigenvalue_check
from ..model.results import Check, Derivation
from ..runtime.errors import DesignFileError
from .parameter_grid import ParameterGrid, evaluate_on_grid, parameter_grid

__all__ = [
    "MismatchAssembler",
    "MismatchLoop",
    "MismatchStudy",
    "StabilityChange",
    "mismatch_loop",
    "mismatch_study",
]

#: Points evaluated per batch of eigenvalue computations (memory guard).
_CHUNK = 20_000
#: Unstable points listed by name in the report.
LISTED_POINTS = 5
#: Stability changes between grid neighbours refined by bisection and listed.
LISTED_CHANGES = 8
#: A point is stable when every real part is below −STABILITY_TOLERANCE·max(1, spectral radius).
STABILITY_TOLERANCE = 1e-10


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


class MismatchAssembler:
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
    assembler: MismatchAssembler, grid: ParameterGrid, stable: np.ndarray, loop: str
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
        For a bad ``points``, a grid over
        :data:`~symbolic.analysis.parameter_grid.MAX_GRID_POINTS`, or a plant entry that is
        not finite somewhere in the ranges.
    """
    grid = parameter_grid(d.design, points)
    asm = MismatchAssembler(d, grid)
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
