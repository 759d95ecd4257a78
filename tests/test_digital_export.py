"""The digital controller with integral action and the reduced-order observer: gains in z,
the sampled loop, C99 and Python code (compiled and run against the simulation), and the
closed-form export of [K, k_i] and of the reduced-order observer; ``gainsmith export
--digital``.

The C code is compiled with ``gcc -std=c99 -Wall -Wextra -Werror -pedantic``.
"""

from __future__ import annotations

import dataclasses
import importlib.util
import math
import shutil
import subprocess
import warnings
from pathlib import Path

import numpy as np
import pytest
import sympy as sp
from scipy.signal import place_poles

from symbolic import derive
from symbolic.cli import main
from symbolic.derivation.difference_equations import loop_matrices as _sampled_loop
from symbolic.derivation.digital import digital_controller
from symbolic.derivation.numeric import eigenvalue_tolerance, pole_residual
from symbolic.derivation.zoh import numeric_zero_order_hold
from symbolic.input.reader import parse_design
from symbolic.render.c_code import c_sources
from symbolic.render.code_printers import c_identifier_prefix
from symbolic.render.digital_code import c_controller_files, python_controller_source
from symbolic.render.gain_formulas import gain_formulas
from symbolic.render.python_code import python_source
from symbolic.runtime.errors import RenderError
from symbolic.verification.sampled_data import (
    ControllerRunner,
    matched_state,
    sampled_data_study,
)

GCC = shutil.which("gcc")
needs_gcc = pytest.mark.skipif(GCC is None, reason="gcc is not installed (CI has it)")

# A camera pan axis of our own invention (demo values): a DC motor with a gearbox turns the
# head; the motor current i gives the torque, the head angle is measured by an encoder.
# tau: mechanical time constant, k: acceleration per ampere.  Integral action holds the angle
# against a constant cable-drag torque.
PAN_AXIS = """
title = "Camera pan axis (demo)"
[parameters.tau]
value = 0.25
unit = "s"
range = [0.15, 0.4]
[parameters.k]
value = 6.0
unit = "rad/s^2/A"
range = [4.0, 8.0]
[plant]
A = [[0, 1], [0, "-1/tau"]]
B = [[0], ["k/tau"]]
C = [[1, 0]]
[controller]
poles = ["-5+4j", "-5-4j"]
[observer]
{observer}
[tracking]
method = "{method}"
[discrete]
sample_time = 0.02
[simulation]
reference = 0.5
{limit}
"""


def pan_axis(method="integral", observer='kind = "reduced"\npoles = ["-30"]', limit=""):
    text = PAN_AXIS.format(method=method, observer=observer, limit=limit)
    return derive(parse_design(text.encode(), "pan_axis.toml"), budget=0)


@pytest.fixture(scope="module")
def pan():
    return pan_axis()


@pytest.fixture(scope="module")
def pan_limited():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return pan_axis(limit="u_max = 0.15")


# --------------------------------------------------------------------------------------------
# Gains in z against formulas derived by hand (substitution into the defining polynomial)
# --------------------------------------------------------------------------------------------
def test_discrete_integral_gain_of_a_first_order_lag():
    # x' = -a x + b u, y = x: Φ = e^{-aT}, Γ = (b/a)(1 - e^{-aT}) (ZOH of a first-order lag;
    # G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic Systems, 3rd ed.,
    # Sec. 4.3, from memory).  With x_I[k+1] = x_I[k] + T (y - r) the augmented loop has
    # det(zI - Φ_a + Γ_a [k1, k2]) = z² - (1 + Φ - Γ k1) z + Φ - Γ k1 + T Γ k2; matching
    # z² + a1 z + a0 gives (derived by hand here, no published source)
    #   k1 = (1 + Φ + a1)/Γ,  k2 = (1 + a1 + a0)/(T Γ)  (α(1) over TΓ).
    a, b, T = 2.0, 3.0, 0.05
    text = f"""
[plant]
A = [[-{a}]]
B = [[{b}]]
C = [[1]]
[controller]
poles = [-6]
[observer]
poles = [-20]
[tracking]
method = "integral"
integral_pole = -9
[discrete]
sample_time = {T}
"""
    d = derive(parse_design(text.encode(), "lag.toml"), budget=0)
    ig = d.discrete.integral
    Phi = math.exp(-a * T)
    Gamma = b / a * (1 - Phi)
    z1, z2 = math.exp(-6 * T), math.exp(-9 * T)
    a1, a0 = -(z1 + z2), z1 * z2
    assert ig.K_augmented[0, 0] == pytest.approx((1 + Phi + a1) / Gamma, rel=1e-12)
    assert ig.K_augmented[0, 1] == pytest.approx((1 + a1 + a0) / (T * Gamma), rel=1e-12)
    # [K, k_i] in z tends to the continuous [K, k_i] as T -> 0 (same poles, x_I scaled by T)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # poles near z = 1: expected at this sample time
        fast = digital_controller(d, sample_time=sp.Rational(1, 10000), closed_form=False)
    np.testing.assert_allclose(fast.integral.K_augmented, d.integral.K_augmented, rtol=2e-3)
    assert abs(ig.integral_gain[0, 0] / d.integral.integral_gain[0, 0] - 1) > 0.1  # T matters


