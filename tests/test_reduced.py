"""Reduced-order (Luenberger) observer: a published example, defining properties, bad input.

Every external number names its source beside it; invented plants are demos only.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.integrate
import sympy as sp

from symbolic import DesignFileError, StructureError, derive, parse_design
from symbolic.derivation.pole_rules import reduced_observer_poles
from symbolic.derivation.reduced_coordinates import coordinate_change
from symbolic.render.report import derivation_json, derivation_summary


def run(text: str):
    return derive(parse_design(text.encode(), "test.toml"), budget=0)


# --------------------------------------------------------------------------------------------
# Published example
# --------------------------------------------------------------------------------------------
# K. Ogata, Modern Control Engineering, 5th ed., Prentice Hall, 2010, Sec. 10-6, Example 10-8
# (minimum-order observer; from memory, confirmed by the hand calculation below):
#   A = [[0, 1, 0], [0, 0, 1], [-6, -11, -6]], B = [0, 0, 1]ᵀ, C = [1, 0, 0],
#   controller poles -2 ± j2√3, -6, observer poles -2 ± j2√3.
# By hand: A_bb = [[0, 1], [-11, -6]], A_ab = [1, 0]; det(sI − A_bb + Ke A_ab) with
# Ke = [k1, k2]ᵀ is s² + (6 + k1) s + 6 k1 + 11 + k2; matching (s + 2)² + 12 = s² + 4 s + 16
# gives k1 = −2, k2 = 17, so Ke = [−2, 17]ᵀ.  The controller gain, from the companion form,
# is K = [96 − 6, 40 − 11, 10 − 6] = [90, 29, 4] ((s² + 4s + 16)(s + 6) = s³ + 10s² + 40s + 96).
OGATA_10_8 = """
[plant]
A = [[0, 1, 0], [0, 0, 1], [-6, -11, -6]]
B = [[0], [0], [1]]
C = [[1, 0, 0]]
[controller]
poles = ["-2+3.46410161513775j", "-2-3.46410161513775j", "-6"]
[observer]
kind = "reduced"
poles = ["-2+3.46410161513775j", "-2-3.46410161513775j"]
"""


def test_ogata_example_10_8_minimum_order_observer():
    d = run(OGATA_10_8)
    ro = d.reduced_observer
    assert ro.order == 2 and ro.measured == 1
    np.testing.assert_allclose(ro.Ke[:, 0], [-2.0, 17.0], rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(d.K.value[0], [90.0, 29.0, 4.0], rtol=1e-12)
    assert d.passed


def test_exact_gain_with_integer_poles():
    # same plant, observer poles -10, -10: s² + (6 + k1) s + 6 k1 + 11 + k2 = s² + 20 s + 100
    # gives k1 = 14, k2 = 5 (hand calculation)
    text = OGATA_10_8.replace(
        'poles = ["-2+3.46410161513775j", "-2-3.46410161513775j"]', 'poles = ["-10", "-10"]'
    )
    ro = run(text).reduced_observer
    assert ro.Ke_closed_form == sp.Matrix([[14], [5]])


# --------------------------------------------------------------------------------------------
# Defining properties
# --------------------------------------------------------------------------------------------
# A two-mass conveyor of our own invention (demo values): motor and load inertias coupled by a
# belt of stiffness ks; the measured output is the belt stretch theta_m - theta_L plus the
# motor angle, so C is not of the form [I 0].
TWO_MASS = """
[parameters.J1]
value = 0.002
[parameters.J2]
value = 0.006
[parameters.ks]
value = 1.5
[plant]
A = [[0, 1, 0, 0], ["-ks/J1", 0, "ks/J1", 0], [0, 0, 0, 1], ["ks/J2", 0, "-ks/J2", 0]]
B = [[0], ["1/J1"], [0], [0]]
C = [[2, 0, -1, 0]]
[controller]
poles = ["-10+10j", "-10-10j", "-30", "-35"]
[observer]
kind = "reduced"
poles = ["-60+40j", "-60-40j", "-80"]
"""


def test_coordinate_change_makes_the_measured_states_explicit():
    d = run(TWO_MASS)
    ro = d.reduced_observer
    p, n = 1, 4
    np.testing.assert_allclose(
        d.plant.C @ ro.T_inverse, np.hstack([np.eye(p), np.zeros((p, n - p))]), atol=1e-12
    )
    assert coordinate_change(d.plant.C) == (0, 1, 3)


def test_separated_loop_factors_exactly():
    ro = run(TWO_MASS).reduced_observer
    assert ro.factors_as_expected is True
    assert ro.closed_loop.shape == (7, 7)  # 2n − p
    want = np.concatenate([[-10 + 10j, -10 - 10j, -30, -35], ro.pole_values])
    np.testing.assert_allclose(
        np.sort_complex(ro.closed_loop_poles), np.sort_complex(want), rtol=1e-8
    )


def test_observer_equations_track_the_state():
    # Run the implementation equations on the open-loop plant with an arbitrary input, from a
    # wrong initial guess: the estimation error must decay like the slowest observer pole.
    d = run(TWO_MASS)
    ro = d.reduced_observer
    A, B, C = d.plant.A, d.plant.B, d.plant.C
    n, k = 4, ro.order

    def u(t):
        return np.array([0.3 * np.sin(7 * t) + 0.1])

    def rhs(t, w):
        x, eta = w[:n], w[n:]
        y = C @ x
        return np.concatenate(
            [
                A @ x + B @ u(t),
                ro.observer_matrix @ eta + ro.output_input @ y + ro.control_input @ u(t),
            ]
        )

    x0 = np.array([0.2, -1.0, 0.1, 0.5])
    sol = scipy.integrate.solve_ivp(
        rhs,
        (0, 0.25),
        np.concatenate([x0, np.zeros(k)]),
        rtol=1e-10,
        atol=1e-12,
        dense_output=True,
    )

    def error(t):
        w = sol.sol(t)
        x, eta = w[:n], w[n:]
        xhat = ro.estimate_from_state @ eta + ro.estimate_from_output @ (C @ x)
        return np.linalg.norm(x - xhat)

    e0, e1 = error(0.0), error(0.25)
    assert e0 > 0.1
    # slowest observer pole -60 ± 40j: exp(-60 · 0.25) ≈ 3e-7, with room for the transient
    assert e1 < 1e-4 * e0


def test_compensator_has_a_direct_path_from_the_measurement():
    ro = run(TWO_MASS).reduced_observer
    F, G, H, J = ro.compensator
    assert F.shape == (3, 3) and G.shape == (3, 1) and H.shape == (1, 3) and J.shape == (1, 1)
    assert abs(J.item()) > 0
    assert "2n − p = 7" in ro.comparison and "noise" in ro.comparison.lower()


def test_several_outputs_numeric_gain():
    text = """
