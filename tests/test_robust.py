"""Robustness study (symbolic.analysis.robust): mismatch, Routh–Hurwitz, sensitivities, output.

The designs written here are invented demo scenarios (values plausible, not
from any source).  External references: the separation principle (D. G.
Luenberger, "An introduction to observers", IEEE Trans. Automatic Control
16(6):596–602, 1971; K. Ogata, *Modern Control Engineering*, 5th ed.,
Sec. 10-5), the Routh–Hurwitz criterion (E. J. Routh, 1877; A. Hurwitz,
Math. Annalen 46:273–284, 1895; Ogata Sec. 5-6), and
``scipy.signal.place_poles`` (A. L. Tits and Y. Yang, IEEE Trans. Automatic
Control 41(10):1432–1452, 1996) as the independent source of the gains whose
finite differences check the sensitivities.
"""

from __future__ import annotations

import json
import textwrap

import numpy as np
import pytest
import scipy.signal
import sympy as sp

from symbolic import DesignFileError, derive, load_design
from symbolic.analysis.mismatch import MismatchAssembler, mismatch_loop, mismatch_study
from symbolic.analysis.parameter_grid import MAX_GRID_POINTS, evaluate_on_grid, parameter_grid
from symbolic.analysis.robust import robustness_study
from symbolic.analysis.routh import routh_hurwitz_conditions, state_feedback_stability
from symbolic.analysis.sensitivity import gain_sensitivities
from symbolic.cli import main
from symbolic.derivation.closed_form import characteristic_coefficients
from symbolic.derivation.numeric import evaluate_matrix, pole_residual
from symbolic.render.figures import figure_files
from symbolic.render.robust_figures import mismatch_pole_figure
from symbolic.render.robust_memo import memo_robustness
from symbolic.render.robust_pages import robustness_json

from .conftest import WORKED

# A magnetic-bearing axis (invented demo): rotor mass m on a negative magnetic stiffness ks,
# coil force constant ki known only within [4, 30] N/A.  With the controller designed at
# ki = 20 the state-feedback loop has a0 = (30 ki − ks)/m, so it is unstable for ki < ks/30.
BEARING = """
title = "Magnetic bearing axis (demo)"
[parameters.m]
value = 2.0
unit = "kg"
[parameters.ks]
value = 200.0
unit = "N/m"
[parameters.ki]
value = 20.0
unit = "N/A"
range = [4.0, 30.0]
[plant]
A = [[0, 1], ["ks/m", 0]]
B = [[0], ["ki/m"]]
C = [[1, 0]]
[controller]
poles = ["-10+10j", "-10-10j"]
[observer]
poles = ["-40+40j", "-40-40j"]
"""

# A damped sensor stage (invented demo) whose output has a parameter-dependent gain and a
# direct feedthrough, so that every block of the coupling (ΔA, ΔB, ΔC, ΔD) is exercised.
FEEDTHROUGH = """
title = "Sensor stage with feedthrough (demo)"
[parameters.m]
value = 0.5
range = [0.4, 0.7]
[parameters.k]
value = 40.0
range = [30.0, 55.0]
[parameters.c]
value = 1.5
[parameters.kc]
value = 2.0
range = [1.6, 2.4]
[parameters.kd]
value = 0.05
range = [0.0, 0.1]
[plant]
A = [[0, 1], ["-k/m", "-c/m"]]
B = [[0], ["1/m"]]
C = [["kc", 0]]
D = [["kd"]]
[controller]
poles = ["-6+5j", "-6-5j"]
[observer]
poles = ["-25", "-30"]
"""


def _write(tmp_path_factory, text: str, name: str):
    path = tmp_path_factory.mktemp("robust") / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def bearing_path(tmp_path_factory):
    return _write(tmp_path_factory, BEARING, "bearing.toml")


@pytest.fixture(scope="module")
def bearing(bearing_path):
    return derive(load_design(bearing_path), budget=0)


