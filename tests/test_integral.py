"""Integral action: a published servo example, defining properties, disturbance and mismatch
studies, anti-windup, and bad input.

Every external number names its source beside it; invented plants are demos only.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from symbolic import DesignFileError, StructureError, derive, parse_design
from symbolic.derivation.closed_form import (
    ackermann,
    characteristic_coefficients,
    desired_coefficients,
)
from symbolic.derivation.integral_forms import augmented_pair
from symbolic.derivation.integral_study import integral_study, mismatch_cases
from symbolic.derivation.pole_rules import default_integral_pole
from symbolic.render.report import derivation_json


def run(text: str):
    return derive(parse_design(text.encode(), "test.toml"), budget=0)


# A camera slider of our own invention: carriage mass m on a belt with a centring spring k and
# damping b, driven by a motor force kf*i.  Position measured.  Demo values only.
SLIDER = """
title = "Camera slider position loop (demo)"
[parameters.m]
value = 1.2
unit = "kg"
range = [0.9, 1.8]
[parameters.k]
value = 4.0
unit = "N/m"
range = [3.0, 5.0]
[parameters.b]
value = 0.8
unit = "N s/m"
[parameters.kf]
value = 2.5
unit = "N/A"
range = [2.0, 3.0]
[plant]
A = [[0, 1], ["-k/m", "-b/m"]]
B = [[0], ["kf/m"]]
C = [[1, 0]]
[controller]
poles = ["-3+3j", "-3-3j"]
[observer]
speed_factor = 4
[tracking]
method = "integral"
{extra}
"""


# --------------------------------------------------------------------------------------------
# Published example
# --------------------------------------------------------------------------------------------
# K. Ogata, Modern Control Engineering, 5th ed., Prentice Hall, 2010, Sec. 10-4, the inverted
# pendulum on a cart as a type-1 servo with integral control (Example 10-5, from memory; the
# example number is not confirmed).  M = 2 kg, m = 0.1 kg, l = 0.5 m, g = 9.81 m/s^2:
# (M+m)g/(Ml) = 20.601, mg/M = 0.4905, B = [0, -1/(Ml), 0, 1/M]ᵀ, y = cart position.
# Desired poles -1 ± j√3, -5, -5, -5.  Published, to 4 decimals (from memory):
#   K = [-157.6336, -35.3733, -56.0652, -36.7466], k_I = -50.9684
# with u = -K x + k_I ξ and ξ' = r - y; in our convention (x_I' = y - r, u = -K x - k_i x_I)
# the same loop has k_i = k_I.
OGATA_A = sp.Matrix(
    [
        [0, 1, 0, 0],
        [sp.Rational("20.601"), 0, 0, 0],
        [0, 0, 0, 1],
        [sp.Rational("-0.4905"), 0, 0, 0],
    ]
)
OGATA_B = sp.Matrix([0, -1, 0, sp.Rational(1, 2)])
OGATA_C = sp.Matrix([[0, 0, 1, 0]])
OGATA_POLES = (-1 + sp.sqrt(3) * sp.I, -1 - sp.sqrt(3) * sp.I, -5, -5, -5)
OGATA_K = np.array([-157.6336, -35.3733, -56.0652, -36.7466])
OGATA_KI = -50.9684


def test_ogata_inverted_pendulum_servo_gains():
    Aa, Ba = augmented_pair(OGATA_A, OGATA_B, OGATA_C, sp.zeros(1, 1))
    gain = ackermann(Aa, Ba, desired_coefficients(OGATA_POLES)).gain
    value = np.array([float(g) for g in gain])
    # published to 4 decimals: agreement to half a unit in the last place
    np.testing.assert_allclose(value[:4], OGATA_K, atol=5e-5)
    assert value[4] == pytest.approx(OGATA_KI, abs=5e-5)


def test_ogata_published_gains_place_the_poles():
    # the published (rounded) gains themselves give the desired characteristic polynomial
    # s^5 + 17 s^4 + 109 s^3 + 335 s^2 + 550 s + 500 = (s^2 + 2 s + 4)(s + 5)^3 to the
    # published precision
    Aa, Ba = augmented_pair(
        np.array(OGATA_A, dtype=float),
        np.array(OGATA_B, dtype=float),
        np.array(OGATA_C, dtype=float),
        np.zeros((1, 1)),
    )
    Ka = np.append(OGATA_K, OGATA_KI).reshape(1, 5)
    got = np.real(np.poly(Aa - Ba @ Ka))
    want = np.array([1, 17, 109, 335, 550, 500], dtype=float)
    np.testing.assert_allclose(got, want, rtol=2e-5, atol=2e-3)


def test_ogata_pendulum_through_a_design_file():
    text = """
