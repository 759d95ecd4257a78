"""The eigenvalue check: conditioning-based tolerance and the 50-digit confirmation.

A correct gain must not be rejected because LAPACK's double-precision eigenvalues of an
ill-conditioned closed loop wander; a wrong gain must still be rejected.  Sources:

* F. L. Bauer and C. T. Fike, "Norms and exclusion theorems", *Numerische Mathematik*
  2:137–141, 1960: eigenvalues of M + E lie within κ(V)·‖E‖ of those of M.
* J. H. Wilkinson, *The Algebraic Eigenvalue Problem*, Oxford, 1965, Ch. 2 (from memory):
  a Jordan block of size k moves by about ‖E‖^(1/k).
* J. Ackermann, *Regelungstechnik* 20(7):297–300, 1972: the gain is the unique one whose
  loop has the requested characteristic polynomial (single output), the defining property
  checked here exactly with SymPy rationals.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

from symbolic import derive
from symbolic.derivation import numeric as _numeric
from symbolic.derivation.numeric import (
    DOUBLE_PRECISION_CEILING,
    EIGENVECTOR_CONDITION_LIMIT,
    check_eigenvalues,
    eigenvalue_tolerance,
    pole_residual,
)
from symbolic.input.reader import parse_design

#: The tolerance of the eigenvalue check before this change (simple poles).
OLD_TOLERANCE = 1e-6

#: Invented demo: a belt-driven two-cart positioner.  A motor with a current-loop lag tau
#: pushes cart 1 (m1); a belt of stiffness k and damping c couples it to cart 2 (m2), whose
#: position alone is measured.  States: x1, v1, x2, v2, motor force F.
CONTROLLER_POLES = ["-6", "-6", "-6", "-8+6j", "-8-6j"]  # a triple pole
OBSERVER_POLES = ["-400", "-401", "-402", "-403", "-404"]  # fast and clustered: L ~ 1e11
PARAMETERS = {"m1": "2", "m2": "3/2", "k": "180", "c": "4/5", "tau": "1/50"}
TWO_CART = f"""
title = "Belt-driven two-cart positioner"
[parameters.m1]
value = 2.0
[parameters.m2]
value = 1.5
[parameters.k]
value = 180.0
[parameters.c]
value = 0.8
[parameters.tau]
value = 0.02
[plant]
A = [[0, 1, 0, 0, 0],
     ["-k/m1", "-c/m1", "k/m1", "c/m1", "1/m1"],
     [0, 0, 0, 1, 0],
     ["k/m2", "c/m2", "-k/m2", "-c/m2", 0],
     [0, 0, 0, 0, "-1/tau"]]
