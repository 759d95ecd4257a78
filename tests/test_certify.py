"""Certified stability over the parameter box (symbolic/analysis/certify.py and its parts).

External checks:

* the Routh condition of s³ + a s² + b s + c (stable iff a, b, c > 0 and a b > c):
  N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015, Sec. 6.2; K. Ogata,
  *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 5-6;
* the Liénard–Chipart conditions against NumPy's roots of random polynomials (independent
  computation);
* enclosures against exact values at random points inside the box (the defining property);
* the certificate's loop against the independently built (x, e) mismatch loop of
  symbolic/analysis/mismatch.py, and its counterexamples against NumPy's eigenvalues.
"""

from __future__ import annotations

import random
from fractions import Fraction

import numpy as np
import pytest
from sympy import QQ, ZZ, symbols

from symbolic import derive, load_design
from symbolic.analysis.box_search import search_box
from symbolic.analysis.certify import (
    box_certificates,
    certify_fixed_gains,
    certify_scheduled,
    point_is_hurwitz,
)
from symbolic.analysis.interval_poly import (
    compile_polynomial,
    exact_value,
    lienard_chipart_conditions,
    taylor_lower_bound,
)
from symbolic.analysis.mismatch import MismatchAssembler
from symbolic.analysis.parameter_grid import parameter_grid
from symbolic.analysis.verdict import robustness_table
from symbolic.verification.shipped_assembly import shipped_controller

from .conftest import ROOT

a, b, c = symbols("a b c")
R3 = QQ[a, b, c]


def _cubic_conditions(a2, a1):
    """Conditions of s³ + a2 s² + a1 s + c over QQ[a, b, c]."""
    co = [R3(1), R3.from_sympy(a2), R3.from_sympy(a1), R3.from_sympy(c)]
    return [compile_polynomial(n, p) for n, p in lienard_chipart_conditions(co, R3)]


def _search(conds, bounds, **kw):
    bounds = [(Fraction(lo), Fraction(hi)) for lo, hi in bounds]
    outer = tuple((float(lo), float(hi)) for lo, hi in bounds)  # exact: binary fractions
    return search_box(conds, bounds, outer, **kw)


def _cubic_roots(point):
    a_, b_, c_ = (float(x) for x in point)
    return np.roots([1.0, a_, b_, c_])


# --------------------------------------------------------------------------------------------
# The Routh condition of the cubic (Nise, 7th ed., Sec. 6.2; Ogata, 5th ed., Sec. 5-6)
# --------------------------------------------------------------------------------------------
def test_cubic_conditions_are_the_routh_condition():
    names = [x.name for x in _cubic_conditions(a, b)]
    polys = [R3.to_sympy(x.poly) for x in _cubic_conditions(a, b)]
    assert names == ["a3 > 0", "a2 > 0", "a1 > 0", "a0 > 0", "Δ2 > 0"]
    assert polys == [1, a, b, c, a * b - c]  # a b > c: Nise Sec. 6.2, Ogata Sec. 5-6


def test_box_inside_the_stable_region_is_proved():
    # a, b in [2, 3], c in [1, 3.5]: a b ≥ 4 > c everywhere (Routh)
    res = _search(_cubic_conditions(a, b), [(2, 3), (2, 3), (1, Fraction(7, 2))])
    assert res.status == "proved"
    assert res.point is None


def test_box_straddling_the_boundary_gives_a_true_counterexample():
    res = _search(_cubic_conditions(a, b), [(2, 3), (2, 3), (1, 7)])
    assert res.status == "refuted"
    a_, b_, c_ = res.point
    assert a_ * b_ <= c_  # violates the Routh condition
    assert np.max(_cubic_roots(res.point).real) > 0  # NumPy: a root in the right half-plane