[plant]
A = [[0, 1, 0, 0], [20.601, 0, 0, 0], [0, 0, 0, 1], [-0.4905, 0, 0, 0]]
B = [[0], [-1], [0], [0.5]]
C = [[0, 0, 1, 0]]
[controller]
poles = ["-1+1.73205080756888j", "-1-1.73205080756888j", "-5", "-5"]
[observer]
speed_factor = 4
[tracking]
method = "integral"
integral_pole = -5
"""
    d = run(text)
    ia = d.integral
    assert ia is not None
    np.testing.assert_allclose(ia.K[0], OGATA_K, atol=5e-5)
    assert ia.integral_gain.item() == pytest.approx(OGATA_KI, abs=5e-5)
    # the triple pole at -5 is refused by place_poles: that check is n/a, the others pass
    assert d.passed


# --------------------------------------------------------------------------------------------
# Defining properties
# --------------------------------------------------------------------------------------------
def test_slider_gain_closed_form_places_the_poles_exactly():
    d = run(SLIDER.format(extra=""))
    ia = d.integral
    assert ia.closed_form is not None and ia.closed_form.shape == (1, 3)
    # substitute the closed form back: det(sI − (A_a − B_a K_a)) is the desired polynomial
    Aa, Ba = ia.A_augmented_closed_form, ia.B_augmented_closed_form
    got = characteristic_coefficients(Aa - Ba * ia.closed_form)
    for g, w in zip(got, ia.coefficients, strict=True):
        assert sp.cancel(g - w) == 0
    # numbers: the eigenvalues of the numeric loop are the requested poles
    eig = np.sort_complex(np.linalg.eigvals(ia.A_augmented - ia.B_augmented @ ia.K_augmented))
    np.testing.assert_allclose(eig, np.sort_complex(ia.pole_values), rtol=1e-10)
    assert d.passed


def test_augmented_determinant_identity_by_hand():
    # slider: 𝒞 = [[0, kf/m], [kf/m, -b kf/m^2]] so det 𝒞 = -kf^2/m^2; the position output has
    # G(s) = (kf/m)/(s^2 + b/m s + k/m), z(s) = kf/m, so det 𝒞_a = z(0) det 𝒞 = -kf^3/m^3
    d = run(SLIDER.format(extra=""))
    ia = d.integral
    m, kf = sp.Symbol("m", real=True), sp.Symbol("kf", real=True)
    assert sp.simplify(ia.controllability_determinant - (-(kf**3) / m**3)) == 0
    assert sp.simplify(ia.zero_at_origin - kf / m) == 0
    assert ia.determinant_ratio == 1
    assert "kf = 0" in ia.conditions


def test_loop_from_reference_has_unit_dc_gain_for_any_parameters():
    # the integrator sits in the loop: whatever the true plant, y -> r at steady state
    d = run(SLIDER.format(extra=""))
    ia = d.integral
    for m_true, k_true in ((0.9, 3.0), (1.8, 5.0), (1.2, 4.0)):
        A = np.array([[0, 1], [-k_true / m_true, -0.8 / m_true]])
        B = np.array([[0], [2.5 / m_true]])
        C = np.array([[1.0, 0.0]])
        Aa, Ba = augmented_pair(A, B, C, np.zeros((1, 1)))
        Acl = Aa - Ba @ ia.K_augmented
        assert np.max(np.linalg.eigvals(Acl).real) < 0
        xs = np.linalg.solve(Acl, -np.array([[0.0], [0.0], [-1.0]]))
        assert (C @ xs[:2]).item() == pytest.approx(1.0, abs=1e-12)


def test_default_integral_pole_rule():
    pole, rule = default_integral_pole((-2 + sp.I, -2 - sp.I, -10))
    assert pole == -3 and "3/2" in rule
    # collision with a controller pole: moved 10 % farther left
    pole, rule = default_integral_pole((-2, -3))
    assert pole == sp.Rational(-33, 10) and "moved" in rule


def test_given_integral_pole_is_used():
    d = run(SLIDER.format(extra="integral_pole = -7"))
    assert d.integral.integral_pole == -7
    assert "as given" in d.integral.pole_rule
    assert (
        np.min(
            np.abs(
                np.linalg.eigvals(
                    d.integral.A_augmented - d.integral.B_augmented @ d.integral.K_augmented
                )
                + 7
            )
        )
        < 1e-9
    )


def _plant_text(A, B, C, poles):
    def mat(M):
        return (
            "[" + ", ".join("[" + ", ".join(repr(float(x)) for x in row) + "]" for row in M) + "]"
        )

    return f"""
