"""The coordinates of the reduced-order observer: the change ``x̄ = T x``, the partition and
the observer matrices, in numbers and in closed form.

:func:`coordinate_change` completes C to an invertible T and :func:`observer_matrices` builds
Â, B̂, F̂, Ĉ, D̂ for a gain on a partitioned model: the continuous plant
(:func:`symbolic.derivation.reduced.reduced_observer`), its ZOH model (the digital controller)
and the shipped controller use them alike.  :func:`closed_form_stage` derives the same in the
parameters, with K_e and the (2n − p) loop; it runs in a bounded child (or right after the
closed-form K in the main symbolic child, see
:func:`symbolic.derivation.reduced.closed_form_outcome`).  The formulas are those of
:mod:`symbolic.derivation.reduced`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp
from sympy.polys.matrices import DomainMatrix

from ..runtime.errors import StructureError
from . import closed_form as cf

__all__ = [
    "ReducedForms",
    "closed_form_stage",
    "coordinate_change",
    "observer_matrices",
    "transform_matrix",
]


def coordinate_change(C: np.ndarray) -> tuple[int, ...]:
    """Rows of the identity that complete ``C`` to an invertible ``T = [[C], [W]]``.

    Greedy: the identity rows are tried in order and kept when they raise the numeric rank.

    Raises
    ------
    StructureError
        Naming ``plant.C`` when C is not of full row rank (its outputs are not independent
        measurements).

    Examples
    --------
    >>> coordinate_change(np.array([[0.0, 0.0, 1.0]]))
    (0, 1)
    """
    p, n = C.shape
    rank = int(np.linalg.matrix_rank(C)) if np.all(np.isfinite(C)) else 0
    if rank < p:
        raise StructureError(
            f"a reduced-order observer needs the {p} outputs to be independent measurements,"
            f" but C has rank {rank} of {p} at the evaluated parameter values (an output repeats"
            ' or combines the others); remove the dependent output or use kind = "full"',
            key="plant.C",
        )
    rows = [C]
    chosen: list[int] = []
    current = rank
    for j in range(n):
        if current == n:
            break
        e = np.zeros((1, n))
        e[0, j] = 1.0
        trial = np.vstack(rows + [e])
        r = int(np.linalg.matrix_rank(trial))
        if r > current:
            rows.append(e)
            chosen.append(j)
            current = r
    return tuple(chosen)


def observer_matrices(Aaa, Aab, Aba, Abb, Ba, Bb, gain) -> tuple[np.ndarray, ...]:
    """``Â = A_bb − G A_ab``, ``B̂ = Â G + A_ba − G A_aa``, ``F̂ = B_b − G B_a`` and the maps
    ``Ĉ = [0; I]``, ``D̂ = [I; G]`` (with ``x̄ = Ĉ η + D̂ ȳ``) of the reduced-order observer of
    gain ``G`` on a partitioned model (Luenberger, see :mod:`symbolic.derivation.reduced`); the same for the plant in continuous time
    and for its ZOH model (Φ, Γ in place of A, B).
    """
    p, rest = Aaa.shape[0], Abb.shape[0]
    Ahat = Abb - gain @ Aab
    Bhat = Ahat @ gain + Aba - gain @ Aaa
    Fhat = Bb - gain @ Ba
    Chat = np.vstack([np.zeros((p, rest)), np.eye(rest)])
    Dhat = np.vstack([np.eye(p), gain])
    return Ahat, Bhat, Fhat, Chat, Dhat


def transform_matrix(C, rows: tuple[int, ...], n: int) -> sp.Matrix:
    """``T = [[C], [W]]`` in closed form, W the rows ``rows`` of the identity."""
    T = sp.Matrix(C)
    for j in rows:
        e = sp.zeros(1, n)
        e[0, j] = 1
        T = T.col_join(e)
    return T


def _inverse(M: sp.Matrix) -> sp.Matrix:
    dM = DomainMatrix.from_Matrix(sp.Matrix(M)).to_field()
    return dM.inv().to_Matrix()


def _simplified(M: sp.Matrix) -> sp.Matrix:
    return M.applyfunc(lambda e: sp.factor(sp.cancel(e)) if e.free_symbols else e)


@dataclass(frozen=True)
class ReducedForms:
    """The closed forms of the reduced-order observer (None where not derived: several
    outputs, every state measured, or no closed-form K)."""

    T: sp.Matrix
    T_inverse: sp.Matrix
    partition: dict[str, sp.Matrix]
    Ke: sp.Matrix | None
    observer: dict[str, sp.Matrix] | None
    closed_loop: sp.Matrix | None
    charpoly: tuple[sp.Expr, ...] | None
    factors: bool | None


def closed_form_stage(A, B, C, rows, K, coeffs_ro, coeffs_c) -> ReducedForms:
    """T, the partition, K_e by Ackermann's formula on (A_bbᵀ, A_abᵀ), Â, B̂, F̂ and, with
    the closed-form K, the (2n − p) loop and whether its polynomial is α_c(s)·α_ro(s)."""
    n, p = A.shape[0], C.shape[0]
    T = transform_matrix(C, rows, n)
    Ti = _inverse(T)
    Ab = _simplified(T * A * Ti)
    Bb = _simplified(T * B)
    part = {
        "A_aa": Ab[:p, :p],
        "A_ab": Ab[:p, p:],
        "A_ba": Ab[p:, :p],
        "A_bb": Ab[p:, p:],
        "B_a": Bb[:p, :],
        "B_b": Bb[p:, :],
    }
    if p != 1 or n - p == 0:
        return ReducedForms(T, Ti, part, None, None, None, None, None)
    steps = cf.ackermann(part["A_bb"].T, part["A_ab"].T, coeffs_ro, kind="observability")
    Ke = _simplified(steps.gain.T)
    Ahat = part["A_bb"] - Ke * part["A_ab"]
    Bhat = Ahat * Ke + part["A_ba"] - Ke * part["A_aa"]
    Fhat = part["B_b"] - Ke * part["B_a"]
    obs = {"A_hat": _simplified(Ahat), "B_hat": _simplified(Bhat), "F_hat": _simplified(Fhat)}
    loop = cp = ok = None
    if K is not None:
        Chat = sp.zeros(p, n - p).col_join(sp.eye(n - p))
        Dhat = sp.eye(p).col_join(Ke)
        K_eta = K * Ti * Chat
        K_y = K * Ti * Dhat
        # plant x' = A x + B u, u = -K_eta η - K_y ȳ + N r with ȳ = C x (the measured part)
        top = (A - B * K_y * C).row_join(-B * K_eta)
        bottom = (Bhat * C - Fhat * K_y * C).row_join(Ahat - Fhat * K_eta)
        loop = top.col_join(bottom)
        cp = cf.characteristic_coefficients(loop)
        s = cf.s
        want = sp.Poly(sp.Poly(coeffs_c, s) * sp.Poly(coeffs_ro, s), s).all_coeffs()
        ok = len(cp) == len(want) and all(
            sp.cancel(sp.together(a - b)) == 0 for a, b in zip(cp, want, strict=True)
        )
    return ReducedForms(T, Ti, part, Ke, obs, loop, cp, ok)