def test_discrete_reduced_observer_of_a_double_integrator():
    # Φ = [[1, T], [0, 1]] (Franklin, Powell, Workman 3rd ed., Sec. 4.3, from memory) with the
    # position measured: Φ_aa = 1, Φ_ab = T, Φ_bb = 1, so e_b[k+1] = (1 - L_r T) e_b[k] and
    # L_r = (1 - z_r)/T for the pole z_r = e^{s_r T} (derived by hand, no published source).
    T, s_r = 0.01, -40.0
    text = f"""
[parameters.m]
value = 4.0
[plant]
A = [[0, 1], [0, 0]]
B = [[0], ["1/m"]]
C = [[1, 0]]
[controller]
poles = ["-6+6j", "-6-6j"]
[observer]
kind = "reduced"
poles = [{s_r}]
[discrete]
sample_time = {T}
"""
    d = derive(parse_design(text.encode(), "gantry.toml"), budget=0)
    red = d.discrete.reduced
    assert red.L[0, 0] == pytest.approx((1 - math.exp(s_r * T)) / T, rel=1e-12)
    assert d.discrete.default_form == "reduced"
    assert set(d.discrete.forms) == {"current", "predictor", "reduced"}


def test_integral_gains_in_z_place_the_mapped_poles_and_agree_with_scipy(pan):
    dc = pan.discrete
    ig = dc.integral
    T = dc.sample_time
    wanted = np.append(np.exp(pan.controller_poles.values * T), np.exp(ig.integral_pole * T))
    achieved = np.linalg.eigvals(ig.Phi_augmented - ig.Gamma_augmented @ ig.K_augmented)
    assert pole_residual(achieved, wanted) <= eigenvalue_tolerance(wanted)
    # scipy.signal.place_poles (Tits and Yang's method, SciPy's implementation)
    ref = place_poles(ig.Phi_augmented, ig.Gamma_augmented, wanted).gain_matrix
    np.testing.assert_allclose(ig.K_augmented, ref, rtol=1e-8)
    red = dc.reduced
    ref = place_poles(red.Phi_bb.T, red.Phi_ab.T, red.poles_z).gain_matrix.T
    np.testing.assert_allclose(red.L, ref, rtol=1e-8)


@pytest.mark.parametrize("form", ["current", "predictor", "reduced"])
def test_sampled_loop_poles_are_the_mapped_poles(pan, form):
    dc = pan.discrete
    eq = dc.equations[form]
    F, _G = _sampled_loop(eq, dc.Phi, dc.Gamma, pan.plant.C, pan.plant.D)
    observer = dc.reduced.poles_z if form == "reduced" else dc.observer_poles_z
    wanted = np.concatenate([dc.controller_poles_z, [dc.integral.integral_pole_z], observer])
    assert F.shape[0] == len(wanted)  # order 2n + 1, or 2n - p + 1 with the reduced observer
    assert pole_residual(np.linalg.eigvals(F), wanted) <= eigenvalue_tolerance(wanted)