def test_tight_box_is_undecided_under_a_small_cap_and_proved_under_a_large_one():
    # s³ + a s² + (b − 1) s + c: the Routh condition a (b − 1) > c has its least margin,
    # 2 − 1.9999 = 1e-4, at the corner a = b = 2; neither enclosure is tight there (the
    # natural one loses the dependence between a b and a, the Taylor form the a·b term), so
    # the boxes must shrink near that corner
    conds = _cubic_conditions(a, b - 1)
    bounds = [(2, 3), (2, 3), (1, Fraction(19999, 10000))]
    small = _search(conds, bounds, max_boxes=3)
    assert small.status == "undecided" and small.boxes == 3
    assert "Δ2 > 0" in small.violated
    large = _search(conds, bounds, max_boxes=20_000)
    assert large.status == "proved" and large.boxes > 3
    # one step further and it is a counterexample: c = 2.0001 > a (b − 1) = 2 at the corner
    over = _search(conds, [(2, 3), (2, 3), (1, Fraction(20001, 10000))])
    assert over.status == "refuted" and np.max(_cubic_roots_shifted(over.point).real) > 0


def _cubic_roots_shifted(point):
    a_, b_, c_ = (float(x) for x in point)
    return np.roots([1.0, a_, b_ - 1.0, c_])


def test_counterexample_on_the_boundary_is_found_exactly():
    # c = 4 at a = b = 2: s³ + 2s² + 2s + 4 = (s + 2)(s² + 2), poles ±j√2 (not asymptotically
    # stable); exact arithmetic finds the corner
    res = _search(_cubic_conditions(a, b), [(2, 3), (2, 3), (1, 4)])
    assert res.status == "refuted"
    assert res.point == (2, 2, 4)
    assert np.max(_cubic_roots(res.point).real) == pytest.approx(0.0, abs=1e-7)


def test_lienard_chipart_agrees_with_numpy_roots():
    rng = random.Random(15)
    for _ in range(300):
        n = rng.randint(1, 7)
        roots = [complex(rng.uniform(-3, 1), 0) for _ in range(n)]
        if n >= 2 and rng.random() < 0.5:
            re, im = rng.uniform(-2, 0.5), rng.uniform(0.1, 3)
            roots[:2] = [complex(re, im), complex(re, -im)]
        co = np.real(np.poly(roots))
        exact = [Fraction(x).limit_denominator(10**12) for x in co]
        got = point_is_hurwitz(exact)
        want = bool(np.max(np.roots([float(x) for x in exact]).real) < 0)
        assert got == want, (exact, roots)


# --------------------------------------------------------------------------------------------
# Enclosures: the defining property, at random points
# --------------------------------------------------------------------------------------------
def _random_poly(rng):
    terms = {}
    for _ in range(rng.randint(1, 12)):
        e = tuple(rng.randint(0, 4) for _ in range(3))
        terms[e] = QQ(rng.randint(-50, 50), rng.randint(1, 9))
    return R3.ring.from_dict(terms)


def test_enclosures_hold_every_value_at_random_points():
    rng = random.Random(7)
    for _ in range(60):
        f = compile_polynomial("f", _random_poly(rng))
        box = []
        for _v in range(3):
            lo = rng.uniform(-2, 2)
            box.append((lo, lo + rng.choice([0.0, 1e-3, 0.5, 3.0])))
        enclosure = f.enclosure(box)
        low = f.lower_bound(box)
        taylor = taylor_lower_bound(f.integer, box) / f.scale
        for _p in range(25):
            point = tuple(Fraction(rng.uniform(lo, hi)) for lo, hi in box)
            point = tuple(
                min(max(x, Fraction(lo)), Fraction(hi)) for x, (lo, hi) in zip(point, box)
            )
            v = f.exact(point)
            assert Fraction(float(enclosure.a)) <= v <= Fraction(float(enclosure.b))
            assert Fraction(float(low)) <= v
            assert taylor <= v


def test_taylor_bound_is_exact_for_a_monotone_linear_form():
    x = compile_polynomial("f", R3.from_sympy(3 * a - 2 * b + 5))
    box = [(0.0, 1.0), (0.0, 2.0), (0.0, 0.0)]
    assert taylor_lower_bound(x.integer, box) == 3 * 0 - 2 * 2 + 5


