"""The zero-order-hold model: ``Φ = e^{AT}``, ``Γ = ∫₀ᵀ e^{Aτ} dτ B`` in closed form and in numbers.

A computer samples y every T seconds and holds u constant between samples (zero-order hold,
ZOH).  At the sample instants the plant is then exactly

.. math::  x[k+1] = \\Phi x[k] + \\Gamma u[k],\\qquad y[k] = C x[k] + D u[k],\\qquad
           \\Phi = e^{AT},\\quad \\Gamma = \\int_0^T e^{A\\tau}\\,d\\tau\\, B,

both read from one exponential, ``expm([[A, B], [0, 0]] T) = [[Φ, Γ], [0, I]]`` (Van Loan [3]).
A continuous pole s maps to ``z = e^{sT}`` [1] (:func:`discrete_coefficients`).

References
----------
.. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998: Sec. 4.3 (ZOH equivalent, discrete state equations) --
   section numbers from memory.
.. [2] K. Ogata, *Discrete-Time Control Systems*, 2nd ed., Prentice Hall, 1995, Sec. 5-5
   (discretisation of continuous-time state-space equations) -- from memory.
.. [3] C. F. Van Loan, "Computing integrals involving the matrix exponential", *IEEE
   Transactions on Automatic Control* 23(3):395-404, 1978. doi:10.1109/TAC.1978.1101743
.. [4] E. J. Putzer, "Avoiding the Jordan canonical form in the discussion of linear systems
   with constant coefficients", *The American Mathematical Monthly* 73(1):2-7, 1966.
   doi:10.2307/2313914
"""

from __future__ import annotations

import numpy as np
import sympy as sp

from ..model.numbers import format_pole
from ..runtime.errors import StructureError

__all__ = [
    "SIMPLIFY_LIMIT",
    "ZOH_BY_INTERPOLATION",
    "ZOH_BY_JORDAN_FORM",
    "discrete_coefficients",
    "numeric_zero_order_hold",
    "split_roots",
    "z",
    "zero_order_hold",
    "zero_order_hold_and_method",
]

#: Entries of the closed-form Φ, Γ with more operations than this are left unsimplified.
SIMPLIFY_LIMIT = 60

z = sp.Symbol("z")


def split_roots(M: sp.Matrix) -> list[sp.Expr] | None:
    """Eigenvalues of ``M`` with multiplicity, equal ones adjacent, when its characteristic
    polynomial splits into linear factors over the field of its entries (None otherwise)."""
    charpoly = M.charpoly()
    x = charpoly.gens[0]
    numerator, _ = sp.fraction(sp.together(charpoly.as_expr()))
    try:
        factors = sp.factor_list(numerator)[1]
    except (sp.PolynomialError, NotImplementedError):  # not a polynomial SymPy can factor
        return None
    roots: list[sp.Expr] = []
    for factor, multiplicity in factors:
        if not factor.has(x):
            continue
        poly = sp.Poly(factor, x)
        if poly.degree() != 1:
            return None
        lead, const = poly.all_coeffs()
        roots.extend([sp.cancel(-const / lead)] * multiplicity)
    return roots if len(roots) == M.shape[0] else None


def _exponential_by_divided_differences(M: sp.Matrix, roots: list[sp.Expr]) -> sp.Matrix:
    """``e^M = Σ_k f[λ_1, …, λ_{k+1}] Π_{j≤k} (M − λ_j I)`` with ``f(λ) = e^λ`` (Newton's
    interpolation of the exponential at the eigenvalues, Putzer's algorithm [4]).

    ``roots`` are the eigenvalues with equal ones adjacent; a divided difference over ``k + 1``
    equal points is the derivative ``e^λ / k!``.  Distinct factors of the characteristic
    polynomial have generically distinct roots: where they meet at particular parameter values
    the closed form is 0/0 there, which the numeric comparison then reports.
    """
    n = M.shape[0]
    memo: dict[tuple[int, int], sp.Expr] = {}

    def divided(i: int, j: int) -> sp.Expr:
        if (i, j) not in memo:
            if roots[i] == roots[j]:  # the group of equal roots is contiguous
                memo[i, j] = sp.exp(roots[i]) / sp.factorial(j - i)
            else:
                memo[i, j] = (divided(i + 1, j) - divided(i, j - 1)) / (roots[j] - roots[i])
        return memo[i, j]

    product = sp.eye(n)
    E = sp.zeros(n, n)
    for k in range(n):
        E += divided(0, k) * product
        product = product * (M - roots[k] * sp.eye(n))
    return E


def _tidy_exponential_entry(e: sp.Expr) -> sp.Expr:
    """Gather the terms of each exponential over one factored coefficient:
    ``(1 − e^{−aT})/a`` comes out as ``1/a − e^{−aT}/a`` rather than over a common
    denominator with ``e^{aT}`` in it."""
    atoms = sorted(e.atoms(sp.exp), key=sp.default_sort_key)
    if not atoms:
        return sp.factor(e)
    marks = sp.symbols(f"_e0:{len(atoms)}", cls=sp.Dummy)
    numerator, denominator = sp.fraction(sp.cancel(e.xreplace(dict(zip(atoms, marks)))))
    if denominator.has(*marks):  # not a sum of exponentials over a polynomial
        return e
    terms = sp.Poly(numerator, *marks).terms()
    return sp.Add(
        *(
            sp.factor(coeff / denominator)
            * sp.powsimp(sp.Mul(*(a**k for a, k in zip(atoms, powers))))
            for powers, coeff in terms
        )
    )


