"""Stability margins of loops broken at the plant input (symbolic.analysis.margins).

External checks: textbook loops whose gain and phase margins are known in
closed form.  Each test names the published source of the loop; where the
value is recalled rather than looked up it says "from memory", and the exact
value used as the reference is derived in the test itself (so the reference
does not rest on memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from symbolic import derive, load_design
from symbolic.analysis.broken_loop import (
    BrokenLoop,
    closed_loop_matrix,
    is_stable,
    loop_response,
    observer_loop,
    state_feedback_loop,
)
from symbolic.analysis.margins import broken_loop_margins, compare_margins, stable_gain_range
from symbolic.analysis.nyquist import count_encirclements
from symbolic.derivation.numeric import pole_residual
from symbolic.render.figures import figure_files
from symbolic.render.robust_figures import loop_magnitude_phase_figure, loop_polar_figure

from .conftest import WORKED

REL = 1e-9  # relative tolerance of closed-form margins (brentq refines to 1e-13)


def transfer_loop(num, den, name="textbook") -> BrokenLoop:
    """A realisation of num(s)/den(s) from scipy.signal.tf2ss (an independent conversion)."""
    A, B, C, D = scipy.signal.tf2ss(num, den)
    return BrokenLoop(name, A, B, C, D)


def _assert_checks(r) -> None:
    failed = [c.name for c in r.checks if c.passed is False]
    assert not failed, failed


# --------------------------------------------------------------------------
# Published textbook loops
# --------------------------------------------------------------------------
@pytest.mark.parametrize("gain", [1.0, 2.0, 4.5])
def test_type_one_third_order_loop(gain):
    """L(s) = K/(s(s+1)(s+2)).

    Source: G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control
    of Dynamic Systems*, 7th ed., Sec. 6.4 (gain and phase margin of this
    loop), also K. Ogata, *Modern Control Engineering*, 5th ed., Sec. 7-6 —
    from memory: phase crossover at ω = √2, gain margin 6/K (15.56 dB for
    K = 1).  Derivation: s(s+1)(s+2) at s = jω is −3ω² + j(2ω − ω³), real
    at ω² = 2 where it equals −6, so L(j√2) = −K/6 and k_high = 6/K; the
    closed loop s³ + 3s² + 2s + kK is stable for 0 < kK < 6 (Routh), so
    there is no lower limit.  Gain crossover: ω²(ω² + 1)(ω² + 4) = K², a
    cubic in x = ω²; PM = 90° − atan ω_c − atan(ω_c/2).
    """
    r = broken_loop_margins(transfer_loop([gain], [1, 3, 2, 0]))
    _assert_checks(r)
    assert r.closed_loop_stable
    assert r.phase_crossovers_rad_s == pytest.approx((math.sqrt(2),), rel=REL)
    assert r.gain_factor_upper == pytest.approx(6.0 / gain, rel=REL)
    assert r.gain_margin_db_upper == pytest.approx(20 * math.log10(6.0 / gain), rel=REL)
    assert r.gain_factor_lower is None and r.gain_margin_db_lower is None
    x = max(z.real for z in np.roots([1, 5, 4, -(gain**2)]) if abs(z.imag) < 1e-12)
    wc = math.sqrt(x)
    pm = 90.0 - math.degrees(math.atan(wc)) - math.degrees(math.atan(wc / 2))
    assert r.crossover_rad_s == pytest.approx(wc, rel=REL)
    assert r.phase_margin_deg == pytest.approx(pm, rel=REL)
    assert r.delay_margin_s == pytest.approx(math.radians(pm) / wc, rel=REL)
    assert r.open_loop_unstable_poles == 0
    assert r.imaginary_axis_poles == 1  # the integrator
    if gain == 1.0:  # the published numbers themselves
        assert r.gain_margin_db_upper == pytest.approx(15.56, abs=0.005)


def test_type_one_second_order_loop():
    """L(s) = 1/(s(s+1)): PM = 51.8° at ω_c = 0.786 rad/s, no finite gain margin.

    Source: G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control
    of Dynamic Systems*, 7th ed., Sec. 6.4 (from memory).  Derivation:
    |L(jω)| = 1 gives ω⁴ + ω² − 1 = 0, ω_c² = (√5 − 1)/2;
    PM = 180° − 90° − atan ω_c.  The closed loop s² + s + k is stable for
    every k > 0, so neither gain limit exists.
    """
    r = broken_loop_margins(transfer_loop([1], [1, 1, 0]))
    _assert_checks(r)
    wc = math.sqrt((math.sqrt(5) - 1) / 2)
    pm = 90.0 - math.degrees(math.atan(wc))
    assert r.crossover_rad_s == pytest.approx(wc, rel=REL)
    assert r.phase_margin_deg == pytest.approx(pm, rel=REL)
    assert round(r.phase_margin_deg, 1) == 51.8 and round(r.crossover_rad_s, 3) == 0.786
    assert r.gain_factor_lower is None and r.gain_factor_upper is None
    assert r.phase_crossovers_rad_s == ()


def test_third_order_loop_with_gain_ten():
    """L(s) = 10/(s(s+1)(s+5)).

    Source: K. Ogata, *Modern Control Engineering*, 5th ed., Sec. 7-6 (a
    loop of this form, gain margin about 9.5 dB) — from memory.
    Derivation: s(s+1)(s+5) at jω is −6ω² + j(5ω − ω³), real at ω = √5
    where it equals −30, so k_high = 30/10 = 3, GM = 20 log10 3 = 9.54 dB;
    the gain crossover solves x³ + 26x² + 25x − 100 = 0 with x = ω².
    """
    r = broken_loop_margins(transfer_loop([10], [1, 6, 5, 0]))
    _assert_checks(r)
    assert r.phase_crossovers_rad_s == pytest.approx((math.sqrt(5),), rel=REL)
    assert r.gain_factor_upper == pytest.approx(3.0, rel=REL)
    assert r.gain_margin_db_upper == pytest.approx(9.542425094, rel=1e-9)
    x = max(z.real for z in np.roots([1, 26, 25, -100]) if abs(z.imag) < 1e-12)
    wc = math.sqrt(x)
    pm = 90.0 - math.degrees(math.atan(wc)) - math.degrees(math.atan(wc / 5))
    assert r.phase_margin_deg == pytest.approx(pm, rel=REL)


def test_open_loop_unstable_first_order():
    """L(s) = K/(s − 1), K = 2: stable for k K > 1 only — a lower gain margin.

    Source: the Nyquist criterion with an open-loop unstable pole, e.g.
    G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control of
    Dynamic Systems*, 7th ed., Sec. 6.3 (from memory).  Derivation: the
    closed loop s − 1 + 2k is stable for k > 1/2, so the gain may shrink by
    20 log10 2 = 6.02 dB and grow without limit.  |L| = 1 at ω = √3 where
    ∠L = −(180° − 60°), PM = 60°, delay margin (π/3)/√3 s.  One open-loop
    pole in the right half-plane: L(jω) must encircle −1 once
    counter-clockwise.
    """
    r = broken_loop_margins(transfer_loop([2], [1, -1]))
    _assert_checks(r)
    assert r.open_loop_unstable_poles == 1
    assert r.nyquist.counterclockwise == 1 and r.nyquist.clockwise == -1
    assert r.nyquist.consistent
    assert r.gain_factor_lower == pytest.approx(0.5, rel=REL)
    assert r.gain_margin_db_lower == pytest.approx(20 * math.log10(2), rel=REL)
    assert r.gain_factor_upper is None and r.gain_margin_db_upper is None
    assert r.phase_crossovers_rad_s == (0.0,)  # L(0) = −2: the crossing is at DC
    assert r.crossover_rad_s == pytest.approx(math.sqrt(3), rel=REL)
    assert r.phase_margin_deg == pytest.approx(60.0, rel=REL)
    assert r.delay_margin_s == pytest.approx((math.pi / 3) / math.sqrt(3), rel=REL)


def test_open_loop_unstable_with_integrator():
    """L(s) = K(s + 1)/(s(s − 1)), K = 2: an unstable pole and a pole on the axis (indented).

    Source: the classic Nyquist example of an open-loop unstable loop with
    an integrator, G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback
    Control of Dynamic Systems*, 7th ed., Sec. 6.3 (from memory).
    Derivation: the closed loop s² + (kK − 1)s + kK is stable for kK > 1,
    so k_low = 1/2; L(j1) = K(1 + j)/(j(j − 1)) = −K, the phase crossover
    at ω = 1.  |L(jω)| = K/ω gives ω_c = K = 2 and
    ∠L(jω_c) = 2 atan K − 270°, PM = 2 atan 2 − 90° = 36.87°.
    """
    r = broken_loop_margins(transfer_loop([2, 2], [1, -1, 0]))
    _assert_checks(r)
    assert r.open_loop_unstable_poles == 1 and r.imaginary_axis_poles == 1
    assert r.nyquist.counterclockwise == 1 and r.nyquist.consistent
    assert r.phase_crossovers_rad_s == pytest.approx((1.0,), rel=REL)
    assert r.gain_factor_lower == pytest.approx(0.5, rel=REL)
    assert r.gain_factor_upper is None
    assert r.crossover_rad_s == pytest.approx(2.0, rel=REL)
    pm = 2 * math.degrees(math.atan(2.0)) - 90.0
    assert r.phase_margin_deg == pytest.approx(pm, rel=REL)
    assert r.delay_margin_s == pytest.approx(math.radians(pm) / 2.0, rel=REL)


# --------------------------------------------------------------------------
# Defining properties
# --------------------------------------------------------------------------
LOOPS = [
    ([1], [1, 3, 2, 0]),
    ([10], [1, 6, 5, 0]),
    ([2], [1, -1]),
    ([2, 2], [1, -1, 0]),
    ([3, 1], [1, 2, 2, 0]),
    ([50, 20], [1, 4, -1, -4]),  # poles at 1, −1, −4: open-loop unstable, both gain limits
]


@pytest.mark.parametrize("num, den", LOOPS)
def test_gain_limits_change_stability(num, den):
    """The closed loop is stable inside (k_low, k_high) and not just outside (eigenvalues)."""
    loop = transfer_loop(num, den)
    r = broken_loop_margins(loop)
    _assert_checks(r)
    assert r.closed_loop_stable
    for k in (r.gain_factor_lower, r.gain_factor_upper):
        if k is None:
            continue
        inside = k * (1 + 1e-6) if k < 1 else k * (1 - 1e-6)
        outside = k * (1 - 1e-6) if k < 1 else k * (1 + 1e-6)
        assert is_stable(closed_loop_matrix(loop, inside))
        assert not is_stable(closed_loop_matrix(loop, outside))
        # and −1/k is a point of the Nyquist curve
        w = r.phase_crossovers_rad_s[r.critical_gains.index(k)]
        assert complex(loop_response(loop, 1j * w)) == pytest.approx(-1.0 / k, rel=1e-9)


@pytest.mark.parametrize("num, den", LOOPS)
def test_phase_and_delay_margin_definitions(num, den):
    """At each gain crossover |L| = 1; the delay margin puts L(jω_c) e^{−jω_c τ} on −1."""
    loop = transfer_loop(num, den)
    r = broken_loop_margins(loop)
    for w, pm in zip(r.gain_crossovers_rad_s, r.phase_margins_deg, strict=True):
        value = complex(loop_response(loop, 1j * w))
        assert abs(value) == pytest.approx(1.0, rel=1e-10)
        # rotating L(jω_c) by the phase margin (a lag) lands on −1
        assert value * np.exp(-1j * math.radians(pm)) == pytest.approx(-1.0, abs=1e-9)
    if r.delay_margin_s is not None:
        taus = []
        for w in r.gain_crossovers_rad_s:
            tau = r.delay_margin_s
            delayed = complex(loop_response(loop, 1j * w)) * np.exp(-1j * w * tau)
            taus.append(abs(delayed + 1))
        assert min(taus) < 1e-9


def test_frequency_response_matches_polynomial_evaluation():
    """L(jω) from the realisation equals num(jω)/den(jω) evaluated directly (np.polyval)."""
    num, den = [50, 20], [1, 4, -1, -4]
    loop = transfer_loop(num, den)
    w = np.geomspace(1e-2, 1e3, 200)
    s = 1j * w
    assert loop_response(loop, s) == pytest.approx(
        np.polyval(num, s) / np.polyval(den, s), rel=1e-12
    )


@pytest.mark.filterwarnings("ignore:Badly conditioned filter coefficients")
def test_frequency_response_matches_scipy_freqresp():
    """The cross-check the report carries: scipy.signal.freqresp of the same realisation."""
    loop = transfer_loop([3, 1], [1, 2, 2, 0])
    w = np.geomspace(1e-2, 1e2, 50)
    _w, ref = scipy.signal.freqresp(scipy.signal.StateSpace(loop.A, loop.B, loop.C, loop.D), w=w)
    assert loop_response(loop, 1j * w) == pytest.approx(ref, rel=1e-10)
    r = broken_loop_margins(loop)
    check = next(c for c in r.checks if "freqresp" in c.name)
    assert check.passed is True


@pytest.mark.parametrize(
    "num, den, expected",
    [
        ([2], [1, -1], 1),  # P = 1, stable: one counter-clockwise encirclement
        ([0.5], [1, -1], 0),  # P = 1, Z = 1 (unstable closed loop)
        ([1, 1], [1, 0, 0, 0], -2),  # (s+1)/s³: Z = 2, P = 0 → two clockwise
        ([2, 0], [1, 0, 1], 0),  # 2s/(s²+1): poles ±j indented, closed loop (s+1)²
        ([1], [1, 2, 2, 1], 0),  # stable, nothing encircled
    ],
)
def test_nyquist_criterion(num, den, expected):
    """Encirclements (winding number of 1 + L) equal P − Z; Z from closed-loop eigenvalues.

    H. Nyquist, "Regeneration theory", Bell System Technical Journal
    11(1):126–147, 1932; indentation of poles on the imaginary axis as in
    Franklin, Powell, Emami-Naeini, 7th ed., Sec. 6.3.
    """
    count = count_encirclements(transfer_loop(num, den))
    assert count.counterclockwise == expected
    assert count.consistent
    assert abs(count.winding - expected) < 1e-6


def test_gain_scan_finds_a_limit_the_frequency_sweep_missed():
    """Without any phase-crossover candidate, the eigenvalue scan and bisection find k = 6."""
    loop = transfer_loop([1], [1, 3, 2, 0])
    notes: list[str] = []
    low, high, _bounds = stable_gain_range(loop, [], notes)
    assert low is None
    # bisection on eigenvalues: limited by the stability tolerance (1e-10 of the spectral radius)
    assert high == pytest.approx(6.0, rel=1e-8)
    assert notes and "eigenvalue scan" in notes[0]


def test_unstable_closed_loop_has_no_margins():
    r = broken_loop_margins(transfer_loop([0.5], [1, -1]))
    assert not r.closed_loop_stable
    assert r.gain_margin_db_upper is None and r.phase_margin_deg is None
    assert any("not stable" in n for n in r.notes)


def test_single_input_required():
    with pytest.raises(ValueError):
        state_feedback_loop(np.eye(2), np.eye(2), np.eye(2))


# --------------------------------------------------------------------------
# The loops of a design
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def levitated():
    return derive(load_design(WORKED / "levitated_ball.toml"), budget=0)


@pytest.fixture(scope="module")
def focus():
    return derive(load_design(WORKED / "focus_actuator.toml"), budget=0)


@pytest.mark.parametrize("name", ["levitated", "focus"])
def test_design_loops_close_on_the_designed_poles(name, request):
    """At k = 1 the state-feedback loop has the controller poles and the observer-based loop
    the controller and observer poles (separation principle; Luenberger 1971)."""
    d = request.getfixturevalue(name)
    p = d.plant
    sf = state_feedback_loop(p.A, p.B, d.K.value)
    ob = observer_loop(p.A, p.B, p.C, p.D, d.K.value, d.L.value)
    got = np.linalg.eigvals(closed_loop_matrix(sf, 1.0))
    assert pole_residual(got, d.controller_poles.values) < 1e-9
    union = np.concatenate([d.controller_poles.values, d.observer_poles.values])
    assert pole_residual(np.linalg.eigvals(closed_loop_matrix(ob, 1.0)), union) < 1e-9


def test_observer_loop_is_plant_times_compensator(focus):
    """L(s) of the series realisation equals C(s)·G(s) built from the two transfer functions."""
    d = focus
    p = d.plant
    ob = observer_loop(p.A, p.B, p.C, p.D, d.K.value, d.L.value)
    plant = BrokenLoop("G", p.A, p.B, p.C, p.D)
    F = p.A - p.B @ d.K.value - d.L.value @ p.C + d.L.value @ p.D @ d.K.value
    comp = BrokenLoop("C", F, d.L.value, d.K.value, np.zeros((1, 1)))
    s = 1j * np.geomspace(1.0, 1e4, 40)
    assert loop_response(ob, s) == pytest.approx(
        loop_response(comp, s) * loop_response(plant, s), rel=1e-9
    )


def test_open_loop_unstable_design_margins(levitated):
    """The levitated ball is open-loop unstable (P = 1): both loops need a lower gain limit,
    the Nyquist count must be one counter-clockwise encirclement, and the observer-based loop
    shows the smaller margins (J. C. Doyle, IEEE Trans. Automatic Control 23(4):756–757, 1978:
    observer-based loops have no guaranteed margins)."""
    c = compare_margins(levitated)
    assert c.passed
    a, b = c.state_feedback, c.observer_based
    for r in (a, b):
        assert r.open_loop_unstable_poles == 1
        assert r.nyquist.counterclockwise == 1
        assert r.gain_factor_lower is not None and r.gain_factor_lower < 1
    assert b.phase_margin_deg < a.phase_margin_deg
    assert b.gain_factor_upper is not None
    assert a.gain_factor_upper is None or b.gain_factor_upper < a.gain_factor_upper


def test_multi_output_observer_loop_shapes():
    """Single input, two outputs: C(s)G(s) is still a scalar loop; k = 1 gives the union."""
    A = np.array([[0.0, 1.0], [-2.0, -0.5]])
    B = np.array([[0.0], [1.0]])
    C = np.eye(2)
    D = np.zeros((2, 1))
    K = np.array([[6.0, 3.5]])
    L = np.array([[5.0, 1.0], [0.0, 7.5]])
    ob = observer_loop(A, B, C, D, K, L)
    assert ob.A.shape == (4, 4) and ob.B.shape == (4, 1) and ob.C.shape == (1, 4)
    want = np.concatenate([np.linalg.eigvals(A - B @ K), np.linalg.eigvals(A - L @ C)])
    assert pole_residual(np.linalg.eigvals(closed_loop_matrix(ob, 1.0)), want) < 1e-9


def test_figures_render(levitated):
    c = compare_margins(levitated)
    loops = (c.state_feedback, c.observer_based)
    for stem, fig in (
        ("bode", loop_magnitude_phase_figure(loops)),
        ("nyquist", loop_polar_figure(loops)),
    ):
        files = figure_files(fig, stem)
        assert files[f"{stem}.pdf"].startswith(b"%PDF")
        assert files[f"{stem}.png"].startswith(b"\x89PNG")