B = [[0], [0], [0], [0], ["1/tau"]]
C = [[0, 0, 1, 0, 0]]
[controller]
poles = {CONTROLLER_POLES!r}
[observer]
poles = {OBSERVER_POLES!r}
""".replace("'", '"')


def exact_plant():
    m1, m2, k, c, tau = (sp.Rational(PARAMETERS[n]) for n in ("m1", "m2", "k", "c", "tau"))
    A = sp.Matrix(
        [
            [0, 1, 0, 0, 0],
            [-k / m1, -c / m1, k / m1, c / m1, 1 / m1],
            [0, 0, 0, 1, 0],
            [k / m2, c / m2, -k / m2, -c / m2, 0],
            [0, 0, 0, 0, -1 / tau],
        ]
    )
    B = sp.Matrix([0, 0, 0, 0, 1 / tau])
    C = sp.Matrix([[0, 0, 1, 0, 0]])
    return A, B, C


def requested_polynomial(poles, s):
    return sp.Poly(sp.expand(sp.Mul(*[s - sp.sympify(p.replace("j", "*I")) for p in poles])), s)


def exact_gain(M, G, poles, side):
    """Gain by matching the coefficients of det(sI − M + G·gain) (or gain·G) with the
    requested polynomial, solved exactly (independent of gainsmith's Ackermann code)."""
    s = sp.Symbol("s")
    n = M.shape[0]
    g = sp.symbols(f"g0:{n}")
    gain = sp.Matrix([g]) if side == "K" else sp.Matrix(g)
    loop = M - G * gain if side == "K" else M - gain * G
    have = loop.charpoly(s).all_coeffs()
    want = requested_polynomial(poles, s).all_coeffs()
    (solution,) = sp.linsolve([sp.expand(a - b) for a, b in zip(have, want)], g)
    return gain.subs(dict(zip(g, solution)))


@pytest.fixture(scope="module")
def two_cart():
    return derive(parse_design(TWO_CART.encode(), "two_cart.toml", None), budget=0)


# --------------------------------------------------------------------------
# (a) a correct design that the old tolerance rejected
# --------------------------------------------------------------------------
def test_old_tolerance_rejects_the_two_cart_observer(two_cart):
    d = two_cart
    M = d.plant.A - d.L.value @ d.plant.C
    residual = pole_residual(np.linalg.eigvals(M), d.observer_poles.values)
    assert residual > OLD_TOLERANCE  # 5e-5 on this machine: the old check said FAIL


def test_two_cart_design_now_passes_all_checks(two_cart):
    d = two_cart
    assert d.passed, [c for c in d.checks if c.passed is False]
    check = next(c for c in d.checks if c.name.startswith("eigenvalues of A − LC"))
    assert "confirmed in 50-digit arithmetic" in check.note
    assert check.value <= check.tolerance


@pytest.mark.parametrize("side", ["K", "L"])
def test_two_cart_gains_are_the_exact_gains_rounded(two_cart, side):
    # Independent check: coefficient matching in exact rationals (Ackermann 1972: the gain
    # with the requested characteristic polynomial is unique for one input / one output).
    d = two_cart
    A, B, C = exact_plant()
    if side == "K":
        exact = exact_gain(A, B, CONTROLLER_POLES, "K")
        got, poles, G = d.K.value, CONTROLLER_POLES, B
    else:
        exact = exact_gain(A, C, OBSERVER_POLES, "L")
        got, poles, G = d.L.value, OBSERVER_POLES, C
    want = np.array(exact.evalf(30).tolist(), dtype=float).reshape(got.shape)
    np.testing.assert_array_max_ulp(got, want, maxulp=2)
    # the exact gain gives the requested polynomial identically
    s = sp.Symbol("s")
    loop = A - B * exact if side == "K" else A - exact * C
    assert sp.Poly(loop.charpoly(s).as_expr(), s) == requested_polynomial(poles, s)
    # the float gain, converted exactly, gives it to within rounding
    F = sp.Matrix(got.shape[0], got.shape[1], [sp.Rational(float(x)) for x in got.ravel()])
    loop = A - G * F if side == "K" else A - F * G
    have = np.array([float(c) for c in sp.Poly(loop.charpoly(s).as_expr(), s).all_coeffs()])
    ref = np.array([float(c) for c in requested_polynomial(poles, s).all_coeffs()])
    assert np.max(np.abs(have - ref) / np.maximum(1.0, np.abs(ref))) < 1e-12


# --------------------------------------------------------------------------
# (b) a wrong gain is still rejected, also by the confirmation
# --------------------------------------------------------------------------
@pytest.mark.parametrize("entry", range(4))
def test_perturbed_observer_gain_is_rejected(two_cart, entry):
    d = two_cart
    A, C = d.plant.A, d.plant.C
    L = d.L.value.copy()
    L[entry, 0] *= 1 + 1e-3
    verdict = check_eigenvalues(
        A - L @ C,
        d.observer_poles.values,
        terms=(A, (L, C)),
        weights=np.abs(A) + np.abs(L) @ np.abs(C),
    )
    assert not verdict.passed
    assert verdict.confirmed and verdict.confirmed_residual > verdict.confirmed_tolerance
    assert "not confirmed" in verdict.explanation


@pytest.mark.parametrize("entry", range(5))
def test_perturbed_controller_gain_is_rejected(two_cart, entry):
    d = two_cart
    A, B = d.plant.A, d.plant.B
    K = d.K.value.copy()
    K[0, entry] *= 1 + 1e-3
    verdict = check_eigenvalues(A - B @ K, d.controller_poles.values, terms=(A, (B, K)))
    assert not verdict.passed
    assert verdict.confirmed and verdict.confirmed_residual > verdict.confirmed_tolerance


# --------------------------------------------------------------------------
# (c) the tolerance grows with κ(V) and with ‖K‖
# --------------------------------------------------------------------------
def matrix_with_condition(kappa: float, poles=(-1.0, -2.0, -3.0)) -> np.ndarray:
    """V diag(poles) V⁻¹ with κ₂(V) ≈ kappa (columns of unit length)."""
    t = 1.0 / kappa
    V = np.array([[1.0, 1.0, 0.0], [0.0, t, 0.0], [0.0, 0.0, 1.0]])
    V /= np.linalg.norm(V, axis=0)
    return V @ np.diag(poles) @ np.linalg.inv(V)


def test_tolerance_grows_with_the_eigenvector_condition_number():
    poles = [-1.0, -2.0, -3.0]
    size = (np.eye(3) * 1e5,)  # fixed parts: only κ(V) changes
    kappas = [3e4, 1e5, 3e5]
    tols = [
        eigenvalue_tolerance(poles, matrix=matrix_with_condition(k), terms=size) for k in kappas
    ]
    measured = [_numeric.eigenvector_condition(matrix_with_condition(k)) for k in kappas]
    assert all(a < b for a, b in zip(measured, measured[1:]))
    assert all(a < b for a, b in zip(tols, tols[1:])), tols
    assert tols[0] > OLD_TOLERANCE and tols[-1] <= DOUBLE_PRECISION_CEILING


def test_tolerance_grows_with_the_gain_norm():
    M = matrix_with_condition(1e3)
    poles = [-1.0, -2.0, -3.0]
    A, B = np.eye(3), np.ones((3, 1))
    tols = [
        eigenvalue_tolerance(poles, matrix=M, terms=(A, (B, np.full((1, 3), g))))
        for g in (1e6, 3e6, 1e7)
    ]
    assert all(a < b for a, b in zip(tols, tols[1:])), tols
    assert tols[-1] > OLD_TOLERANCE


def test_well_conditioned_loops_keep_the_old_tolerance():
    # a normal matrix (κ(V) = 1) of moderate size: the 1e-6 floor, as before
    M = np.diag([-1.0, -2.0, -3.0])
    assert eigenvalue_tolerance([-1, -2, -3], matrix=M) == OLD_TOLERANCE
    assert eigenvalue_tolerance([-1, -2, -3]) == OLD_TOLERANCE
    # repeated poles keep the multiplicity rule (1e-13)^(1/m) as their floor
    assert eigenvalue_tolerance([-2, -2, -1], matrix=M) >= 1e-13**0.5


def test_unreliable_eigenvectors_do_not_loosen_the_check():
    # beyond the limit the computed κ(V) means nothing: no Bauer–Fike widening, the
    # 50-digit confirmation decides
    size = (np.eye(3) * 1e5,)
    trusted, unreliable = matrix_with_condition(1e7), matrix_with_condition(1e12)
    assert _numeric.eigenvector_condition(trusted) < EIGENVECTOR_CONDITION_LIMIT
    assert _numeric.eigenvector_condition(unreliable) > EIGENVECTOR_CONDITION_LIMIT
    assert eigenvalue_tolerance([-1, -2, -3], matrix=trusted, terms=size) > 1e-5
    assert eigenvalue_tolerance([-1, -2, -3], matrix=unreliable, terms=size) == OLD_TOLERANCE


# --------------------------------------------------------------------------
# (d) the confirmation runs only when it is needed
# --------------------------------------------------------------------------
OGATA = """
[plant]
A = [[0, 1, 0], [0, 0, 1], [-1, -5, -6]]
B = [0, 0, 1]
C = [[1, 0, 0]]
[controller]
poles = ["-2+4j", "-2-4j", "-10"]
[observer]
poles = ["-20", "-21", "-22"]
"""


@pytest.fixture
def confirmation_calls(monkeypatch):
    calls = []
    real = _numeric.confirm_eigenvalues

    def spy(matrix, requested, **kw):
        calls.append(np.asarray(matrix).shape)
        return real(matrix, requested, **kw)

    monkeypatch.setattr(_numeric, "confirm_eigenvalues", spy)
    return calls


def test_no_confirmation_for_a_well_conditioned_design(confirmation_calls):
    # K. Ogata, Modern Control Engineering, 5th ed., 2010, Example 10-1 (from memory)
    d = derive(parse_design(OGATA.encode(), "ogata.toml", None), budget=0)
    assert d.passed
    assert confirmation_calls == []


def test_confirmation_for_the_ill_conditioned_observer(confirmation_calls):
    d = derive(parse_design(TWO_CART.encode(), "two_cart.toml", None), budget=0)
    assert d.passed
    assert (5, 5) in confirmation_calls  # A − LC was confirmed
    unconfirmed = [c for c in d.checks if c.name.startswith("eigenvalues") and not c.note]
    assert unconfirmed, "checks that pass in double precision are not confirmed"