@pytest.fixture(scope="module")
def feedthrough(tmp_path_factory):
    return derive(load_design(_write(tmp_path_factory, FEEDTHROUGH, "stage.toml")), budget=0)


@pytest.fixture(scope="module")
def levitated():
    return derive(load_design(WORKED / "levitated_ball.toml"), budget=0)


@pytest.fixture(scope="module")
def focus():
    return derive(load_design(WORKED / "focus_actuator.toml"), budget=0)


DESIGNS = ["bearing", "feedthrough", "levitated", "focus"]


# --------------------------------------------------------------------------
# The mismatched loop
# --------------------------------------------------------------------------
@pytest.mark.parametrize("name", DESIGNS)
def test_coupling_vanishes_when_the_plant_equals_the_model(name, request):
    """Symbolically: at true = nominal the coupling is zero and the loop is the separated one."""
    d = request.getfixturevalue(name)
    loop = mismatch_loop(d)
    values = d.design.values
    n = d.plant.A.shape[0]
    assert loop.gains_exact
    assert loop.coupling.xreplace(values).applyfunc(sp.simplify) == sp.zeros(n, n)
    A, B, C, D = loop.nominal_model
    assert (loop.error_block.xreplace(values) - (A - loop.L * C)).applyfunc(
        sp.simplify
    ) == sp.zeros(n, n)
    # and then det(sI − M) factors into the controller and observer polynomials, exactly
    cp = characteristic_coefficients(loop.matrix.xreplace(values))
    s = sp.Symbol("s")
    want = sp.Poly(d.controller_poles.polynomial * d.observer_poles.polynomial, s).all_coeffs()
    assert all(sp.simplify(a - b) == 0 for a, b in zip(cp, want, strict=True))


@pytest.mark.parametrize("name", ["feedthrough", "bearing", "levitated"])
def test_mismatch_loop_matches_the_loop_in_state_and_estimate(name, request):
    """At random true parameters, the (x, e) matrix is similar to the loop written directly in
    (x, x̂): ẋ = A_t x − B_t K x̂, x̂' = L C_t x + (A − BK − LC − L D_t K + L D K) x̂,
    with T = [[I, 0], [I, −I]] (e = x − x̂)."""
    d = request.getfixturevalue(name)
    loop = mismatch_loop(d)
    grid = parameter_grid(d.design, 2)
    asm = MismatchAssembler(d, grid)
    rng = np.random.default_rng(7)
    nominal = grid.nominal
    n = d.plant.A.shape[0]
    A0, B0, C0, D0 = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    K, L = d.K.value, d.L.value
    T = np.block([[np.eye(n), np.zeros((n, n))], [np.eye(n), -np.eye(n)]])
    for _ in range(5):
        point = nominal * rng.uniform(0.7, 1.3, nominal.size)
        sub = {s: sp.Rational(repr(float(v))) for s, v in zip(grid.symbols, point, strict=True)}
        plant = d.design.plant
        At, Bt, Ct, Dt = (evaluate_matrix(M, sub) for M in (plant.A, plant.B, plant.C, plant.D))
        direct = np.block(
            [
                [At, -Bt @ K],
                [L @ Ct, A0 - B0 @ K - L @ C0 - L @ Dt @ K + L @ D0 @ K],
            ]
        )
        want = T @ direct @ np.linalg.inv(T)
        symbolic = evaluate_matrix(loop.matrix, sub)
        numeric = asm.loops(point[None, :])[1][0]
        scale = np.abs(want).max()
        assert np.abs(symbolic - want).max() <= 1e-9 * scale
        assert np.abs(numeric - want).max() <= 1e-9 * scale


@pytest.mark.parametrize("name", DESIGNS)
def test_nominal_point_has_controller_and_observer_poles(name, request):
    d = request.getfixturevalue(name)
    study = mismatch_study(d, 3)
    union = np.concatenate([d.controller_poles.values, d.observer_poles.values])
    assert pole_residual(study.nominal_poles, union) < 1e-9
    assert all(c.passed for c in study.checks)
    assert np.allclose(study.grid.values[study.grid.nominal_index], study.grid.nominal)


