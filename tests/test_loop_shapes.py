"""Loop shapes of the shipped loop: sensitivities, input-disturbance response, noise to input.

Independent references for the checks:

* S = (1 + L)⁻¹, T = L (1 + L)⁻¹, so S + T = 1 at every frequency and every break point; a
  step disturbance at the plant input reaches the output as G S (K. J. Åström and R. M. Murray,
  *Feedback Systems*, 2nd ed., Princeton University Press, 2021, Sec. 12.1, the "gang of
  four" -- from memory);
* the margins the peaks guarantee: gain margin ≥ M_s/(M_s − 1), phase margin
  ≥ 2 arcsin(1/(2 M_s)); gain margin ≥ 1 + 1/M_t, phase margin ≥ 2 arcsin(1/(2 M_t))
  (Åström and Murray, same book, Sec. 10.3; S. Skogestad and I. Postlethwaite, *Multivariable
  Feedback Control*, 2nd ed., Wiley, 2005, Sec. 2.4.3, eqs. (2.40)-(2.41) -- both from
  memory); the lower gain limit k_low ≤ M_s/(M_s + 1) follows from |1 − a| ≥ 1/M_s at a phase
  crossover L = −a (the same argument);
* integral action removes the steady-state error of a constant disturbance on any plant the
  loop keeps stable (G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback Control of
  Dynamic Systems*, 7th ed., 2015, Sec. 7.10 -- from memory); with a reference gain the final
  value theorem gives y(∞) = G(0) S(0) d;
* the zero-order-hold model Φ = e^{AT}, Γ = ∫ e^{Aτ} dτ B (G. F. Franklin, J. D. Powell and
  M. L. Workman, *Digital Control of Dynamic Systems*, 3rd ed., 1998, Sec. 4.3).

The plant and controller transfer functions are rebuilt here from the state-space matrices
and evaluated with ``scipy.signal.freqresp`` / ``dfreqresp``; the disturbance response is
compared with ``solve_ivp`` of the loop written out by hand.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.signal

import symbolic
from symbolic import derive
from symbolic.analysis.broken_loop import loop_response
from symbolic.analysis.input_disturbance import disturbance_response, disturbance_size
from symbolic.analysis.loop_shapes import loop_shapes, transfer_values
from symbolic.analysis.shipped_stability import shipped_loop, shipped_margins
from symbolic.verification.horizon import horizon_from_poles
from symbolic.verification.shipped_assembly import shipped_controller

from .conftest import WORKED_FILES
from .test_shipped import CART, cart

NAMES = [p.stem for p in WORKED_FILES]
CART_TEXT = CART.format(observer="poles = [-15, -16, -17]", tracking="", discrete="")

#: SciPy's frequency responses go through polynomial coefficients and warn on a 4-state loop
pytestmark = pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")


@pytest.fixture(scope="module")
def worked():
    out = {}
    for p in WORKED_FILES:
        d = derive(symbolic.load_design(p))
        ctrl = shipped_controller(d)
        out[p.stem] = (d, ctrl, loop_shapes(ctrl))
    return out


def scipy_pieces(ctrl):
    """Plant and controller (y → u) as SciPy systems, written out from the difference
    equations u = C_c ξ + D_cy y, ξ⁺ = A_o ξ + B_oy y + B_ou u (the reference set to zero)."""
    eq = ctrl.equations
    p = ctrl.plant
    A, B, C, D = p.A, p.B, p.C, p.D
    if ctrl.digital:
        T = float(ctrl.sample_time)
        n = A.shape[0]
        M = scipy.linalg.expm(np.block([[A, B], [np.zeros((1, n + 1))]]) * T)
        A, B = M[:n, :n], M[:n, n:]
    # substitute u into the update: ξ⁺ = (A_o + B_ou C_c) ξ + (B_oy + B_ou D_cy) y
    Ak = eq.state_matrix + eq.control_matrix @ eq.output_state
    Bk = eq.measurement_matrix + eq.control_matrix @ eq.output_measurement
    kw = {"dt": float(ctrl.sample_time)} if ctrl.digital else {}
    G = scipy.signal.StateSpace(A, B, C, D, **kw)
    K = scipy.signal.StateSpace(Ak, Bk, eq.output_state, eq.output_measurement, **kw)
    return G, K


def scipy_values(ctrl, omega):
    """G and K_y at ω by SciPy (which works through transfer-function coefficients)."""
    G, K = scipy_pieces(ctrl)
    if ctrl.digital:
        T = float(ctrl.sample_time)
        _w, g = scipy.signal.dfreqresp(G, w=omega * T)
        _w, k = scipy.signal.dfreqresp(K, w=omega * T)
    else:
        _w, g = scipy.signal.freqresp(G, w=omega)
        _w, k = scipy.signal.freqresp(K, w=omega)
    return np.asarray(g).ravel(), np.asarray(k).ravel()


def sample_points(shapes, count=25):
    idx = np.linspace(0, shapes.frequency.size - 1, count).astype(int)
    return idx, shapes.frequency[idx]


# --------------------------------------------------------------------------------------------
# Defining properties
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", NAMES)
def test_s_plus_t_is_one_at_every_frequency_and_break_point(worked, name):
    _d, _ctrl, s = worked[name]
    ok = np.isfinite(s.S_input)
    np.testing.assert_allclose((s.S_input + s.T_input)[ok], 1.0, atol=1e-9)
    eye = np.eye(s.S_output.shape[1])[None]
    np.testing.assert_allclose(
        s.S_output + s.T_output, np.broadcast_to(eye, s.S_output.shape), atol=1e-9
    )
    # one input, one measurement: the two break points give the same functions
    assert s.same_at_both_points
    np.testing.assert_allclose(s.S_output[:, 0, 0], s.S_input, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("name", NAMES)
def test_input_sensitivity_is_one_over_one_plus_the_loop_built_by_scipy(worked, name):
    _d, ctrl, s = worked[name]
    idx, omega = sample_points(s)
    g, k = scipy_values(ctrl, omega)
    L = -k * g
    # SciPy goes through polynomial coefficients: accurate to about 1e-6 relative, and tiny
    # values (|L| ~ 1e-14 three decades past the crossovers) only to an absolute 1e-10
    tol = {"rtol": 1e-6, "atol": 1e-10}
    np.testing.assert_allclose(s.S_input[idx], 1.0 / (1.0 + L), **tol)
    np.testing.assert_allclose(s.T_input[idx], L / (1.0 + L), **tol)
    np.testing.assert_allclose(s.loop_input[idx], L, **tol)
    np.testing.assert_allclose(s.controller_gain[idx], np.abs(k), **tol)
    np.testing.assert_allclose(s.noise_to_input[idx], np.abs(k / (1.0 + L)), **tol)


@pytest.mark.parametrize("name", NAMES)
def test_loop_agrees_with_the_margins_loop_of_shipped_stability(worked, name):
    """Digital: the w-plane loop at w = j (2/T) tan(ωT/2) has the unit-circle values."""
    _d, ctrl, s = worked[name]
    idx, omega = sample_points(s)
    if ctrl.digital:
        T = float(ctrl.sample_time)
        inside = omega < 0.999 * math.pi / T
        idx, omega = idx[inside], omega[inside]
        points = 1j * (2.0 / T) * np.tan(omega * T / 2.0)
    else:
        points = 1j * omega
    np.testing.assert_allclose(
        loop_response(shipped_loop(ctrl), points), s.loop_input[idx], rtol=1e-7
    )


@pytest.mark.parametrize("name", NAMES)
def test_peaks_are_the_largest_values_on_a_dense_grid(worked, name):
    _d, ctrl, s = worked[name]
    top = math.pi / ctrl.sample_time if ctrl.digital else s.frequency[-1]
    dense = np.geomspace(s.frequency[0], top, 40_000)
    g, k = scipy_values(ctrl, dense)
    L = -k * g
    for peak, values in ((s.peak_S_input, 1 / (1 + L)), (s.peak_T_input, L / (1 + L))):
        assert peak.value >= np.max(np.abs(values)) * (1 - 1e-6)
        # and it is a value the function takes, at the frequency reported
        gp, kp = scipy_values(ctrl, np.array([peak.frequency_rad_s]))
        lp = -kp[0] * gp[0]
        got = abs(1 / (1 + lp)) if peak is s.peak_S_input else abs(lp / (1 + lp))
        assert got == pytest.approx(peak.value, rel=1e-9)


@pytest.mark.parametrize("name", NAMES)
def test_peaks_bound_the_margins_of_the_shipped_loop(worked, name):
    """Åström and Murray, Sec. 10.3; Skogestad and Postlethwaite, eqs. (2.40)-(2.41)."""
    _d, ctrl, s = worked[name]
    margins, why = shipped_margins(ctrl)
    assert margins is not None, why
    ms, mt = s.peak_S_input.value, s.peak_T_input.value
    assert ms >= 1.0 and mt > 0
    if margins.gain_margin_db_upper is not None:
        assert margins.gain_margin_db_upper >= 20 * math.log10(ms / (ms - 1)) - 1e-6
        assert margins.gain_margin_db_upper >= 20 * math.log10(1 + 1 / mt) - 1e-6
    if margins.gain_margin_db_lower is not None:
        assert margins.gain_margin_db_lower >= 20 * math.log10((ms + 1) / ms) - 1e-6
    if margins.phase_margin_deg is not None:
        pm = abs(margins.phase_margin_deg)
        assert pm >= math.degrees(2 * math.asin(1 / (2 * ms))) - 1e-6
        assert pm >= math.degrees(2 * math.asin(min(1.0, 1 / (2 * mt)))) - 1e-6
    # the gain crossovers are those of the margins (digital: warped back to ω)
    want = np.array(margins.gain_crossovers_rad_s)
    if ctrl.digital:
        T = float(ctrl.sample_time)
        want = (2 / T) * np.arctan(want * T / 2)
    np.testing.assert_allclose(sorted(s.crossovers_rad_s), sorted(want), rtol=1e-6)


# --------------------------------------------------------------------------------------------
# Measurement noise to the plant input
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", NAMES)
def test_noise_gain_at_high_frequency_is_the_direct_term_limit(worked, name):
    _d, ctrl, s = worked[name]
    G, K = scipy_pieces(ctrl)
    if ctrl.digital:
        # at the Nyquist frequency, z = −1, by SciPy's discrete response
        _w, g = scipy.signal.dfreqresp(G, w=[math.pi])
        _w, k = scipy.signal.dfreqresp(K, w=[math.pi])
        want = abs(k[0] / (1 - k[0] * g[0]))
        assert s.noise_high_frequency == pytest.approx(want, rel=1e-9)
        assert np.abs(ctrl.equations.output_measurement).max() > 0  # the reduced form's y path
    else:
        # the full-order observer has no direct term: the gain falls to zero
        assert np.all(K.D == 0)
        assert s.noise_high_frequency == 0.0
        _w, k = scipy.signal.freqresp(K, w=[1e3 * s.frequency[-1]])
        assert abs(k[0]) < 1e-3 * s.peak_noise.value


def test_reduced_observer_passes_noise_through_its_direct_term(write_design):
    """Continuous reduced-order observer: x̂ = T⁻¹ [y; η + K_e y], u = −K x̂, so the direct term
    is −K T⁻¹ [1; K_e] (Luenberger's minimum-order observer), the high-frequency noise gain."""
    d = cart(write_design, observer='kind = "reduced"\npoles = [-15, -16, -17]')
    ctrl = shipped_controller(d)
    ro = d.reduced_observer
    direct = -d.K.value @ ro.T_inverse @ np.vstack([np.eye(1), ro.Ke])
    s = loop_shapes(ctrl)
    assert s.noise_high_frequency == pytest.approx(abs(direct[0, 0]), rel=1e-9)
    assert abs(direct[0, 0]) > 0
    _w, k = scipy.signal.freqresp(scipy_pieces(ctrl)[1], w=[1e7])
    assert abs(k[0]) == pytest.approx(abs(direct[0, 0]), rel=1e-4)


# --------------------------------------------------------------------------------------------
# Step input disturbance
# --------------------------------------------------------------------------------------------
def run(ctrl, size=1.0):
    horizon = horizon_from_poles(ctrl.closed_loop_poles, ctrl.sample_time)
    return disturbance_response(ctrl, size, horizon=horizon)


def dc_error(ctrl, d=1.0):
    """y(∞) = G(0) S(0) d with S(0) = 1/(1 − K_y(0) G(0)); for a plant with an integrator
    (G(0) infinite) the limit −d/K_y(0)."""
    G, K = scipy_pieces(ctrl)
    point = 1.0 if ctrl.digital else 0.0
    k0 = transfer_values(K.A, K.B, K.C, K.D, [point])[0, 0, 0].real
    if abs(np.linalg.det(point * np.eye(G.A.shape[0]) - G.A)) < 1e-12:
        return -d / k0
    g0 = transfer_values(G.A, G.B, G.C, G.D, [point])[0, 0, 0].real
    return g0 * d / (1 - k0 * g0)


@pytest.mark.parametrize("name", NAMES)
def test_disturbance_steady_state_error(worked, name):
    _d, ctrl, _s = worked[name]
    r = run(ctrl, 0.3)
    assert r.stable
    if ctrl.tracking == "integral action":
        assert abs(r.steady_output) <= 1e-9 * abs(r.peak_deviation)
        assert r.steady_control == pytest.approx(-0.3, rel=1e-9)  # it cancels the disturbance
    else:
        assert r.steady_output == pytest.approx(dc_error(ctrl, 0.3), rel=1e-7)
        assert abs(r.steady_output) > 1e-6 * abs(r.peak_deviation)
    # the run approaches its steady state (the horizon covers the slowest pole)
    assert abs(r.output[-1] - r.steady_output) <= 0.05 * abs(r.peak_deviation)


def test_integral_action_removes_the_error_in_continuous_time(write_design):
    d = cart(write_design, tracking='[tracking]\nmethod = "integral"')
    ctrl = shipped_controller(d)
    r = run(ctrl, 0.5)
    assert abs(r.steady_output) <= 1e-9 * abs(r.peak_deviation)
    assert abs(r.output[-1]) <= 0.05 * abs(r.peak_deviation)


@pytest.mark.parametrize("name", ["focus_actuator", "levitated_ball", "belt_drive"])
def test_disturbance_response_matches_solve_ivp(worked, name):
    """The continuous loop written out by hand: x' = A x + B (u + d), y = C x,
    ξ' = A_o ξ + B_oy y + B_ou u, u = C_c ξ + D_cy y (plant D = 0 here)."""
    _d, ctrl, _s = worked[name]
    p, eq = ctrl.plant, ctrl.equations
    assert not np.any(p.D)
    n = p.A.shape[0]
    size = 0.7

    def rhs(_t, w):
        x, xi = w[:n], w[n:]
        y = p.C @ x
        u = eq.output_state @ xi + eq.output_measurement @ y
        return np.concatenate(
            [
                p.A @ x + p.B @ (u + size),
                eq.state_matrix @ xi + eq.measurement_matrix @ y + eq.control_matrix @ u,
            ]
        )

    r = run(ctrl, size)
    w0 = np.zeros(n + eq.state_matrix.shape[0])
    sol = scipy.integrate.solve_ivp(
        rhs, (0, r.time[-1]), w0, t_eval=r.time[::50], rtol=1e-10, atol=1e-14, method="LSODA"
    )
    y = p.C[ctrl.tracked_index] @ sol.y[:n]
    np.testing.assert_allclose(r.output[::50], y, atol=1e-6 * abs(r.peak_deviation))


def test_digital_disturbance_response_by_hand_recurrence(worked):
    """Hoist winch: the controller at the samples, the plant held between them."""
    _d, ctrl, _s = worked["hoist_winch"]
    p, eq = ctrl.plant, ctrl.equations
    T = float(ctrl.sample_time)
    n = p.A.shape[0]
    M = scipy.linalg.expm(np.block([[p.A, p.B], [np.zeros((1, n + 1))]]) * T)
    Phi, Gam = M[:n, :n], M[:n, n:]
    size = 0.4
    r = run(ctrl, size)
    x, xi = np.zeros(n), np.zeros(eq.state_matrix.shape[0])
    want, xs = [], []
    for _k in range(int(round(r.time[-1] / T)) + 1):
        xs.append(x)
        y = p.C @ x + p.D @ np.zeros(1)
        u = eq.output_state @ xi + eq.output_measurement @ y
        want.append((p.C[ctrl.tracked_index] @ x, u[0]))
        x, xi = (
            Phi @ x + Gam @ (u + size),
            (eq.state_matrix @ xi + eq.measurement_matrix @ y + eq.control_matrix @ u),
        )
    samples = np.arange(0, r.time.size, 20)  # SUBSTEPS points per sample: the sample instants
    want = np.array(want[: samples.size])
    np.testing.assert_allclose(r.output[samples], want[:, 0], atol=1e-9)
    np.testing.assert_allclose(r.control[samples], want[:, 1], atol=1e-9)
    # between the samples: the plant from x[k] under the held input, by its own exponential
    for k in (3, 10, 25):
        tau = r.time[20 * k + 7] - k * T
        E = scipy.linalg.expm(np.block([[p.A, p.B], [np.zeros((1, n + 1))]]) * tau)
        x_mid = E[:n, :n] @ xs[k] + E[:n, n:] @ (want[k, 1:2] + size)
        assert r.output[20 * k + 7] == pytest.approx(p.C[ctrl.tracked_index] @ x_mid, abs=1e-9)


def test_settling_time_is_the_last_exit_from_the_band(worked):
    _d, ctrl, _s = worked["focus_actuator"]
    r = run(ctrl, 1.0)
    dev = np.abs(r.output - r.steady_output)
    band = r.settling_band * dev.max()
    after = r.time >= r.settling_time
    assert np.all(dev[after] <= band)
    before = np.nonzero(r.time < r.settling_time)[0]
    assert dev[before[-1]] > band


def test_disturbance_size_rule():
    size, rule = disturbance_size(-5.0)
    assert size == pytest.approx(1.0)
    assert "common practice, no source" in rule


# --------------------------------------------------------------------------------------------
# The memo section
# --------------------------------------------------------------------------------------------
def test_memo_section_and_its_figures(worked):
    from symbolic.render.loop_shape_memo import memo_loop_shapes

    d, ctrl, _s = worked["hoist_winch"]
    ctx, figures = memo_loop_shapes(d, ctrl)
    assert ctx["digital"] and ctx["nyquist"] == pytest.approx(math.pi / ctrl.sample_time)
    assert ctx["disturbance"]["steady_zero"] and ctx["disturbance"]["integral"]
    stems = {f"{d.design.slug}-{c['stem']}" for c in ctx["figures"]}
    assert {name.rsplit(".", 1)[0] for name in figures} == stems
    assert all(figures[name][:4] in (b"%PDF", b"\x89PNG") for name in figures)


@pytest.mark.parametrize("name", NAMES)
def test_committed_memos_carry_the_section(name):
    from .conftest import WORKED

    for suffix in (".tex", ".md"):
        text = (WORKED / f"{name}{suffix}").read_text(encoding="utf-8")
        assert "Sensitivity, disturbance rejection and noise" in text
        assert f"{name}-sensitivity" in text and f"{name}-input-disturbance" in text
    for stem in ("sensitivity", "input-disturbance"):
        for ext in (".pdf", ".png"):
            assert (WORKED / "figures" / f"{name}-{stem}{ext}").is_file()


def test_two_measurements_give_different_break_points(write_design):
    """Two measured outputs: L_y = −G K_y is 2×2.  Sylvester's determinant identity
    det(I + G K) = det(1 + K G) ties the two break points together (any linear algebra text,
    e.g. Skogestad and Postlethwaite, 2nd ed., Sec. A.1 -- from memory)."""
    from symbolic.render.loop_shape_figures import sensitivity_figure

    path = write_design(CART_TEXT.replace("C = [[1, 0, 0]]", "C = [[1, 0, 0], [0, 1, 0]]"))
    ctrl = shipped_controller(derive(symbolic.load_design(path)))
    s = loop_shapes(ctrl)
    assert s.outputs_measured == 2 and not s.same_at_both_points
    idx, omega = sample_points(s)
    p, eq = ctrl.plant, ctrl.equations
    for i, w in zip(idx, omega, strict=True):
        G = p.C @ np.linalg.solve(1j * w * np.eye(3) - p.A, p.B) + p.D
        Ak = eq.state_matrix + eq.control_matrix @ eq.output_state
        Bk = eq.measurement_matrix + eq.control_matrix @ eq.output_measurement
        K = eq.output_state @ np.linalg.solve(1j * w * np.eye(Ak.shape[0]) - Ak, Bk)
        K = K + eq.output_measurement
        Sy = np.linalg.inv(np.eye(2) + (-G @ K))
        np.testing.assert_allclose(s.S_output[i], Sy, rtol=1e-8, atol=1e-12)
        assert np.linalg.det(np.eye(2) - G @ K) == pytest.approx(1 / s.S_input[i], rel=1e-8)
    assert s.peak_S_output.value != pytest.approx(s.peak_S_input.value, rel=1e-3)
    sigma = np.linalg.norm(s.S_output, ord=2, axis=(1, 2))
    assert s.peak_S_output.value >= sigma.max() * (1 - 1e-9)
    fig = sensitivity_figure(
        s.frequency,
        [("S_input", "S", np.abs(s.S_input)), ("S_output", "S_y", sigma)],
        [("S_output", s.peak_S_output.frequency_rad_s, s.peak_S_output.value)],
        list(s.crossovers_rad_s),
        s.noise_to_input,
        s.controller_gain,
        (s.peak_noise.frequency_rad_s, s.peak_noise.value),
        "V/m",
    )
    assert len(fig.axes) == 2


def test_robustness_json_carries_the_numbers(worked):
    from symbolic.analysis.study import simulation_study
    from symbolic.render.loop_shape_memo import loop_shapes_json, memo_loop_shapes

    d, ctrl, s = worked["belt_drive"]
    out = loop_shapes_json(d)
    assert out["input"]["peak_S"]["value"] == pytest.approx(s.peak_S_input.value, rel=1e-12)
    assert out["gain_crossovers_rad_s"] == pytest.approx(list(s.crossovers_rad_s))
    # the reference step simulated afresh gives the memo's (the study's) disturbance size
    study = simulation_study(d, sweep=False, controller=ctrl)
    ctx, _figures = memo_loop_shapes(d, ctrl, study)
    got, want = out["input_disturbance"], ctx["disturbance"]
    assert got["size"] == pytest.approx(want["size"], rel=1e-6)
    assert got["steady_output"] == pytest.approx(want["steady_output"], rel=1e-6)