# --------------------------------------------------------------------------------------------
# Designs
# --------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def belt():
    d = derive(load_design(ROOT / "worked_designs" / "belt_drive.toml"))
    return d, shipped_controller(d)


@pytest.fixture(scope="module")
def focus():
    d = derive(load_design(ROOT / "worked_designs" / "focus_actuator.toml"))
    return d, shipped_controller(d)


def test_belt_drive_counterexample_at_a_corner_confirmed_by_the_mismatch_loop(belt):
    d, ctrl = belt
    cert = certify_fixed_gains(d, ctrl)
    assert cert.status == "counterexample" and cert.confirmed
    assert cert.point == {"J2": 0.0004, "ks": 0.9}
    # independent: the (x, e) mismatch loop of analysis/mismatch.py at that point
    grid = parameter_grid(d.design, 2)
    values = np.array(
        [[cert.point.get(n, float(p.value)) for n, p in zip(grid.names, d.design.parameters)]]
    )
    _sf, full = MismatchAssembler(d, grid).loops(values)
    eig = np.linalg.eigvals(full[0])
    assert np.max(eig.real) > 0
    assert np.max(eig.real) == pytest.approx(cert.eigenvalue.real, rel=1e-6)


def test_focus_actuator_is_proved_and_the_grid_agrees(focus):
    d, ctrl = focus
    report = box_certificates(d, ctrl)
    assert report.fixed.status == "proved"
    assert report.scheduled.status == "proved"
    rows = {r.key: r for r in robustness_table(d, ctrl).rows}
    assert rows["certified_ranges"].passed and rows["parameter_ranges"].passed
    assert rows["certified_schedule"].passed


def test_scheduled_loop_has_the_design_poles_at_random_points(focus):
    # the proof of the scheduled case rests on the identity det(sI − A + B K(p)) = the design
    # polynomial; check it with NumPy at random points of the box
    d, _ctrl = focus
    rng = np.random.default_rng(3)
    want = np.sort_complex(d.controller_poles.values)
    import sympy as sp

    for _ in range(5):
        vals = dict(d.design.values)
        for p in d.design.parameters:
            lo, hi = p.range
            vals[p.symbol] = sp.Rational(repr(float(rng.uniform(float(lo), float(hi)))))
        A = np.array(sp.Matrix(d.design.plant.A).xreplace(vals), dtype=float)
        B = np.array(sp.Matrix(d.design.plant.B).xreplace(vals), dtype=float)
        K = np.array(sp.Matrix(d.K.closed_form).xreplace(vals), dtype=float)
        got = np.sort_complex(np.linalg.eigvals(A - B @ K))
        assert np.allclose(got, want, rtol=1e-9)


def test_belt_drive_rows_agree_with_the_grid(belt):
    d, ctrl = belt
    rows = {r.key: r for r in robustness_table(d, ctrl).rows}
    assert not rows["parameter_ranges"].passed
    assert not rows["certified_ranges"].passed
    assert rows["certified_ranges"].achieved.startswith("counterexample at J2 = 0.0004, ks = 0.9")


def test_digital_controller_is_not_covered_and_has_no_row():
    d = derive(load_design(ROOT / "worked_designs" / "hoist_winch.toml"))
    ctrl = shipped_controller(d)
    report = box_certificates(d, ctrl)
    assert report.fixed.status == "not covered" and "digital" in report.fixed.detail
    assert report.scheduled.status == "not covered"
    keys = {r.key for r in robustness_table(d, ctrl).rows}
    assert not keys & {"certified_ranges", "certified_schedule"}


_PLANT = """
[parameters.kf]
value = 1.0
range = {kf_range}
[parameters.k]
value = {k_value}
range = {k_range}
[plant]
A = [[0, 1], ["{a21}", -1]]
B = [[0], ["kf"]]
C = [[1, 0]]
[controller]
poles = ["-3", "-4"]
[observer]
poles = ["-10", "-12"]
"""