def test_grid_contains_every_corner(focus):
    grid = parameter_grid(focus.design, 3)
    ranges = [p.range for p in focus.design.parameters if p.range is not None]
    assert grid.size == 3 ** len(ranges) == grid.values.shape[0] - 1
    cols = [grid.names.index(n) for n in grid.varied]
    points = {tuple(np.round(row[cols], 12)) for row in grid.values[:-1]}
    for bits in range(2 ** len(ranges)):
        corner = tuple(round(float(r[(bits >> i) & 1]), 12) for i, r in enumerate(ranges))
        assert corner in points


# --------------------------------------------------------------------------
# A mismatch that destabilises
# --------------------------------------------------------------------------
def test_destabilising_mismatch_is_reported(bearing_path, capsys):
    code = main(["robustness", str(bearing_path), "--points", "5", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 1
    mm = out["mismatch"]
    assert mm["unstable_count"] >= 1
    assert {"m": 2.0, "ks": 200.0, "ki": 4.0} in mm["unstable_points"]
    assert mm["least_stable_pole"][0] > 0
    assert mm["at"]["ki"] == 4.0
    assert out["passed"] is False


def test_destabilising_mismatch_text_and_command_line(bearing_path, capsys):
    assert main(["robustness", str(bearing_path), "--points", "5"]) == 1
    text = capsys.readouterr().out
    assert "UNSTABLE" in text and "ki = 4" in text


def test_stability_boundary_is_bisected(bearing):
    """a0 = (30 ki − ks)/m: the state-feedback loop loses stability at ki = ks/30."""
    study = mismatch_study(bearing, 5)
    sf = [c for c in study.changes if c.loop == "state feedback"]
    assert len(sf) == 1
    assert sf[0].parameter == "ki"
    assert sf[0].boundary == pytest.approx(200.0 / 30.0, rel=1e-8)
    assert sf[0].stable_value > sf[0].boundary > sf[0].unstable_value


# --------------------------------------------------------------------------
# Routh–Hurwitz
# --------------------------------------------------------------------------
def test_routh_hurwitz_textbook_cubic():
    """s³ + 3s² + 2s + k is stable for 0 < k < 6 (Ogata, Modern Control Engineering, 5th ed.,
    Sec. 5-6, the classic example of this form — from memory; derived: a2 a1 − a0 = 6 − k)."""
    k = sp.Symbol("k")
    assert routh_hurwitz_conditions((1, 3, 2, k)) == (3, k, 6 - k)
    with pytest.raises(ValueError):
        routh_hurwitz_conditions((1, 1, 1, 1, 1))
    with pytest.raises(ValueError):
        routh_hurwitz_conditions((2, 1, 1))


def test_routh_hurwitz_bearing_condition(bearing):
    study = mismatch_study(bearing, 3)
    st = state_feedback_stability(bearing, study)
    assert st.conditions is not None and len(st.conditions) == 2
    ki, ks = bearing.design.symbols["ki"], bearing.design.symbols["ks"]
    a0 = st.conditions[1]
    # reduced form: m > 0 divided out, the rest proportional to 30 ki − ks
    ratio = sp.simplify(a0.reduced / (30 * ki - ks))
    assert ratio.is_number and ratio > 0
    assert "always holds" in st.conditions[0].text()  # a1 = 20 ki/m... positive for ki > 0


@pytest.mark.parametrize("name", ["bearing", "feedthrough", "levitated", "focus"])
def test_routh_hurwitz_agrees_with_eigenvalues_at_random_points(name, request):
    """Each condition set (exact and sign-reduced) is true exactly where A_t − B_t K is stable."""
    d = request.getfixturevalue(name)
    study = mismatch_study(d, 2)
    st = state_feedback_stability(d, study)
    assert st.conditions is not None
    syms = [p.symbol for p in d.design.parameters]
    nominal = np.array([float(p.value) for p in d.design.parameters])
    plant = d.design.plant
    rng = np.random.default_rng(11)
    seen = set()
    for _ in range(100):
        point = nominal * np.exp(rng.uniform(np.log(0.15), np.log(4.0), nominal.size))
        sub = {s: sp.Rational(repr(float(v))) for s, v in zip(syms, point, strict=True)}
        A, B = evaluate_matrix(plant.A, sub), evaluate_matrix(plant.B, sub)
        eig = np.linalg.eigvals(A - B @ d.K.value)
        margin = eig.real.max()
        if abs(margin) < 1e-7 * max(1.0, np.abs(eig).max()):
            continue  # on the boundary: rounding decides
        stable = bool(margin < 0)
        exact = all(bool(c.expression.xreplace(sub) > 0) for c in st.conditions)
        reduced = all(bool(c.reduced.xreplace(sub) > 0) for c in st.conditions)
        assert exact == stable == reduced, (point, eig)
        seen.add(stable)
    if name in ("bearing", "levitated"):
        assert seen == {True, False}  # the sample covered both sides


def test_higher_order_gives_a_numeric_boundary():
    d = derive(load_design(WORKED / "belt_drive.toml"), budget=0)
    study = mismatch_study(d, 3)
    st = state_feedback_stability(d, study)
    assert st.conditions is None and st.coefficients is None
    assert any("order 4 > 3" in line for line in st.lines)
    assert any("observer-based loop with mismatch (order 8)" in line for line in st.lines)


# --------------------------------------------------------------------------
# Sensitivities
# --------------------------------------------------------------------------
def _placed_gains(d, values: dict) -> np.ndarray:
    """K, L, N from scipy.signal.place_poles (independent of the closed forms) at some values."""
    plant = d.design.plant
    A, B, C, D = (evaluate_matrix(M, values) for M in (plant.A, plant.B, plant.C, plant.D))
    K = scipy.signal.place_poles(A, B, d.controller_poles.values).gain_matrix
    L = scipy.signal.place_poles(A.T, C.T, d.observer_poles.values).gain_matrix.T
    i = d.reference.tracked_index
    M = (C[i : i + 1] - D[i : i + 1] @ K) @ np.linalg.solve(B @ K - A, B) + D[i : i + 1]
    return np.concatenate([K.ravel(), L.ravel(), [1.0 / M.item()]])


@pytest.mark.parametrize("name", DESIGNS)
def test_sensitivities_match_finite_differences_of_place_poles(name, request):
    """(p/g)·∂g/∂p from the closed forms vs central differences of place_poles gains (1e-5)."""
    d = request.getfixturevalue(name)
    table = gain_sensitivities(d, budget=0)
    assert table.method.startswith("closed form")
    base_values = dict(d.design.values)
    base = _placed_gains(d, base_values)
    labels = list(table.gains)
    assert len(labels) == base.size
    for p in d.design.parameters:
        h = p.value * sp.Rational(1, 10**4)
        up = dict(base_values)
        down = dict(base_values)
        up[p.symbol] = p.value + h
        down[p.symbol] = p.value - h
        fd = (_placed_gains(d, up) - _placed_gains(d, down)) / (2 * float(h)) * float(p.value)
        for i, label in enumerate(labels):
            got = table.value(label, p.name)
            if base[i] == 0:
                assert got is None
                continue
            want = fd[i] / base[i]
            assert got == pytest.approx(want, rel=1e-5, abs=1e-7), (label, p.name)


def test_sensitivity_closed_forms(levitated):
    table = gain_sensitivities(levitated, budget=0)
    values = levitated.design.values
    for e in table.entries:
        assert e.closed_form is not None
        if e.value is not None:
            assert float(sp.N(e.closed_form.xreplace(values))) == pytest.approx(e.value, rel=1e-12)
    # L depends on neither g nor ... : a parameter absent from a gain gives exactly 0
    g_entries = [e for e in table.entries if e.gain == "L_1" and e.parameter == "g"]
    assert g_entries[0].closed_form == 0


def test_sensitivities_without_closed_forms_use_finite_differences(focus):
    """With the closed forms over budget the numeric fallback agrees with them (1e-5)."""
    numeric_d = derive(focus.design, budget=1e-9)
    assert numeric_d.K.closed_form is None
    table = gain_sensitivities(numeric_d)
    exact = gain_sensitivities(focus, budget=0)
    assert table.method.startswith("central differences")
    for e in exact.entries:
        got = table.value(e.gain, e.parameter)
        if e.value is None:
            continue
        assert got == pytest.approx(e.value, rel=1e-5, abs=1e-7)


# --------------------------------------------------------------------------
# Output, input checks, figures
# --------------------------------------------------------------------------
def test_json_keys(capsys):
    code = main(["robustness", str(WORKED / "focus_actuator.toml"), "--points", "3", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0
    for key in ("mismatch", "routh_hurwitz", "sensitivities", "margins"):
        assert key in out
    for key in ("points", "unstable_points", "worst_damping_ratio", "least_stable_pole", "at"):
        assert key in out["mismatch"]
    assert out["mismatch"]["points"] == 3**4 + 1
    assert out["mismatch"]["unstable_points"] == []
    assert len(out["mismatch"]["least_stable_pole"]) == 2
    assert set(out["mismatch"]["at"]) == {"m", "k", "c", "kf"}
    assert all(isinstance(line, str) for line in out["routh_hurwitz"])
    assert set(out["sensitivities"]) == {"K_1", "K_2", "L_1", "L_2", "N"}
    assert set(out["sensitivities"]["N"]) == {"m", "k", "c", "kf"}
    for loop in ("state_feedback", "observer_based"):
        m = out["margins"][loop]
        for key in (
            "gain_margin_db_upper",
            "gain_margin_db_lower",
            "phase_margin_deg",
            "delay_margin_s",
            "crossover_rad_s",
            "open_loop_unstable_poles",
        ):
            assert key in m
    assert out["margins"]["state_feedback"]["gain_margin_db_upper"] is None  # k up to ∞


@pytest.mark.parametrize(
    "points, why",
    [
        (1, "at least 2"),
        (0, "at least 2"),
        (-3, "at least 2"),
        (True, "at least 2"),
        (2.5, "at least 2"),
        (22, "limit is 200000"),  # 22**4 = 234256 points
    ],
)
def test_bad_grid_is_refused(points, why, focus):
    with pytest.raises(DesignFileError, match=why) as info:
        parameter_grid(focus.design, points)
    assert info.value.key == "--points"


def test_largest_grid_constant():
    assert MAX_GRID_POINTS == 200_000


def test_grid_too_large_from_the_command_line(capsys):
    code = main(["robustness", str(WORKED / "focus_actuator.toml"), "--points", "30"])
    assert code == 2
    assert "limit is 200000" in capsys.readouterr().err


def test_plant_not_finite_inside_a_range(write_design):
    path = write_design(
        """
        [parameters.m]
        value = 1.0
        range = [0.0, 2.0]
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[0], ["1/m"]]
        C = [[1, 0]]
        [controller]
        poles = ["-2", "-3"]
        """
    )
    d = derive(load_design(path), budget=0)
    with pytest.raises(DesignFileError, match="not a finite real number") as info:
        mismatch_study(d, 3)
    assert info.value.key == "plant.B[1][0]"


def test_grid_evaluation_matches_exact_substitution(write_design):
    path = write_design(
        """
        [parameters.a]
        value = 1.5
        range = [0.5, 3.0]
        [parameters.b]
        value = 0.3
        range = [0.1, 0.9]
        [plant]
        A = [[0, 1], ["-sqrt(a)*exp(b)", "-sin(b) - a**2/3"]]
        B = [[0], ["abs(cos(a)) + tanh(b)"]]
        C = [[1, 0]]
        [controller]
        poles = ["-2", "-3"]
        """
    )
    design = load_design(path)
    grid = parameter_grid(design, 4)
    for M in (design.plant.A, design.plant.B):
        fast = evaluate_on_grid(M, grid.symbols, grid.values)
        for i in (0, 5, 11, grid.values.shape[0] - 1):
            sub = {s: sp.Rational(repr(float(v))) for s, v in zip(grid.symbols, grid.values[i])}
            assert fast[i] == pytest.approx(evaluate_matrix(M, sub), rel=1e-13, abs=1e-15)


def test_no_ranges_and_several_inputs(write_design):
    path = write_design(
        """
        [parameters.m]
        value = 2.0
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[0, 1], ["1/m", 0]]
        C = [[1, 0]]
        [controller]
        poles = ["-2", "-3"]
        """
    )
    d = derive(load_design(path), budget=0)
    r = robustness_study(d, 3, budget=0)
    assert r.mismatch.grid.size == 0 and r.mismatch.grid.values.shape[0] == 1
    assert r.margins is None and not r.passed
    assert any("single-input" in n for n in r.notes)
    assert robustness_json(r)["margins"] is None


def _plain(obj) -> bool:
    if obj is None or isinstance(obj, str | bool | int | float):
        return True
    if isinstance(obj, list):
        return all(_plain(x) for x in obj)
    if isinstance(obj, dict):
        return all(isinstance(k, str) and _plain(v) for k, v in obj.items())
    return False


def test_memo_context_and_figures(bearing):
    ctx, figures = memo_robustness(bearing, 5, budget=0)
    assert _plain(ctx)
    assert ctx["all_stable"] is False and ctx["unstable_count"] >= 1
    assert ctx["margins"]["headers"] == ["Quantity", "State feedback", "Observer-based"]
    assert ctx["routh_hurwitz_conditions"] and ctx["caution"]
    stems = {f["stem"] for f in ctx["figures"]}
    assert stems == {
        "bearing-mismatch-poles",
        "bearing-loop-bode",
        "bearing-loop-nyquist",
    }
    for stem in stems:
        assert figures[f"{stem}.pdf"].startswith(b"%PDF")
        assert figures[f"{stem}.png"].startswith(b"\x89PNG")


@pytest.mark.parametrize("worked", ["focus_actuator", "belt_drive"])
def test_memo_sensitivities_are_the_robustness_commands(worked, capsys):
    # The memo and `gainsmith robustness --json` print one set of sensitivities:
    # the exact derivatives of the closed-form gains, to the last bit (a
    # finite-difference copy would agree only to about 1e-6).
    path = WORKED / f"{worked}.toml"
    assert main(["robustness", "--json", str(path), "--points", "2"]) in (0, 1)
    out = json.loads(capsys.readouterr().out)
    assert out["sensitivity_method"].startswith("closed form")
    ctx, _figures = memo_robustness(derive(load_design(path)), 2)
    assert ctx["sensitivity_method"] == out["sensitivity_method"]
    assert ctx["sensitivities"] == out["sensitivities"]
    # the table the memo prints shows those numbers, row by row
    names = ctx["sensitivity_headers"][1:]
    for row in ctx["sensitivity_rows"]:
        want = out["sensitivities"][row[0]]
        shown = ["–" if want[n] is None else f"{want[n]:.4g}" for n in names]
        assert row[1:] == shown, row[0]


def test_mismatch_figure_subsamples_large_grids(monkeypatch):
    import symbolic.render.robust_figures as rf

    monkeypatch.setattr(rf, "MAX_SCATTER", 500)
    rng = np.random.default_rng(0)
    poles = -rng.uniform(1, 10, (1000, 4)) + 1j * rng.uniform(-5, 5, (1000, 4))
    stable = np.ones(1000, dtype=bool)
    stable[:3] = False
    fig = mismatch_pole_figure(poles, stable, np.array([-2 + 1j, -2 - 1j]), np.array([-8.0, -9.0]))
    drawn = fig.axes[0].lines[2]  # after the two axis lines: the grid poles
    assert len(drawn.get_xdata()) == 500
    files = figure_files(fig, "mm")
    assert files["mm.png"].startswith(b"\x89PNG")
