"""Digital implementation: ZOH closed forms, pole placement in z, estimators, sample-rate
guidance, the sampled-data simulation, the C99 export, and bad input.

Every external number names its source beside it; invented plants are demos only.
"""

from __future__ import annotations

import math
import shutil
import subprocess
import warnings

import numpy as np
import pytest
import scipy.signal
import sympy as sp
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from symbolic import DesignFileError, GainsmithWarning, StructureError, derive, parse_design
from symbolic.derivation.digital import digital_controller
from symbolic.derivation.gains_in_z import discrete_feedback_gain
from symbolic.derivation.numeric import scipy_placement
from symbolic.derivation.systems import closed_loop_bandwidth
from symbolic.derivation.zoh import numeric_zero_order_hold, zero_order_hold
from symbolic.render.digital_code import c_controller_files
from symbolic.render.report import derivation_json, derivation_summary
from symbolic.verification.sampled_data import ControllerRunner, sampled_data_study

T = sp.Symbol("T", positive=True)


def run(text: str):
    return derive(parse_design(text.encode(), "test.toml"), budget=0)


# A pick-and-place gantry axis of our own invention (demo values): carriage mass m driven by a
# linear motor force u, friction neglected, position measured.
GANTRY = """
title = "Gantry axis (demo)"
[parameters.m]
value = 4.0
unit = "kg"
[plant]
A = [[0, 1], [0, 0]]
B = [[0], ["1/m"]]
C = [[1, 0]]
[controller]
poles = ["-6+6j", "-6-6j"]
[observer]
speed_factor = 3
[simulation]
reference = 0.05
[discrete]
sample_time = {T}
"""


@pytest.fixture(scope="module")
def gantry():
    return run(GANTRY.format(T=0.01))


# --------------------------------------------------------------------------------------------
# ZOH closed forms (external check)
# --------------------------------------------------------------------------------------------
def test_zoh_double_integrator():
    # G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic Systems, 3rd ed.,
    # 1998, Sec. 4.3 (from memory): the double integrator 1/s² sampled with a ZOH has
    # Φ = [[1, T], [0, 1]], Γ = [T²/2, T]ᵀ.
    Phi, Gamma = zero_order_hold(sp.Matrix([[0, 1], [0, 0]]), sp.Matrix([0, 1]), T)
    assert Phi == sp.Matrix([[1, T], [0, 1]])
    assert Gamma == sp.Matrix([T**2 / 2, T])


def test_zoh_first_order_lag():
    # Franklin, Powell, Workman, 3rd ed., Sec. 4.3 (from memory): a/(s + a) with a ZOH has
    # Φ = e^{−aT}, Γ = 1 − e^{−aT}.
    a = sp.Symbol("a", positive=True)
    Phi, Gamma = zero_order_hold(sp.Matrix([[-a]]), sp.Matrix([[a]]), T)
    assert sp.simplify(Phi[0, 0] - sp.exp(-a * T)) == 0
    assert sp.simplify(Gamma[0, 0] - (1 - sp.exp(-a * T))) == 0


def test_zoh_repeated_lag_by_interpolation():
    # Franklin, Powell, Workman, 3rd ed., Sec. 4.3 (from memory) via the Laplace transform:
    # for the repeated pole of [[-a, 1], [0, -a]], e^{At} = e^{-at} [[1, t], [0, 1]]; with
    # B = [0, 1]ᵀ, Γ = [(1 − (1 + aT) e^{−aT})/a², (1 − e^{−aT})/a]ᵀ.
    a = sp.Symbol("a", positive=True)
    Phi, Gamma = zero_order_hold(sp.Matrix([[-a, 1], [0, -a]]), sp.Matrix([0, 1]), T)
    want_phi = sp.exp(-a * T) * sp.Matrix([[1, T], [0, 1]])
    want_gamma = sp.Matrix([(1 - (1 + a * T) * sp.exp(-a * T)) / a**2, (1 - sp.exp(-a * T)) / a])
    assert (Phi - want_phi).applyfunc(sp.simplify) == sp.zeros(2, 2)
    assert (Gamma - want_gamma).applyfunc(sp.simplify) == sp.zeros(2, 1)