def _design(write_design, kf_range="[0.5, 2.0]", k_range="[4.0, 4.0]", a21="-k", k_value=4.0):
    path = write_design(_PLANT.format(kf_range=kf_range, k_range=k_range, a21=a21, k_value=k_value))
    d = derive(load_design(path))
    return d, shipped_controller(d)


def test_zero_width_range_fixes_the_parameter(write_design):
    d, ctrl = _design(write_design)
    cert = certify_fixed_gains(d, ctrl)
    assert cert.parameters == ("kf",)  # k has a zero-width range: held at its value
    assert cert.status == "proved"


def test_controllability_lost_inside_the_box_breaks_the_schedule(write_design):
    d, ctrl = _design(write_design, kf_range="[-1.0, 2.0]")
    sched = certify_scheduled(d, ctrl)
    assert sched.status == "counterexample"
    assert sched.eigenvalue is None and "break down" in sched.detail
    assert abs(sched.point["kf"]) < 1e-12  # K(p) has kf in its denominator
    fixed = certify_fixed_gains(d, ctrl)
    assert fixed.status == "counterexample" and fixed.confirmed  # kf < 0: positive feedback
    assert fixed.point["kf"] < 0 and fixed.eigenvalue.real > 0


def test_vanishing_denominator_in_the_box_is_never_proved(write_design):
    # the stiffness 1/k² is not defined at k = 0, inside [-1, 1]
    d, ctrl = _design(write_design, k_range="[-1.0, 1.0]", a21="-1/k**2", k_value=1.0)
    cert = certify_fixed_gains(d, ctrl, max_boxes=300)
    assert cert.status in ("undecided", "counterexample")
    if cert.status == "counterexample":
        assert cert.confirmed and cert.point["k"] != 0


def test_leading_coefficient_vanishing_declines_the_point():
    d_ = symbols("d")
    R = QQ[d_]
    co = [R.from_sympy(d_**2), R.from_sympy(d_**2), R(1)]  # d² s² + d² s + 1
    conds = [compile_polynomial(n, p) for n, p in lienard_chipart_conditions(co, R)]
    polys = [p for p in co]

    def refute(point, _bad):
        ok = point_is_hurwitz([exact_value(p, point) for p in polys])
        return None if ok is not False else True

    bounds = [(Fraction(-1), Fraction(1))]
    res = search_box(conds, bounds, ((-1.0, 1.0),), refute=refute, max_boxes=200)
    assert res.status == "undecided"  # stable wherever defined, undefined at d = 0


def test_entries_that_are_not_rational_are_not_covered(write_design):
    d, ctrl = _design(write_design, k_range="[3.0, 5.0]", a21="-sqrt(k)")
    assert certify_fixed_gains(d, ctrl).status == "not covered"


def test_integer_ring_conditions_match_rational_ones():
    x = symbols("x")
    Z, Q = ZZ[x], QQ[x]
    co_z = [Z(2), Z.from_sympy(3 * x), Z(5), Z.from_sympy(x + 1)]
    co_q = [Q.convert(p, Z) for p in co_z]
    cz = lienard_chipart_conditions(co_z, Z)
    cq = lienard_chipart_conditions(co_q, Q)
    assert [Z.to_sympy(p) for _n, p in cz] == [Q.to_sympy(p) for _n, p in cq]


def test_robustness_json_carries_the_certificate():
    from symbolic.analysis.robust import robustness_study
    from symbolic.render.robust_pages import robustness_json

    d = derive(load_design(ROOT / "worked_designs" / "belt_drive.toml"))
    out = robustness_json(robustness_study(d, points=3))["certificate"]
    assert out["gains_fixed"]["status"] == "counterexample"
    assert out["gains_fixed"]["point"] == {"J2": 0.0004, "ks": 0.9}
    assert out["gains_fixed"]["eigenvalue"][0] > 0
    assert out["gain_scheduled"]["status"] == "proved"