[plant]
A = {mat(A)}
B = {mat(B)}
C = {mat(C)}
[controller]
poles = [{", ".join(f'"{p}"' for p in poles)}]
[observer]
speed_factor = 3
[tracking]
method = "integral"
"""


@settings(
    max_examples=25,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
)
@given(
    n=st.integers(min_value=1, max_value=3),
    data=st.data(),
)
def test_random_plants_eigenvalues_and_scipy(n, data):
    ints = st.integers(min_value=-4, max_value=4)
    A = np.array([[data.draw(ints) for _ in range(n)] for _ in range(n)], dtype=float)
    B = np.array([[data.draw(ints)] for _ in range(n)], dtype=float)
    C = np.array([[data.draw(ints) for _ in range(n)]], dtype=float)
    ctrb = np.hstack([np.linalg.matrix_power(A, k) @ B for k in range(n)])
    obsv = np.vstack([C @ np.linalg.matrix_power(A, k) for k in range(n)])
    assume(np.linalg.matrix_rank(ctrb) == n and np.linalg.matrix_rank(obsv) == n)
    Aa, Ba = augmented_pair(A, B, C, np.zeros((1, 1)))
    ctrb_a = np.hstack([np.linalg.matrix_power(Aa, k) @ Ba for k in range(n + 1)])
    assume(abs(np.linalg.det(ctrb_a)) > 1e-6)  # no zero at the origin
    poles = [-(k + 1) for k in range(n)]
    d = run(_plant_text(A, B, C, poles))
    ia = d.integral
    eig = np.linalg.eigvals(ia.A_augmented - ia.B_augmented @ ia.K_augmented)
    np.testing.assert_allclose(np.sort(eig.real), np.sort(ia.pole_values.real), atol=1e-7)
    assert all(c.passed is not False for c in ia.checks)


# --------------------------------------------------------------------------------------------
# Disturbance and mismatch: what integral action is for
# --------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def slider_study():
    d = run(SLIDER.format(extra=""))
    return d, integral_study(d, samples=1201)


def test_mismatch_cases_use_the_range_ends():
    design = parse_design(SLIDER.format(extra="").encode())
    cases = mismatch_cases(design)
    assert [c[0] for c in cases] == ["low end", "high end"]
    low = {s.name: v for s, v in cases[0][2].items()}
    assert low["m"] == sp.Rational("0.9") and low["kf"] == 2 and low["b"] == sp.Rational("0.8")


def test_integral_action_removes_the_steady_state_error(slider_study):
    d, study = slider_study
    r = study.reference
    for plant in ("nominal", "low end", "high end"):
        run_i = study.run("integral action", plant)
        assert run_i.stable
        assert abs(run_i.error_before) <= 1e-9 * abs(r)
        assert abs(run_i.error_after) <= 1e-9 * abs(r)
        # the simulation itself reaches that final value
        assert abs(run_i.tracked_output[-1] - r) <= 1e-3 * abs(r)


def test_reference_gain_keeps_an_error(slider_study):
    d, study = slider_study
    r = study.reference
    nominal = study.run("reference gain", "nominal")
    assert abs(nominal.error_before) <= 1e-9 * abs(r)  # N is exact for the nominal plant
    assert abs(nominal.error_after) >= 1e-2 * abs(r)  # but not against the disturbance
    for plant in ("low end", "high end"):
        run_n = study.run("reference gain", plant)
        assert run_n.stable
        assert abs(run_n.error_before) >= 1e-2 * abs(r)  # mismatch alone leaves an error
    # the exact equilibrium and the simulated end agree
    assert nominal.tracked_output[-1] == pytest.approx(r - nominal.error_after, rel=1e-3)


def test_disturbance_rule_is_documented(slider_study):
    _d, study = slider_study
    assert study.disturbance > 0
    assert "common practice, no source" in study.disturbance_rule
    assert study.disturbance_time == pytest.approx(study.horizon / 2)


def test_anti_windup_limits_the_overshoot():
    d = run(SLIDER.format(extra="[simulation]\nu_max = 1.7\nreference = 1.0"))
    study = integral_study(d, samples=801)
    plain, clamped = study.windup
    assert not plain.anti_windup and clamped.anti_windup
    # holding 1 m against the spring takes k r / kf = 1.6 A: reachable, but the loop wants more
    for w in (plain, clamped):
        assert np.max(np.abs(w.control)) <= 1.7 + 1e-12
    # windup: the plain integrator overshoots far more (common practice, no source: the
    # reason anti-windup exists)
    assert plain.overshoot_percent > 5.0
    assert clamped.overshoot_percent < 0.5 * plain.overshoot_percent
    assert "back-calculation" in study.anti_windup_rule
    assert abs(clamped.tracked_output[-1] - 1.0) < 1e-3  # and still settles on the reference


# --------------------------------------------------------------------------------------------
# Reporting
# --------------------------------------------------------------------------------------------
def test_json_keys_only_with_integral_action():
    d = run(SLIDER.format(extra=""))
    data = derivation_json(d)
    assert data["integral_gain"] == [[pytest.approx(d.integral.integral_gain.item())]]
    assert len(data["K_augmented"][0]) == 3
    assert data["integral"]["sign_convention"].startswith("x_I' = y - r")
    plain = run(SLIDER.format(extra="").replace('method = "integral"', ""))
    assert plain.integral is None
    assert "integral_gain" not in derivation_json(plain)


# --------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------
DIFFERENTIATOR = """
[parameters.c0]
value = {c0}
[plant]
A = [[0, 1], [-2, -3]]
B = [[0], [1]]
C = [["c0", 1]]
[controller]
poles = [-4, -5]
[observer]
speed_factor = 3
[tracking]
method = "integral"
"""


def test_zero_at_the_origin_at_the_evaluated_values():
    # G(s) = (s + c0)/((s + 1)(s + 2)): a zero at the origin when c0 = 0
    design = parse_design(DIFFERENTIATOR.format(c0=0).encode(), "zero.toml")
    with pytest.raises(StructureError) as info:
        derive(design, budget=0)
    err = info.value
    assert err.key == "tracking.method" and err.path == "zero.toml"
    assert "zero at s = 0" in err.problem and "c0 = 0" in err.problem
    # elsewhere it works
    assert run(DIFFERENTIATOR.format(c0=0.5)).integral is not None


def test_zero_at_the_origin_for_every_parameter_value():
    text = DIFFERENTIATOR.replace('C = [["c0", 1]]', "C = [[0, 1]]").format(c0=1)
    with pytest.raises(StructureError) as info:
        run(text)
    assert info.value.key == "tracking.method"


@pytest.mark.parametrize(
    ("tracking", "key", "words"),
    [
        ('method = "integrator"', "tracking.method", "did you mean"),
        ('method = "integral"\nintegral_pole = 2', "tracking.integral_pole", "negative"),
        ('method = "integral"\nintegral_pole = "-2+1j"', "tracking.integral_pole", "real"),
        ("integral_pole = -3", "tracking.integral_pole", "only meaningful"),
        ('method = "integral"\nintegral_pole = true', "tracking.integral_pole", "expected"),
        ("method = 3", "tracking.method", "expected a string"),
    ],
)
def test_loader_rejects_bad_tracking(tracking, key, words):
    text = SLIDER.format(extra="").replace('method = "integral"', tracking)
    with pytest.raises(DesignFileError) as info:
        parse_design(text.encode(), "bad.toml")
    assert info.value.key == key
    assert words in info.value.problem