@settings(max_examples=25, deadline=None)
@given(
    rates=st.lists(st.integers(min_value=0, max_value=4), min_size=1, max_size=4),
    coupling=st.lists(st.integers(min_value=-3, max_value=3), min_size=6, max_size=6),
    value=st.integers(min_value=2, max_value=9),
    sample=st.integers(min_value=1, max_value=30),
)
def test_zoh_by_interpolation_matches_scipy(rates, coupling, value, sample):
    """Upper-triangular plants with real poles -k·c (repeated ones included, c a parameter):
    Putzer's closed form evaluated at c equals ``scipy.linalg.expm`` of the augmented matrix."""
    import scipy.linalg

    from symbolic.derivation.zoh import split_roots

    c = sp.Symbol("c", positive=True)
    n = len(rates)
    A = sp.zeros(n, n)
    entries = iter(coupling)
    for i in range(n):
        A[i, i] = -rates[i] * c
        for j in range(i + 1, n):
            A[i, j] = next(entries)
    B = sp.Matrix([1] * n)
    Ts = sp.Rational(sample, 100)
    M = A.row_join(B).col_join(sp.zeros(1, n + 1)) * Ts
    assert split_roots(M) is not None  # the interpolation path is the one under test
    Phi, Gamma = zero_order_hold(A, B, Ts)
    An = np.array(A.subs(c, value), dtype=float)
    E = scipy.linalg.expm(np.block([[An, np.ones((n, 1))], [np.zeros((1, n + 1))]]) * float(Ts))
    got_phi = np.array(Phi.subs(c, value).evalf(30), dtype=float)
    got_gamma = np.array(Gamma.subs(c, value).evalf(30), dtype=float)
    np.testing.assert_allclose(got_phi, E[:n, :n], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(got_gamma, E[:n, n:], rtol=1e-10, atol=1e-12)


def test_zoh_of_an_oscillator_falls_back_to_the_jordan_form():
    """Complex poles do not split over the parameters: SymPy's exponential is used, and its
    closed form still agrees with SciPy."""
    from symbolic.derivation.zoh import (
        ZOH_BY_JORDAN_FORM,
        split_roots,
        zero_order_hold_and_method,
    )

    k = sp.Symbol("k", positive=True)
    A, B = sp.Matrix([[0, 1], [-k, 0]]), sp.Matrix([0, 1])
    assert split_roots(A.row_join(B).col_join(sp.zeros(1, 3))) is None
    Phi, Gamma, method = zero_order_hold_and_method(A, B, sp.Rational(1, 10))
    assert method == ZOH_BY_JORDAN_FORM
    ref = scipy.signal.cont2discrete(
        (
            np.array([[0.0, 1.0], [-4.0, 0.0]]),
            np.array([[0.0], [1.0]]),
            np.eye(2),
            np.zeros((2, 1)),
        ),
        0.1,
        method="zoh",
    )
    np.testing.assert_allclose(np.array(Phi.subs(k, 4), dtype=float), ref[0], rtol=1e-12)
    np.testing.assert_allclose(np.array(Gamma.subs(k, 4), dtype=float), ref[1], rtol=1e-12)


def test_zoh_against_scipy_for_an_oscillator():
    A = np.array([[0.0, 1.0], [-25.0, -0.4]])
    B = np.array([[0.0], [3.0]])
    Phi, Gamma = numeric_zero_order_hold(A, B, 0.07)
    ref = scipy.signal.cont2discrete((A, B, np.eye(2), np.zeros((2, 1))), 0.07, method="zoh")
    np.testing.assert_allclose(Phi, ref[0], rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(Gamma, ref[1], rtol=1e-12, atol=1e-14)


# --------------------------------------------------------------------------------------------
# Pole placement in z: defining property at random plants
# --------------------------------------------------------------------------------------------
@settings(
    max_examples=60,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
)
@given(
    n=st.integers(min_value=1, max_value=4),
    inputs=st.integers(min_value=1, max_value=2),
    sample=st.floats(min_value=0.005, max_value=0.3),
    data=st.data(),
)
def test_random_plants_pole_placement_in_z(n, inputs, sample, data):
    m = min(inputs, n)
    entries = st.integers(min_value=-30, max_value=30).map(lambda k: k / 10)
    A = np.array([[data.draw(entries) for _ in range(n)] for _ in range(n)])
    B = np.array([[data.draw(entries) for _ in range(m)] for _ in range(n)])
    Phi, Gamma = numeric_zero_order_hold(A, B, sample)
    ctrb = np.hstack([np.linalg.matrix_power(Phi, k) @ Gamma for k in range(n)])
    sv = np.linalg.svd(ctrb, compute_uv=False)
    assume(sv[-1] > 1e-3 * max(1.0, sv[0]))
    assume(np.linalg.matrix_rank(Gamma) == m)  # place_poles needs independent inputs
    # distinct stable continuous poles, mapped by z = e^{sT}
    reals = [-(0.5 + 1.3 * k) for k in range(n)]
    poles = np.array(reals, dtype=complex)
    if n >= 2 and data.draw(st.booleans()):
        w = data.draw(st.floats(min_value=0.2, max_value=3.0))
        poles[0], poles[1] = complex(reals[0], w), complex(reals[0], -w)
    zp = np.exp(poles * sample)
    K = discrete_feedback_gain(Phi, Gamma, zp)
    achieved = np.sort_complex(np.linalg.eigvals(Phi - Gamma @ K))
    np.testing.assert_allclose(achieved, np.sort_complex(zp), atol=1e-6)
    # and against scipy.signal.place_poles (single input: the gain is unique)
    if m == 1:
        ref, _how = scipy_placement(Phi, Gamma, zp)
        if ref is not None:
            np.testing.assert_allclose(K, ref, rtol=1e-6, atol=1e-6 * np.abs(ref).max())


# --------------------------------------------------------------------------------------------
# The pipeline on the gantry axis
# --------------------------------------------------------------------------------------------
def test_gantry_closed_forms_and_checks(gantry):
    dc = gantry.discrete
    m = sp.Symbol("m", real=True)
    Ts = sp.Rational(1, 100)
    assert dc.Phi_closed_form == sp.Matrix([[1, Ts], [0, 1]])
    assert sp.simplify(dc.Gamma_closed_form - sp.Matrix([Ts**2 / (2 * m), Ts / m])) == sp.zeros(
        2, 1
    )
    assert dc.K_closed_form is not None and dc.L_closed_form is not None
    value = np.array(dc.K_closed_form.xreplace({m: 4}).evalf(30), dtype=float)
    np.testing.assert_allclose(value, dc.K, rtol=1e-12)
    assert gantry.passed


def test_gantry_poles_in_z(gantry):
    dc = gantry.discrete
    T_ = dc.sample_time
    want_c = np.exp(np.array([-6 + 6j, -6 - 6j]) * T_)
    np.testing.assert_allclose(
        np.sort_complex(np.linalg.eigvals(dc.Phi - dc.Gamma @ dc.K)), np.sort_complex(want_c)
    )
    np.testing.assert_allclose(
        np.sort_complex(dc.controller_poles_z), np.sort_complex(want_c), rtol=1e-14
    )


def test_current_estimator_error_dynamics(gantry):
    # Franklin, Powell, Workman, 3rd ed., Sec. 8.2.2 (from memory): with
    # x̂[k] = x̄[k] + L_c (y[k] − C x̄[k]) and x̄[k+1] = Φ x̂[k] + Γ u[k], the error of x̂ obeys
    # x̃[k+1] = (I − L_c C) Φ x̃[k]; with L_c = Φ⁻¹ L_p its poles are those of Φ − L_p C.
    dc = gantry.discrete
    C = gantry.plant.C
    M = (np.eye(2) - dc.L_current @ C) @ dc.Phi
    np.testing.assert_allclose(
        np.sort_complex(np.linalg.eigvals(M)), np.sort_complex(dc.observer_poles_z), atol=1e-12
    )


def test_discrete_reference_gain_gives_unit_dc_gain(gantry):
    dc = gantry.discrete
    C, K, Phi, Gamma, N = gantry.plant.C, dc.K, dc.Phi, dc.Gamma, dc.reference_gain
    dc_gain = (C @ np.linalg.solve(np.eye(2) - Phi + Gamma @ K, Gamma) @ N).item()
    assert dc_gain == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("form", ["current", "predictor"])
def test_sampled_data_loop_is_exact_at_the_samples(gantry, form):
    # the fine simulation of the continuous plant must agree, at the sampling instants, with
    # the discrete model x[k+1] = Φ x[k] + Γ u[k] driven by the same controller
    dc = gantry.discrete
    study = sampled_data_study(gantry, dc, form=form, horizon=1.5)
    eq = dc.equations[form]
    runner = ControllerRunner(eq)
    x = np.zeros(2)
    r = gantry.design.simulation.reference
    for k in range(study.sample_times.size):
        y = gantry.plant.C @ x
        np.testing.assert_allclose(y, study.sampled_output[k], rtol=1e-9, atol=1e-15)
        u = runner.step(y, r)
        x = dc.Phi @ x + dc.Gamma @ u
    assert study.final_value == pytest.approx(r, rel=1e-12)
    assert study.tracked_output[-1] == pytest.approx(r, rel=1e-3)


def test_fast_sampling_matches_the_continuous_design(gantry):
    # ω_s/ω_bw ≈ 60 here: the sampled-data response is the continuous one within a few per cent
    # (rule of thumb, common practice, no source)
    study = sampled_data_study(gantry, gantry.discrete, form="current")
    for label, cont, samp in study.comparison():
        if label.startswith(("overshoot", "rise", "settling")):
            assert samp == pytest.approx(cont, rel=0.05, abs=0.05), label


def test_slow_sampling_warns_and_reports_the_hold_lag():
    d = run(GANTRY.format(T=0.15))
    dc = d.discrete
    assert dc.sampling_ratio < 10
    assert dc.hold_phase_lag == pytest.approx(dc.bandwidth * 0.15 / 2)
    assert any("rule of thumb" in n for n in d.notes)
    with pytest.warns(GainsmithWarning, match="rule of thumb"):
        digital_controller(d, closed_form=False)


def test_very_fast_sampling_warns_near_the_unit_circle():
    d = run(GANTRY.format(T=0.0005))
    assert any("unit circle" in n for n in d.notes)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        digital_controller(d, closed_form=False)
    texts = [str(w.message) for w in caught if issubclass(w.category, GainsmithWarning)]
    assert any("unit circle" in t for t in texts)
    assert any("rule of thumb" in t for t in texts)  # and far above the 10-30 range


def test_bandwidth_of_known_loops():
    # first order: a/(s + a) has its −3 dB point at ω = a
    assert closed_loop_bandwidth(
        np.array([[0.0]]),
        np.array([[1.0]]),
        np.array([[1.0]]),
        np.zeros((1, 1)),
        np.array([[3.0]]),
        np.array([[3.0]]),
    ) == pytest.approx(3.0, rel=1e-10)
    # second order ω_n²/(s² + 2ζω_n s + ω_n²): ω_BW = ω_n √(1 − 2ζ² + √(4ζ⁴ − 4ζ² + 2))
    # (N. S. Nise, Control Systems Engineering, 7th ed., Wiley, 2015, Sec. 10.8, from memory)
    zeta, wn = 0.5, 4.0
    A = np.array([[0.0, 1.0], [0.0, 0.0]])
    B = np.array([[0.0], [1.0]])
    K = np.array([[wn**2, 2 * zeta * wn]])
    got = closed_loop_bandwidth(A, B, np.array([[1.0, 0.0]]), np.zeros((1, 1)), K, K[:, :1])
    want = wn * math.sqrt(1 - 2 * zeta**2 + math.sqrt(4 * zeta**4 - 4 * zeta**2 + 2))
    assert got == pytest.approx(want, rel=1e-10)


def test_report_sections(gantry):
    data = derivation_json(gantry)["discrete"]
    for key in ("sample_time", "Phi", "Gamma", "K", "L", "reference_gain", "poles"):
        assert key in data
    assert data["sample_time"] == 0.01
    assert len(data["poles"]) == 4 and all(len(p) == 2 for p in data["poles"])
    assert "Digital controller" in derivation_summary(gantry)


# --------------------------------------------------------------------------------------------
# C99 export, compiled and run against the Python simulation
# --------------------------------------------------------------------------------------------
GCC = shutil.which("gcc")


def _compile_and_run(tmp_path, files, prefix, ys, rs):
    for name, data in files.items():
        (tmp_path / name).write_bytes(data)
    p = ys.shape[1]
    y_rows = ",\n".join("{" + ", ".join(repr(float(v)) for v in row) + "}" for row in ys)
    call = f"{prefix}_step(&s, y[k][0], r[k])" if p == 1 else f"{prefix}_step(&s, y[k], r[k])"
    driver = f"""#include <stdio.h>
#include "{prefix}.h"
static const double y[{len(ys)}][{p}] = {{
{y_rows}
}};
static const double r[{len(rs)}] = {{{", ".join(repr(float(v)) for v in rs)}}};
int main(void)
{{
    {prefix}_state s;
    int k;
    {prefix}_reset(&s);
    for (k = 0; k < {len(rs)}; ++k) {{
        printf("%.17g\\n", {call});
    }}
    return 0;
}}
"""
    (tmp_path / "driver.c").write_text(driver)
    exe = tmp_path / "driver"
    cmd = [
        GCC,
        "-std=c99",
        "-Wall",
        "-Wextra",
        "-Werror",
        "-pedantic",
        "-O2",
        "-o",
        str(exe),
        str(tmp_path / "driver.c"),
        str(tmp_path / f"{prefix}.c"),
    ]
    subprocess.run(cmd, check=True, capture_output=True, timeout=60)
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True, timeout=30)
    return np.array([float(v) for v in out.stdout.split()])


@pytest.mark.skipif(GCC is None, reason="gcc is not installed")
@pytest.mark.parametrize(("form", "u_max"), [("current", None), ("predictor", 40.0)])
def test_c_export_matches_the_python_simulation(gantry, tmp_path, form, u_max):
    dc = gantry.discrete
    study = sampled_data_study(gantry, dc, form=form, horizon=1.0, u_max=u_max)
    files = c_controller_files(dc, name="gantry-axis", form=form, u_max=u_max, title="Gantry */")
    assert set(files) == {"gantry_axis.h", "gantry_axis.c"}
    assert b"Gantry * /" in files["gantry_axis.h"]  # no early end of the comment
    r = np.full(study.sample_times.size, gantry.design.simulation.reference)
    u_c = _compile_and_run(tmp_path, files, "gantry_axis", study.sampled_output, r)
    u_py = study.controls[:, 0]
    assert u_c.size == u_py.size > 50
    np.testing.assert_allclose(u_c, u_py, rtol=1e-12, atol=1e-12 * np.abs(u_py).max())
    if u_max is not None:
        assert np.max(np.abs(u_c)) <= u_max


@pytest.mark.skipif(GCC is None, reason="gcc is not installed")
def test_c_export_with_two_outputs(tmp_path):
    text = """
[plant]
A = [[0, 1, 0], [0, 0, 1], [-6, -11, -6]]
B = [[0], [0], [1]]
C = [[1, 0, 0], [0, 1, 0]]
[controller]
poles = [-4, -5, -6]
[observer]
poles = [-8, -9, -10]
[discrete]
sample_time = 0.02
"""
    d = run(text)
    dc = d.discrete
    rng = np.random.default_rng(7)
    ys = rng.normal(size=(40, 2))
    rs = rng.normal(size=40)
    runner = ControllerRunner(dc.equations["predictor"])
    u_py = np.array([runner.step(y, r)[0] for y, r in zip(ys, rs, strict=True)])
    files = c_controller_files(dc, name="axis3", form="predictor")
    u_c = _compile_and_run(tmp_path, files, "axis3", ys, rs)
    np.testing.assert_allclose(u_c, u_py, rtol=1e-12, atol=1e-12)


# --------------------------------------------------------------------------------------------
# Bad input
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("table", "words"),
    [
        ("sample_time = 0", "must be positive"),
        ("sample_time = -0.01", "must be positive"),
        ('sample_time = "0.01"', "expected a number"),
        ("", "missing"),
        ("sample_time = 0.01\nrate = 100", "unknown key"),
    ],
)
def test_loader_rejects_bad_sample_time(table, words):
    text = GANTRY.replace("sample_time = {T}", table)
    with pytest.raises(DesignFileError) as info:
        parse_design(text.encode(), "bad.toml")
    assert info.value.key.startswith("discrete")
    assert words in info.value.problem


def test_aliasing_sample_time_names_the_key():
    # controller poles -6 ± 6j: |Im s|·T ≥ π once T ≥ π/6 ≈ 0.524 s
    text = GANTRY.format(T=0.6)
    with pytest.raises(StructureError) as info:
        run(text)
    assert info.value.key == "discrete.sample_time" and info.value.path == "test.toml"
    assert "aliases" in info.value.problem
    # the observer poles (3 × faster) alias first: T = 0.2 gives 18 · 0.2 = 3.6 > π
    with pytest.raises(StructureError, match="observer pole"):
        run(GANTRY.format(T=0.2))


def test_no_discrete_table_no_digital_controller():
    d = run(GANTRY.replace("[discrete]\nsample_time = {T}", ""))
    assert d.discrete is None and "discrete" not in derivation_json(d)
    with pytest.raises(StructureError):
        digital_controller(d)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        dc = digital_controller(d, sample_time=sp.Rational(1, 25), closed_form=False)
    assert dc.sample_time == 0.04 and 10 < dc.sampling_ratio < 30