def _run_on_plant(eq, Phi, Gamma, C, r, steps, disturbance=0.0, start=0):
    """The controller on a sampled plant with an input disturbance from sample ``start``."""
    runner = ControllerRunner(eq)
    x = np.zeros(Phi.shape[0])
    ys = []
    for k in range(steps):
        y = C @ x
        u = runner.step(y, r)
        d = disturbance if k >= start else 0.0
        x = Phi @ x + Gamma @ (u + d)
        ys.append(y[0])
    return np.array(ys)


def _equilibrium_output(eq, Phi, Gamma, C, D, r, disturbance):
    """Exact tracked output at the sampled loop's equilibrium, input disturbance included."""
    F, G = _sampled_loop(eq, Phi, Gamma, C, D)
    n = Phi.shape[0]
    Gd = np.zeros(F.shape[0])
    Gd[:n] = Gamma[:, 0] * disturbance
    w = np.linalg.solve(np.eye(F.shape[0]) - F, G[:, 0] * r + Gd)
    assert np.max(np.abs(np.linalg.eigvals(F))) < 1  # stable on this plant
    return float((C @ w[:n])[0])


@pytest.mark.parametrize("form", ["current", "predictor", "reduced"])
def test_integral_action_removes_mismatch_and_disturbance_errors(pan, form):
    # the true plant at the ends of the parameter ranges, with a step input disturbance
    dc = pan.discrete
    reference_loop = pan_axis(method="reference_gain", observer="speed_factor = 4").discrete
    form_ref = "current" if form == "reduced" else form
    C, D = pan.plant.C, pan.plant.D
    r = 0.5
    for tau, k in ((0.15, 8.0), (0.4, 4.0)):
        A = np.array([[0.0, 1.0], [0.0, -1.0 / tau]])
        B = np.array([[0.0], [k / tau]])
        Phi, Gamma = numeric_zero_order_hold(A, B, dc.sample_time)
        for dist in (0.0, 0.3):
            y_int = _equilibrium_output(dc.equations[form], Phi, Gamma, C, D, r, dist)
            y_ref = _equilibrium_output(
                reference_loop.equations[form_ref], Phi, Gamma, C, D, r, dist
            )
            assert abs(y_int - r) <= 1e-9 * r
            if dist:  # the plant has a pole at s = 0, so only the disturbance leaves an error
                assert abs(y_ref - r) > 1e-2 * r  # with the reference gain alone
        # and the runs get there: reference step, then the disturbance at sample 600
        ys = _run_on_plant(dc.equations[form], Phi, Gamma, C, r, 2000, 0.3, 600)
        assert abs(ys[-1] - r) <= 1e-4 * r


def test_anti_windup_limits_the_overshoot_after_saturation(pan_limited):
    d = pan_limited
    dc = d.discrete
    u_max = d.design.simulation.u_max
    form = dc.default_form
    with_aw = sampled_data_study(d, dc, form=form, u_max=u_max, horizon=4.0)
    assert np.max(np.abs(with_aw.controls)) == pytest.approx(u_max)  # the limit is reached
    plain = dataclasses.replace(dc.equations[form], anti_windup=None)
    without = dataclasses.replace(dc, equations={**dc.equations, form: plain})
    no_aw = sampled_data_study(d, without, form=form, u_max=u_max, horizon=4.0)
    r = d.design.simulation.reference
    over_with = np.max(with_aw.sampled_output[:, 0]) - r
    over_without = np.max(no_aw.sampled_output[:, 0]) - r
    assert over_without > 0 and over_with < 0.5 * over_without
    # both settle at the reference: integral action
    assert abs(with_aw.sampled_output[-1, 0] - r) <= 1e-3 * r


def test_matched_state_reproduces_the_plant_state(pan):
    dc = pan.discrete
    x0 = np.array([0.3, -1.2])
    for form in dc.forms:
        xi = matched_state(dc, form, x0)
        eq = dc.equations[form]
        assert xi.size == eq.state_matrix.shape[0] and xi[-1] == 0.0  # integrator empty
    red = dc.reduced
    eta = matched_state(dc, "reduced", x0)[:-1]
    estimate = red.estimate_from_state @ eta + red.estimate_from_output @ (pan.plant.C @ x0)
    np.testing.assert_allclose(estimate, x0, rtol=1e-14)