def zero_order_hold(A, B, T) -> tuple[sp.Matrix, sp.Matrix]:
    """ZOH equivalent in closed form: ``Φ = e^{AT}``, ``Γ = ∫₀ᵀ e^{Aτ} dτ B``.

    Parameters
    ----------
    A, B : sympy.Matrix
        May contain parameters.
    T : sympy.Expr
        The sample time, a positive number or symbol.

    Returns
    -------
    (Phi, Gamma) : sympy.Matrix
        From ``exp([[A, B], [0, 0]] T)`` (Van Loan [3]).  When the characteristic polynomial
        of that matrix splits into linear factors over the parameters (real poles given by
        rational expressions: integrators, lags), by Newton's interpolation of the exponential
        at its eigenvalues (Putzer [4]), tens of milliseconds; otherwise by SymPy's matrix
        exponential (Jordan form, seconds), complex exponentials rewritten as sines and
        cosines.  Unbounded: run it under :func:`symbolic.runtime.budget.run_bounded`.

    References
    ----------
    Franklin, Powell and Workman [1] Sec. 4.3; Putzer [4].

    Examples
    --------
    >>> T = sp.Symbol("T", positive=True)
    >>> zero_order_hold(sp.Matrix([[0, 1], [0, 0]]), sp.Matrix([0, 1]), T)
    (Matrix([
    [1, T],
    [0, 1]]), Matrix([
    [T**2/2],
    [     T]]))
    """
    Phi, Gamma, _ = zero_order_hold_and_method(A, B, T)
    return Phi, Gamma


#: How :func:`zero_order_hold` found the exponential, as the digital controller reports it.
ZOH_BY_INTERPOLATION = "Putzer's method"  # the exponential interpolated at the eigenvalues
ZOH_BY_JORDAN_FORM = "SymPy's matrix exponential"  # by the Jordan form


def zero_order_hold_and_method(A, B, T) -> tuple[sp.Matrix, sp.Matrix, str]:
    """:func:`zero_order_hold` and how the exponential was found (:data:`ZOH_BY_INTERPOLATION`
    or :data:`ZOH_BY_JORDAN_FORM`)."""
    A, B = sp.Matrix(A), sp.Matrix(B)
    n, m = A.shape[0], B.shape[1]
    M = A.row_join(B).col_join(sp.zeros(m, n + m)) * T
    roots = split_roots(M)
    if roots is not None:
        E = _exponential_by_divided_differences(M, roots)
        tidy_entries = E.applyfunc(_tidy_exponential_entry)
        return tidy_entries[:n, :n], tidy_entries[:n, n:], ZOH_BY_INTERPOLATION
    E = M.exp()

    def tidy(e: sp.Expr) -> sp.Expr:
        if e.has(sp.I):
            e = e.rewrite(sp.cos)
        # simplify is cheap on the short entries of simple plants and slow (seconds) on the
        # long ones of a damped oscillator, where it hardly shortens them
        return sp.simplify(e) if sp.count_ops(e) <= SIMPLIFY_LIMIT else e

    return E[:n, :n].applyfunc(tidy), E[:n, n:].applyfunc(tidy), ZOH_BY_JORDAN_FORM


def discrete_coefficients(poles, T) -> tuple[sp.Expr, ...]:
    """Exact coefficients ``[1, …, a_0]`` of Π (z − e^{s_i T}), real by construction.

    A conjugate pair σ ± jω gives ``z² − 2 e^{σT} cos(ωT) z + e^{2σT}``.

    Examples
    --------
    >>> discrete_coefficients((-1 + 2*sp.I, -1 - 2*sp.I), sp.Rational(1, 10))
    (1, -2*exp(-1/10)*cos(1/5), exp(-1/5))
    """
    factors = []
    remaining = list(poles)
    while remaining:
        p = remaining.pop(0)
        re_, im_ = sp.re(p), sp.im(p)
        if im_ == 0:
            factors.append(z - sp.exp(re_ * T))
            continue
        conj = sp.conjugate(p)
        for i, q in enumerate(remaining):
            if sp.simplify(q - conj) == 0:
                remaining.pop(i)
                break
        else:
            raise StructureError(f"pole {format_pole(p, None)} has no conjugate", key="poles")
        w = abs(im_)
        factors.append(z**2 - 2 * sp.exp(re_ * T) * sp.cos(w * T) * z + sp.exp(2 * re_ * T))
    poly = sp.Poly(sp.expand(sp.Mul(*factors)), z)
    return tuple(poly.all_coeffs())


def numeric_zero_order_hold(
    A: np.ndarray, B: np.ndarray, T: float
) -> tuple[np.ndarray, np.ndarray]:
    """Φ and Γ from one ``scipy.linalg.expm`` of the augmented matrix (Van Loan [3])."""
    import scipy.linalg  # not at the top: derive leaves SciPy to the sidecar

    n, m = B.shape
    M = np.zeros((n + m, n + m))
    M[:n, :n] = A * T
    M[:n, n:] = B * T
    E = scipy.linalg.expm(M)
    return E[:n, :n], E[:n, n:]