[plant]
A = [[0, 1, 0], [0, 0, 1], [-2, -3, -4]]
B = [[0], [0], [1]]
C = [[1, 0, 0], [0, 1, 0]]
[controller]
poles = [-2, -3, -4]
[observer]
kind = "reduced"
poles = [-9]
"""
    ro = run(text).reduced_observer
    assert ro.Ke.shape == (1, 2) and ro.Ke_closed_form is None
    eig = np.linalg.eigvals(ro.A_bb - ro.Ke @ ro.A_ab)
    np.testing.assert_allclose(eig, [-9.0], rtol=1e-10)
    assert "not unique" in ro.method


def test_all_states_measured():
    text = """
[plant]
A = [[0, 1], [-2, -3]]
B = [[0], [1]]
C = [[1, 0], [0, 1]]
[controller]
poles = [-4, -5]
[observer]
kind = "reduced"
speed_factor = 3
"""
    d = run(text)
    ro = d.reduced_observer
    assert ro.order == 0 and ro.Ke.shape == (0, 2)
    np.testing.assert_allclose(np.sort(ro.closed_loop_poles.real), [-5, -4], rtol=1e-12)


def test_pole_rule_keeps_pairs_together():
    poles, rule = reduced_observer_poles((-8 + 6 * sp.I, -8 - 6 * sp.I, -20, -25), 3)
    assert poles == (-8 + 6 * sp.I, -8 - 6 * sp.I, -20)
    poles, _ = reduced_observer_poles((-20, -8 + 6 * sp.I, -8 - 6 * sp.I), 2)
    assert poles == (-20, -10)  # one place left for a pair: -|p|
    assert "conjugate pairs together" in rule


def test_default_poles_from_the_full_observer():
    text = TWO_MASS.replace('poles = ["-60+40j", "-60-40j", "-80"]', "speed_factor = 4")
    d = run(text)
    ro = d.reduced_observer
    full = d.observer_poles.values
    np.testing.assert_allclose(np.sort_complex(ro.pole_values), np.sort_complex(full[:3]))


def test_report_sections():
    d = run(TWO_MASS)
    assert "Reduced-order observer" in derivation_summary(d)
    data = derivation_json(d)["reduced_observer"]
    assert data["order"] == 3 and len(data["Ke"]) == 3


# --------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------
def test_dependent_outputs_name_plant_c():
    # the second output is twice the first for every parameter value: caught by the loader
    text = """
[plant]
A = [[0, 1, 0], [0, 0, 1], [-6, -11, -6]]
B = [[0], [0], [1]]
C = [[1, 0, 0], [2, 0, 0]]
[controller]
poles = [-2, -3, -4]
[observer]
kind = "reduced"
poles = [-8]
"""
    with pytest.raises(StructureError) as info:
        parse_design(text.encode(), "test.toml")
    assert info.value.key == "plant.C" and info.value.path == "test.toml"
    assert "rank 1 of 2" in info.value.problem


def test_outputs_dependent_at_the_evaluated_values_name_plant_c():
    # C = [[1, 0, 0], [a, c, 0]] loses rank only where c = 0: found at the numbers
    with pytest.raises(StructureError) as info:
        coordinate_change(np.array([[1.0, 0.0, 0.0], [3.0, 0.0, 0.0]]))
    assert info.value.key == "plant.C" and "rank 1 of 2" in info.value.problem


@pytest.mark.parametrize(
    ("observer", "key", "words"),
    [
        ('kind = "minimal"', "observer.kind", "unknown value"),
        ('kind = "reduced"\npoles = [-5]', "observer.poles", "give 3"),
        ('kind = "full"\npoles = [-5, -6]', "observer.poles", "give exactly 3"),
        ("kind = 1", "observer.kind", "expected a string"),
    ],
)
def test_loader_rejects_bad_observer(observer, key, words):
    text = OGATA_10_8.split("[observer]")[0] + "[observer]\n" + observer + "\n"
    with pytest.raises(DesignFileError) as info:
        parse_design(text.encode(), "bad.toml")
    assert info.value.key == key and words in info.value.problem