def test_unavailable_form_is_refused():
    d = pan_axis(observer="speed_factor = 4")
    with pytest.raises(RenderError, match="reduced"):
        c_controller_files(d.discrete, form="reduced")
    with pytest.raises(RenderError, match="unknown observer form"):
        python_controller_source(d.discrete, form="nonsense")


# --------------------------------------------------------------------------------------------
# C99 and Python code of the digital controller, run against the simulation
# --------------------------------------------------------------------------------------------
def _compile_and_run(tmp_path: Path, files, prefix, ys, rs, start) -> np.ndarray:
    for name, data in files.items():
        (tmp_path / name).write_bytes(data)
    rows = ",\n".join(repr(float(v)) for v in ys)
    init = "\n".join(f"    s.xi[{i}] = {float(v)!r};" for i, v in enumerate(start))
    driver = f"""#include <stdio.h>
#include "{prefix}.h"
static const double y[{len(ys)}] = {{
{rows}
}};
static const double r[{len(rs)}] = {{{", ".join(repr(float(v)) for v in rs)}}};
int main(void)
{{
    {prefix}_state s;
    int k;
    {prefix}_reset(&s);
{init}
    for (k = 0; k < {len(rs)}; ++k) {{
        printf("%.17g\\n", {prefix}_step(&s, y[k], r[k]));
    }}
    return 0;
}}
"""
    (tmp_path / "driver.c").write_text(driver)
    exe = tmp_path / "driver"
    cmd = [GCC, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O2", "-o", str(exe)]
    cmd += [str(tmp_path / "driver.c"), str(tmp_path / f"{prefix}.c")]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True, timeout=30)
    return np.array([float(v) for v in out.stdout.split()])


def _import(path: Path):
    spec = importlib.util.spec_from_file_location(f"generated_{path.stem}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@needs_gcc
@pytest.mark.parametrize("form", ["current", "predictor", "reduced"])
@pytest.mark.parametrize("limited", [False, True], ids=["linear", "limited"])
def test_c_and_python_controllers_match_the_simulation(pan, pan_limited, tmp_path, form, limited):
    d = pan_limited if limited else pan
    dc = d.discrete
    u_max = d.design.simulation.u_max
    study = sampled_data_study(d, dc, form=form, u_max=u_max, horizon=3.0)
    ys = study.sampled_output[:, 0]
    rs = np.full(ys.size, d.design.simulation.reference)
    start = matched_state(dc, form, np.zeros(2))
    files = c_controller_files(dc, name="pan axis", form=form, u_max=u_max, title="Pan */ axis")
    assert set(files) == {"pan_axis.h", "pan_axis.c"}
    assert b"Pan * / axis" in files["pan_axis.h"]
    u_c = _compile_and_run(tmp_path, files, "pan_axis", ys, rs, start)
    u_py = study.controls[:, 0]
    assert u_c.size == u_py.size > 100
    np.testing.assert_allclose(u_c, u_py, rtol=1e-12, atol=1e-12 * np.abs(u_py).max())
    source = python_controller_source(dc, name="pan axis", form=form, u_max=u_max)
    (tmp_path / "pan_axis.py").write_bytes(source["pan_axis.py"])
    module = _import(tmp_path / "pan_axis.py")
    state = module.reset()
    state[:] = list(start)
    u_mod = np.array([module.step(state, y, r) for y, r in zip(ys, rs, strict=True)])
    np.testing.assert_array_equal(u_mod, u_c)  # same arithmetic in the same order
    if limited:
        assert np.max(np.abs(u_c)) == pytest.approx(u_max)
        assert b"u_demanded" in files["pan_axis.c"] and b"PAN_AXIS_U_MAX" in files["pan_axis.h"]
    else:
        assert b"u_demanded" not in files["pan_axis.c"]


# --------------------------------------------------------------------------------------------
# Closed-form export of [K, k_i] and of the reduced-order observer
# --------------------------------------------------------------------------------------------
def _gains_driver(formulas) -> str:
    design = formulas.design
    prefix = c_identifier_prefix(design)
    prints = []
    for name, M, _what in formulas.extra:
        prints.append(
            f"        for (i = 0; i < {M.shape[0]}; ++i) for (j = 0; j < {M.shape[1]}; ++j)"
            f' printf(" %.17g", out.{name}[i][j]);'
        )
    body = "\n".join(prints)
    return f"""#include <stdio.h>
#include <stdlib.h>
#include "{design.slug}_gains.h"
int main(void)
{{
    {prefix}_parameters p;
    {prefix}_gains_out out;
    while (scanf("%lf %lf", &p.tau, &p.k) == 2) {{
        int i, j, rc = {prefix}_gains(&p, &out);
        printf("%d", rc);
{body}
        printf("\\n");
    }}
    return 0;
}}
"""


@needs_gcc
def test_integral_and_reduced_closed_forms_compile_and_match_scipy(pan, tmp_path):
    formulas = gain_formulas(pan)
    names = [name for name, _M, _w in formulas.extra]
    assert names == [
        "K_integral",
        "Ke",
        "A_hat",
        "B_hat",
        "F_hat",
        "estimate_from_state",
        "estimate_from_output",
    ]
    for fname, data in c_sources(formulas).items():
        (tmp_path / fname).write_bytes(data)
    (tmp_path / "driver.c").write_text(_gains_driver(formulas))
    exe = tmp_path / "driver"
    cmd = [GCC, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O2", "-o", str(exe)]
    cmd += [str(tmp_path / "driver.c"), str(tmp_path / f"{pan.design.slug}_gains.c"), "-lm"]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    rng = np.random.default_rng(11)
    points = np.column_stack([rng.uniform(0.15, 0.4, 200), rng.uniform(4.0, 8.0, 200)])
    text = "\n".join(f"{float(t)!r} {float(k)!r}" for t, k in points) + "\n"
    out = subprocess.run([str(exe)], input=text, capture_output=True, text=True, timeout=60)
    rows = np.array([[float(v) for v in line.split()] for line in out.stdout.splitlines()])
    assert rows.shape == (200, 1 + 3 + 1 + 1 + 1 + 1 + 2 + 2)
    assert np.all(rows[:, 0] == 0)
    (tmp_path / f"{pan.design.slug}_gains.py").write_bytes(
        python_source(formulas)[f"{pan.design.slug}_gains.py"]
    )
    module = _import(tmp_path / f"{pan.design.slug}_gains.py")
    py = module.gains(tau=points[:, 0], k=points[:, 1])
    np.testing.assert_allclose(py["K_integral"][:, 0, :], rows[:, 1:4], rtol=1e-13)
    np.testing.assert_allclose(py["Ke"][:, 0, 0], rows[:, 4], rtol=1e-13)
    ctrl = np.asarray(formulas.controller_poles)
    wanted = np.append(ctrl, formulas.integral_pole)
    for (tau, k), row in zip(points, rows, strict=True):
        A = np.array([[0.0, 1.0], [0.0, -1.0 / tau]])
        B = np.array([[0.0], [k / tau]])
        Aa = np.block([[A, np.zeros((2, 1))], [np.array([[1.0, 0.0, 0.0]])]])
        Ba = np.vstack([B, [[0.0]]])
        # scipy.signal.place_poles on the augmented pair (A_a, B_a)
        ref = place_poles(Aa, Ba, wanted).gain_matrix
        np.testing.assert_allclose(row[1:4], ref[0], rtol=1e-8)
        # C = [1, 0] makes T = I: A_ab = 1, A_bb = -1/tau; the defining property of Ke
        Ke = row[4]
        assert -1.0 / tau - Ke * 1.0 == pytest.approx(formulas.reduced_poles[0].real, rel=1e-12)
        # the observer matrices: A_hat = A_bb - Ke A_ab, F_hat = B_b - Ke B_a
        assert row[5] == pytest.approx(-1.0 / tau - Ke, rel=1e-12)
        assert row[7] == pytest.approx(k / tau, rel=1e-12)
        # x_hat = [y; eta + Ke y]
        np.testing.assert_allclose(row[8:10], [0.0, 1.0], atol=0)
        np.testing.assert_allclose(row[10:12], [1.0, Ke], rtol=1e-14)
    header = c_sources(formulas)[f"{pan.design.slug}_gains.h"].decode()
    assert "k_i" in header and "Reduced-order observer" in header and "back-calculation" in header


# --------------------------------------------------------------------------------------------
# The command
# --------------------------------------------------------------------------------------------
def _write(tmp_path: Path, text: str, name="pan_axis.toml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def _pan_text(**kw) -> str:
    values = {"method": "integral", "observer": 'kind = "reduced"\npoles = ["-30"]', "limit": ""}
    values.update(kw)
    return PAN_AXIS.format(**values)


@pytest.mark.parametrize(
    ("lang", "files"),
    [
        ("c", {"pan_axis_controller.h", "pan_axis_controller.c"}),
        ("python", {"pan_axis_controller.py"}),
    ],
)
def test_command_writes_the_digital_controller(tmp_path, capsys, lang, files):
    path = _write(tmp_path, _pan_text(limit="u_max = 1.5"))
    out = tmp_path / "out"
    code = main(["export", str(path), "--lang", lang, "--digital", "-o", str(out)])
    text = capsys.readouterr().out
    assert code == 0, text
    assert {p.name for p in out.iterdir()} == files  # no staging folder left behind
    assert "pass  generated reduced controller" in text
    if lang == "python":
        module = _import(out / "pan_axis_controller.py")
        assert module.U_MAX == 1.5 and module.SAMPLE_TIME == 0.02


def test_command_form_choice(tmp_path, capsys):
    path = _write(tmp_path, _pan_text())
    out = tmp_path / "out"
    assert (
        main(
            ["export", str(path), "--lang", "c", "--digital", "--form", "predictor", "-o", str(out)]
        )
        == 0
    )
    assert b"predictor observer" in (out / "pan_axis_controller.h").read_bytes()


@pytest.mark.parametrize(
    ("text", "args", "key"),
    [
        (
            _pan_text().replace("[discrete]\nsample_time = 0.02", ""),
            ["--digital"],
            "discrete.sample_time",
        ),
        (_pan_text(observer="speed_factor = 4"), ["--digital", "--form", "reduced"], "--form"),
        (_pan_text(), ["--form", "current"], "--form"),
    ],
    ids=["no-sample-time", "reduced-unavailable", "form-without-digital"],
)
def test_command_bad_input_is_one_line_and_writes_nothing(tmp_path, capsys, text, args, key):
    path = _write(tmp_path, text)
    out = tmp_path / "out"
    code = main(["export", str(path), "--lang", "c", *args, "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert str(path) in lines[0] and key in lines[0]
    assert not out.exists()


def test_command_writes_nothing_when_the_self_check_fails(tmp_path, capsys, monkeypatch):
    import symbolic.render.export as export

    monkeypatch.setattr(export, "DIGITAL_SELF_CHECK_TOLERANCE", -1.0)
    path = _write(tmp_path, _pan_text())
    out = tmp_path / "out"
    code = main(["export", str(path), "--lang", "c", "--digital", "-o", str(out)])
    assert code == 1
    assert "nothing written" in capsys.readouterr().out
    assert not out.exists()


def test_continuous_design_is_drawn_next_to_the_sampled_loop(pan):
    # the continuous integral loop with the reduced observer settles at r as well, and at a
    # short sample time the two responses agree closely
    study = sampled_data_study(pan, pan.discrete, form="reduced", horizon=3.0)
    r = pan.design.simulation.reference
    assert abs(study.continuous_output[-1] - r) <= 1e-3 * r
    grid = study.time
    cont = np.interp(grid, study.continuous_time, study.continuous_output)
    assert np.max(np.abs(cont - study.tracked_output)) <= 0.1 * r
    assert sp.Rational(pan.discrete.sample_time).q > 1  # a fractional sample time


# --------------------------------------------------------------------------------------------
# The memo sections
# --------------------------------------------------------------------------------------------
def test_memo_sections_carry_the_extended_figures_and_tables(pan_limited):
    from symbolic.render.memo_extended import memo_extended_sections

    ctx, files = memo_extended_sections(pan_limited)
    slug = pan_limited.design.slug
    for stem in ("integral-action", "anti-windup", "sampled-data"):
        assert files[f"{slug}-{stem}.png"].startswith(b"\x89PNG")
        assert files[f"{slug}-{stem}.pdf"].startswith(b"%PDF")
    assert [f["stem"] for f in ctx["integral"]["figures"]] == ["integral-action", "anti-windup"]
    digital = ctx["digital"]
    assert digital["form"] == "reduced" and digital["integral"] and digital["reduced"]
    labels = [row["label"] for row in digital["comparison"]]
    assert "overshoot [%]" in labels and "settling time 2 % [s]" in labels
    assert "K_d" in digital["integral"]["gain"] and "L_r" in digital["reduced"]["gain"]
    assert r"\hat A" in ctx["reduced"]["observer_matrices"]


def test_json_of_the_digital_controller_places_the_mapped_poles(capsys):
    """`derive --json` of the winch: [K, k_i] in z places e^{sT} of the controller poles and
    of the integral pole on Φ_a = [[Φ, 0], [T C_t, 1]], Γ_a = [[Γ], [T D_t]]; the reduced
    observer's matrix has the mapped observer pole."""
    import json

    path = Path(__file__).resolve().parents[1] / "worked_designs" / "hoist_winch.toml"
    assert main(["derive", str(path), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    dc = data["discrete"]
    T = dc["sample_time"]
    Phi, Gamma = np.array(dc["Phi"]), np.array(dc["Gamma"])
    from symbolic.derivation.numeric import evaluate_matrix
    from symbolic.input.reader import load_design

    design = load_design(path)
    C, D = (evaluate_matrix(M, design.values) for M in (design.plant.C, design.plant.D))
    n = Phi.shape[0]
    Phi_a = np.block([[Phi, np.zeros((n, 1))], [T * C[:1], np.ones((1, 1))]])
    Gamma_a = np.vstack([Gamma, T * D[:1]])
    integral = dc["integral"]
    K_a = np.array(integral["K_augmented"])
    assert np.allclose(K_a, np.hstack([integral["K"], integral["integral_gain"]]))
    s_poles = [complex(*p) for p in data["controller_poles"]] + [
        complex(*integral["integral_pole"])
    ]
    want = np.exp(np.array(s_poles) * T)
    got = np.linalg.eigvals(Phi_a - Gamma_a @ K_a)
    assert pole_residual(got, want) <= eigenvalue_tolerance(want)
    reduced = dc["reduced_observer"]
    got_o = np.linalg.eigvals(np.array(reduced["observer_matrix"]))
    want_o = np.exp(np.array([complex(*p) for p in reduced["poles"]]) * T)
    assert pole_residual(got_o, want_o) <= eigenvalue_tolerance(want_o)
    assert "reduced" in dc["forms"]


def test_hostile_title_stays_text_in_the_generated_python(tmp_path, capsys):
    """The design's title reaches the generated module's docstring only: quotes, backslashes
    and line breaks cannot end it, nothing at module level runs a call, and the export's own
    self-check never executes text from the design file."""
    import ast

    canary = tmp_path / "RAN"
    hostile = f'"""\\n__import__("os").system("touch {canary}")\\n"""\\\\ \' #'
    text = _pan_text().replace(
        'title = "Camera pan axis (demo)"', "title = " + json_string(hostile)
    )
    assert json_string(hostile) in text
    path = _write(tmp_path, text)
    out = tmp_path / "out"
    code = main(["export", str(path), "--lang", "python", "--digital", "-o", str(out)])
    assert code == 0, capsys.readouterr()
    source = (out / "pan_axis_controller.py").read_text()
    tree = ast.parse(source)
    body = tree.body
    assert isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant)  # docstring
    assert "touch" in body[0].value.value  # the title is there, as text
    for node in body[1:]:
        assert isinstance(node, ast.FunctionDef | ast.Assign | ast.AnnAssign), ast.dump(node)[:200]
    module = _import(out / "pan_axis_controller.py")
    assert module.SAMPLE_TIME == 0.02
    assert not canary.exists()


def json_string(text: str) -> str:
    """A TOML basic string (JSON escaping is valid TOML for these characters)."""
    import json

    return json.dumps(text)
