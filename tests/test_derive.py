"""The core engine against published worked examples and its defining properties.

Every external number names its source beside it.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
import sympy as sp
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy.optimize import linear_sum_assignment
from scipy.signal import place_poles

import symbolic
from symbolic import derive
from symbolic.input.reader import parse_design

from .conftest import WORKED_FILES


def design_text(A, B, C, poles, obs_poles, params: str = "", extra: str = "") -> str:
    def mat(M):
        return (
            "["
            + ", ".join(
                "[" + ", ".join(f'"{x}"' if isinstance(x, str) else repr(x) for x in row) + "]"
                for row in M
            )
            + "]"
        )

    def plist(p):
        return "[" + ", ".join(f'"{x}"' for x in p) + "]"

    return f"""
{params}
[plant]
A = {mat(A)}
B = {mat(B)}
C = {mat(C)}
[controller]
poles = {plist(poles)}
[observer]
poles = {plist(obs_poles)}
{extra}
"""


def run(text: str, **kw):
    return derive(parse_design(text.encode(), "test.toml", kw.pop("overrides", None)), budget=0)


# --------------------------------------------------------------------------
# Published examples
# --------------------------------------------------------------------------
def test_ogata_example_10_1_ackermann():
    # K. Ogata, Modern Control Engineering, 5th ed., Prentice Hall, 2010,
    # Example 10-1 (from memory): A = [[0,1,0],[0,0,1],[-1,-5,-6]], B = [0,0,1]ᵀ,
    # poles -2 ± j4 and -10 give K = [199, 55, 8].
    text = design_text(
        [[0, 1, 0], [0, 0, 1], [-1, -5, -6]],
        [[0], [0], [1]],
        [[1, 0, 0]],
        ["-2+4j", "-2-4j", "-10"],
        ["-20", "-21", "-22"],
    )
    d = run(text)
    assert d.K.closed_form == sp.Matrix([[199, 55, 8]])
    np.testing.assert_allclose(d.K.value, [[199, 55, 8]], rtol=1e-12)
    assert d.passed


def test_pole_rules_are_dispatched_by_name(monkeypatch):
    """Each pole rule is one registered function; the design file names it, and the name is
    the origin recorded in the PoleChoice (the poles of K. Ogata, Modern Control Engineering,
    5th ed., 2010, Example 10-1, from memory)."""
    from symbolic.derivation import pole_rules
    from symbolic.model.results import PoleChoice

    design = parse_design(
        b"""
[plant]
A = [[0, 1, 0], [0, 0, 1], [-1, -5, -6]]
B = [[0], [0], [1]]
C = [[1, 0, 0]]
[controller]
poles = ["-2+4j", "-2-4j", "-10"]
[observer]
speed_factor = 4
""",
        "rules.toml",
    )
    assert pole_rules.requested_rule("controller", design) == "given"
    assert pole_rules.requested_rule("observer", design) == "speed factor"
    ctrl = pole_rules.select_controller_poles(design)
    obs = pole_rules.select_observer_poles(design, ctrl)
    assert (ctrl.origin, obs.origin) == ("given", "speed factor")
    assert obs.poles == tuple(sp.expand(4 * p) for p in ctrl.poles)
    # a new rule is one function registered under a name
    own = PoleChoice((-3, -4, -5), "own", "a test rule", (1, 12, 47, 60))  # (s+3)(s+4)(s+5)
    monkeypatch.setitem(pole_rules.RULES["controller"], "own", lambda design: own)
    assert pole_rules.choose("controller", design, rule="own") is own
    with pytest.raises(ValueError, match="unknown controller pole rule 'none'.*'given'"):
        pole_rules.choose("controller", design, rule="none")
    with pytest.raises(ValueError, match="unknown kind of poles"):
        pole_rules.requested_rule("plant", design)


def test_franklin_oscillator_closed_form_gains():
    # G. F. Franklin, J. D. Powell, A. Emami-Naeini, Feedback Control of Dynamic
    # Systems, 7th ed., Pearson, 2015, Sec. 7.5 and 7.7, the undamped oscillator
    # A = [[0,1],[-w0^2,0]], B = [0,1]ᵀ, C = [1,0] (from memory):
    # controller poles both at -2 w0 give K = [3 w0^2, 4 w0];
    # observer poles both at -10 w0 give L = [20 w0, 99 w0^2]ᵀ.
    # Repeated poles: scipy's place_poles refuses them for one input, so this also
    # exercises Ackermann where place_poles cannot be the reference.
    text = design_text(
        [[0, 1], ["-w0**2", 0]],
        [[0], [1]],
        [[1, 0]],
        ["-2", "-2"],
        ["-10", "-10"],
        params="[parameters.w0]\nvalue = 1.0\n",
    )
    d = run(text)
    w0 = d.design.symbols["w0"]
    # poles -2 and -10 at w0 = 1: the closed form is exact in w0 only if poles scale;
    # compare at w0 = 1 where the published formula gives numbers.
    np.testing.assert_allclose(d.K.value, [[3, 4]], rtol=1e-12)
    np.testing.assert_allclose(d.L.value, [[20], [99]], rtol=1e-12)
    assert sp.simplify(d.K.closed_form[0, 0] - (4 - w0**2)) == 0  # α(0) − ω0² with α = (s+2)²
    assert d.passed
    assert any("refused" in c.note for c in d.checks if c.passed is None)
    # the reference gain for y = x1: N = α_c(0)/z(0) = 4 (Franklin et al., Sec. 7.5, Nx/Nu form
    # gives N̄ = Nu + K Nx = w0² + 3 w0² = 4 w0², from memory)
    np.testing.assert_allclose(d.reference.value, [[4.0]], rtol=1e-12)


def test_franklin_oscillator_symbolic_scaling():
    # Same example with the poles scaled by w0 through the plant: poles given
    # numerically, w0 = 3 -> K = [3*9, 4*3], L = [60, 891] (Franklin et al. as above).
    text = design_text(
        [[0, 1], ["-w0**2", 0]],
        [[0], [1]],
        [[1, 0]],
        ["-6", "-6"],
        ["-30", "-30"],
        params="[parameters.w0]\nvalue = 3\n",
    )
    d = run(text)
    np.testing.assert_allclose(d.K.value, [[27, 12]], rtol=1e-12)
    np.testing.assert_allclose(d.L.value, [[60], [891]], rtol=1e-12)


def test_ogata_observer_example():
    # K. Ogata, Modern Control Engineering, 5th ed., 2010, Example 10-5 (from memory):
    # A = [[0, 20.6], [1, 0]], B = [0, 1]ᵀ, C = [0, 1], observer poles -10, -10
    # give Ke = [120.6, 20]ᵀ.
    text = design_text(
        [[0, 20.6], [1, 0]],
        [[0], [1]],
        [[0, 1]],
        ["-1.8+2.4j", "-1.8-2.4j"],
        ["-10", "-10"],
    )
    d = run(text)
    assert d.L.closed_form == sp.Matrix([[sp.Rational(1206, 10)], [20]])
    assert d.passed


def test_ogata_state_feedback_example():
    # K. Ogata, Modern Control Engineering, 5th ed., 2010, Example 10-4 (from memory):
    # the controllable form A = [[0, 1], [20.6, 0]], B = [0, 1]ᵀ with poles -1.8 ± j2.4
    # needs K = [29.6, 3.6].
    text = design_text(
        [[0, 1], [20.6, 0]],
        [[0], [1]],
        [[1, 0]],
        ["-1.8+2.4j", "-1.8-2.4j"],
        ["-8", "-9"],
    )
    d = run(text)
    assert d.K.closed_form == sp.Matrix([[sp.Rational(296, 10), sp.Rational(36, 10)]])
    np.testing.assert_allclose(d.K.value, [[29.6, 3.6]], rtol=1e-12)
    assert d.passed


# --------------------------------------------------------------------------
# Defining properties on a parameterised plant
# --------------------------------------------------------------------------
MASS_SPRING = """
[parameters.m]
value = 1.5
[parameters.k]
value = 40
[parameters.c]
value = 0.8
[parameters.kf]
value = 2.0
[plant]
A = [[0, 1], ["-k/m", "-c/m"]]
B = [[0], ["kf/m"]]
C = [[1, 0]]
[controller]
poles = ["-4+3j", "-4-3j"]
[observer]
poles = ["-16+12j", "-16-12j"]
"""


def test_closed_form_substitutes_back():
    d = run(MASS_SPRING)
    A, B, C = (sp.Matrix(getattr(d.design.plant, n)) for n in "ABC")
    K, L = d.K.closed_form, d.L.closed_form
    s = sp.Symbol("s")
    # det(sI - (A - BK)) must equal (s+4)^2 + 9 identically in m, k, c, kf
    cp = sp.cancel((s * sp.eye(2) - (A - B * K)).det())
    assert sp.expand(cp - ((s + 4) ** 2 + 9)) == 0
    co = sp.cancel((s * sp.eye(2) - (A - L * C)).det())
    assert sp.expand(co - ((s + 16) ** 2 + 144)) == 0
    # at random parameter points the closed form equals scipy's gain
    rng = np.random.default_rng(1)
    syms = [d.design.symbols[n] for n in ("m", "k", "c", "kf")]
    f = sp.lambdify(syms, K, "numpy")
    for _ in range(20):
        vals = rng.uniform(0.5, 5, size=4)
        An = np.array(A.subs(dict(zip(syms, vals))), dtype=float)
        Bn = np.array(B.subs(dict(zip(syms, vals))), dtype=float)
        Kp = place_poles(An, Bn, [-4 + 3j, -4 - 3j]).gain_matrix
        np.testing.assert_allclose(np.array(f(*vals), dtype=float), Kp, rtol=1e-9)


def test_conditions_name_the_parameter():
    d = run(MASS_SPRING)
    assert d.controllability.conditions == ("kf = 0",)
    assert d.observability.conditions == ()  # C = [1, 0] always observes this plant


# A plant built so that its structure determinants carry factors without real
# zeros next to factors with them: det [B, AB] = -k^2 (a^2 - 2a + 5)^2 (a - 3)^2
# and det [C; CA] = (a^2 - 2ab + b^2 + 1)^2 for A = [[0, 1], [0, 0]].
NO_REAL_ROOT = """
[parameters.a]
value = 1
[parameters.b]
value = 0.5
[parameters.k]
value = 2
[plant]
A = [[0, 1], [0, 0]]
B = [[0], ["k*(a**2 - 2*a + 5)*(a - 3)"]]
C = [["a**2 - 2*a*b + b**2 + 1", 0]]
[controller]
poles = ["-4+3j", "-4-3j"]
[observer]
poles = ["-16+12j", "-16-12j"]
"""


def test_factors_without_real_zeros_are_not_conditions():
    d = run(NO_REAL_ROOT)
    a, b, k = (d.design.symbols[n] for n in ("a", "b", "k"))
    # The determinants themselves still carry every factor ...
    assert sp.expand(d.controllability.determinant + (k * (a**2 - 2 * a + 5) * (a - 3)) ** 2) == 0
    assert sp.expand(d.observability.determinant - (a**2 - 2 * a * b + b**2 + 1) ** 2) == 0
    # ... but only the factors with a real zero are listed: a^2 - 2a + 5 = (a - 1)^2 + 4
    # and a^2 - 2ab + b^2 + 1 = (a - b)^2 + 1 are at least 4 and 1 for real a, b.
    assert sorted(d.controllability.conditions) == ["a = 3", "k = 0"]
    assert d.observability.conditions == ()
    # the dropped factors really are bounded away from zero (sampled check)
    rng = np.random.default_rng(7)
    for x, y in rng.uniform(-50, 50, size=(200, 2)):
        assert x**2 - 2 * x + 5 >= 4 - 1e-9 and (x - y) ** 2 + 1 >= 1


@pytest.mark.parametrize(
    "factor, real_zero",
    [
        ("a**2 - 2*a + 5", False),  # discriminant 4 - 20 < 0
        ("a**2 - 2*a - 5", True),  # discriminant 4 + 20 > 0
        ("a**4 + 1", False),
        ("a**3 + 1", True),  # odd degree
        ("a**2 + b**2", True),  # zero at a = b = 0
        ("a**2 + b**2 + 1", False),
        ("a**2 - 2*a*b + 2*b**2 + 1", False),  # (a - b)^2 + b^2 + 1
        ("a**2 + 4*a*b + b**2 + 1", True),  # indefinite: a = 1, b = -1 gives -1
        ("a*b + 1", True),
        ("-(a - b)**2 - (b + 1)**2 - 3", False),
        ("exp(a) + 1", False),
    ],
)
def test_has_no_real_zero(factor, real_zero):
    from symbolic.derivation.structure import has_no_real_zero
    from symbolic.input.expressions import parse_expression

    names = {n: sp.Symbol(n, real=True) for n in "ab"}
    assert has_no_real_zero(sp.expand(parse_expression(factor, names))) is (not real_zero)


def test_set_overrides_value():
    d = run(MASS_SPRING, overrides={"m": "3.1", "k": "40"})
    assert d.parameter_values["m"] == pytest.approx(3.1)
    An = d.plant.A
    assert An[1, 0] == pytest.approx(-40 / 3.1)


def test_separated_loop_block_structure_and_factorisation():
    d = run(MASS_SPRING)
    n = 2
    M = d.separated.value
    np.testing.assert_array_equal(M[n:, :n], 0)
    np.testing.assert_allclose(M[:n, :n], d.plant.A - d.plant.B @ d.K.value)
    np.testing.assert_allclose(M[n:, n:], d.plant.A - d.L.value @ d.plant.C)
    assert d.separated.factors_as_expected is True
    # the computed 2n polynomial has the product's roots
    roots = np.roots([float(c) for c in d.separated.charpoly])
    want = np.array([-4 + 3j, -4 - 3j, -16 + 12j, -16 - 12j])
    assert np.sort_complex(roots) == pytest.approx(np.sort_complex(want), rel=1e-9)


def test_reference_gain_gives_unit_dc_gain():
    d = run(MASS_SPRING)
    A, B, C = d.plant.A, d.plant.B, d.plant.C
    N = d.reference.value
    dc = C @ np.linalg.solve(-(A - B @ d.K.value), B @ N)
    assert dc.item() == pytest.approx(1.0, rel=1e-12)
    m, k, c, kf = (d.design.symbols[x] for x in ("m", "k", "c", "kf"))
    # closed loop r -> y is N kf/m / ((s+4)^2+9): N = 25 m / kf
    assert sp.simplify(d.reference.closed_form - 25 * m / kf) == 0


def test_compensator_transfer_function_matches_state_space():
    d = run(MASS_SPRING)
    comp = d.compensator
    F, L, K = comp.state_matrix, d.L.value, d.K.value
    for w in (0.3, 2.0, 11.0):
        s = 1j * w
        direct = (K @ np.linalg.solve(s * np.eye(2) - F, L))[0, 0]
        tf = np.polyval(comp.numerator, s) / np.polyval(comp.denominator, s)
        assert tf == pytest.approx(direct, rel=1e-9)
    assert comp.numerator_closed_form is not None


def test_zero_at_origin_has_no_reference_gain():
    # G(s) = s / ((s + 1)(s + 2)): a zero at the origin, so no steady-state gain to invert
    text = design_text(
        [[0, 1], [-2, -3]],
        [[0], [1]],
        [[0, 1]],
        ["-2", "-3"],
        ["-8", "-9"],
    )
    d = run(text)
    assert d.reference is None
    assert any("zero at s = 0" in n for n in d.notes)


def test_uncontrollable_at_values_is_a_clear_error():
    text = MASS_SPRING.replace("[parameters.kf]\nvalue = 2.0", "[parameters.kf]\nvalue = 0")
    with pytest.raises(symbolic.StructureError, match="uncontrollable.*kf = 0"):
        run(text)


def test_structurally_uncontrollable_is_a_clear_error():
    text = design_text(
        [[-1, 0], [0, -2]],
        [[1], [0]],
        [[1, 1]],
        ["-2", "-3"],
        ["-8", "-9"],
    )
    with pytest.raises(symbolic.StructureError, match="uncontrollable"):
        run(text)


def test_unobservable_is_a_clear_error():
    text = design_text(
        [[-1, 0], [0, -2]],
        [[1], [1]],
        [[1, 0]],
        ["-2", "-3"],
        ["-8", "-9"],
    )
    with pytest.raises(symbolic.StructureError, match="unobservable"):
        run(text)


def test_multi_input_uses_scipy_and_says_not_unique():
    text = design_text(
        [[0, 1, 0], [0, 0, 1], [-2, -3, -1]],
        [[0, 0], [1, 0], [0, 1]],
        [[1, 0, 0]],
        ["-2", "-3", "-4"],
        ["-10", "-11", "-12"],
    )
    d = run(text)
    assert not d.K.unique and d.K.closed_form is None
    assert d.L.closed_form is not None  # single output: L still in closed form
    eig = np.linalg.eigvals(d.plant.A - d.plant.B @ d.K.value)
    assert np.sort(eig.real) == pytest.approx([-4, -3, -2], rel=1e-8)
    assert any("not unique" in n for n in d.notes)
    assert d.passed


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_worked_designs_pass_every_check(path):
    d = derive(symbolic.load_design(path))
    assert d.passed, [c for c in d.checks if c.passed is False]
    assert d.K.closed_form is not None and d.L.closed_form is not None
    eig = np.linalg.eigvals(d.separated.value)
    assert np.all(eig.real < 0)


def test_budget_fallback_gives_numeric_results_with_a_note():
    design = parse_design(MASS_SPRING.encode(), "t.toml")
    import time

    from symbolic.derivation import closed_form as _closed_form

    original = _closed_form.closed_forms

    def slow(*a, **k):
        time.sleep(5)
        return original(*a, **k)

    _closed_form.closed_forms = slow
    try:
        t = time.perf_counter()
        d = derive(design, budget=0.5)
        assert time.perf_counter() - t < 4
    finally:
        _closed_form.closed_forms = original
    assert d.K.closed_form is None and not d.closed_form
    assert any("did not finish within 0.5 s" in n for n in d.notes)
    Kp = place_poles(d.plant.A, d.plant.B, [-4 + 3j, -4 - 3j]).gain_matrix
    np.testing.assert_allclose(d.K.value, Kp, rtol=1e-9)
    assert d.passed


# --------------------------------------------------------------------------
# Property test: random plants
# --------------------------------------------------------------------------
@st.composite
def plants(draw):
    n = draw(st.integers(2, 5))
    ints = st.integers(-4, 4)
    A = [[draw(ints) for _ in range(n)] for _ in range(n)]
    B = [[draw(ints)] for _ in range(n)]
    C = [[draw(ints) for _ in range(n)]]
    i, j = draw(st.integers(0, n - 1)), draw(st.integers(0, n - 1))
    A[i][j] = f"{A[i][j]} + a"  # one symbolic entry
    a_value = draw(st.sampled_from([0.5, 1.5, 2.25, -1.75, 3.0]))
    # well separated real poles and one complex pair
    base = draw(st.sampled_from([1.0, 1.5, 2.0, 3.0]))
    poles = [f"-{base * (k + 1):g}" for k in range(n - 2)] + [
        f"-{base}+{base}j",
        f"-{base}-{base}j",
    ]
    obs = [f"-{5 * base * (k + 1):g}" for k in range(n - 2)] + [
        f"-{4 * base}+{2 * base}j",
        f"-{4 * base}-{2 * base}j",
    ]
    return A, B, C, poles, obs, a_value


# 200 random plants in four shards of 50, so that the workers of pytest-xdist share them
@pytest.mark.parametrize("shard", range(4))
@settings(
    max_examples=50,
    deadline=None,
    suppress_health_check=[HealthCheck.filter_too_much, HealthCheck.too_slow],
)
@given(case=plants())
def test_random_plants_closed_form_agrees_with_scipy(shard, case):
    A, B, C, poles, obs, a_value = case
    An = np.array(
        [
            [float(x) if not isinstance(x, str) else float(x.split()[0]) + a_value for x in row]
            for row in A
        ]
    )
    Bn, Cn = np.array(B, float), np.array(C, float)
    ctrb = np.hstack([np.linalg.matrix_power(An, k) @ Bn for k in range(An.shape[0])])
    obsv = np.vstack([Cn @ np.linalg.matrix_power(An, k) for k in range(An.shape[0])])
    assume(np.linalg.cond(ctrb) < 1e5 and np.linalg.cond(obsv) < 1e5)
    text = design_text(A, B, C, poles, obs, params=f"[parameters.a]\nvalue = {a_value}\n")
    d = run(text)
    pc = np.array([complex(p.replace("j", "j")) for p in poles])
    po = np.array([complex(p) for p in obs])
    Kp = place_poles(An, Bn, pc).gain_matrix
    Lp = place_poles(An.T, Cn.T, po).gain_matrix.T
    np.testing.assert_allclose(d.K.value, Kp, rtol=1e-8, atol=1e-8 * np.abs(Kp).max())
    np.testing.assert_allclose(d.L.value, Lp, rtol=1e-8, atol=1e-8 * np.abs(Lp).max())
    # the 2n loop's eigenvalues are the union of the requested sets, to within the Bauer-Fike
    # bound kappa(V)·‖E‖ for a round-off perturbation ‖E‖ ≈ 100·eps·‖M‖ (F. L. Bauer and
    # C. T. Fike, "Norms and exclusion theorems", Numerische Mathematik 2:137-141, 1960)
    M = d.separated.value
    eig, V = scipy.linalg.eig(M)
    want = np.concatenate([pc, po])
    cost = np.abs(eig[:, None] - want[None, :])
    rows, cols = linear_sum_assignment(cost)  # pair eigenvalues with poles, order-free
    bound = np.linalg.cond(V) * 100 * np.finfo(float).eps * np.linalg.norm(M, 2)
    assert cost[rows, cols].max() <= max(bound, 1e-9 * np.abs(want).max())
    # and the closed form is really a formula in a: substituting back is exact
    assert d.K.closed_form.free_symbols <= {d.design.symbols["a"]}


def test_functions_of_parameters_in_the_plant():
    # sqrt, exp, sin, abs, tanh in the entries: handled as generators of the rational-function
    # field, then substituted back; the closed form must equal scipy's gain at the values.
    text = design_text(
        [[0, 1], ["-sqrt(a)*exp(b)", "-sin(b) - a**2/3"]],
        [[0], ["abs(cos(a)) + tanh(b)"]],
        [[1, 0]],
        ["-2+2j", "-2-2j"],
        ["-10+10j", "-10-10j"],
        params="[parameters.a]\nvalue = 1.5\n[parameters.b]\nvalue = 0.25\n",
    )
    d = run(text)
    assert d.K.closed_form is not None and d.passed
    a, b = d.design.symbols["a"], d.design.symbols["b"]
    assert d.K.closed_form[0, 0].has(sp.exp(b)) and d.K.closed_form[0, 0].has(sp.sqrt(a))
    Kp = place_poles(d.plant.A, d.plant.B, [-2 + 2j, -2 - 2j]).gain_matrix
    np.testing.assert_allclose(d.K.value, Kp, rtol=1e-10)


def test_slow_separated_loop_keeps_the_closed_gains(monkeypatch):
    """The two symbolic stages share one child; the first one's result survives when the
    second runs past the budget (run_bounded_steps keeps each finished step)."""
    import time

    from symbolic.derivation import closed_form as _closed_form

    original = _closed_form.separated_forms

    def slow(*a, **k):
        time.sleep(5)
        return original(*a, **k)

    monkeypatch.setattr(_closed_form, "separated_forms", slow)
    design = parse_design(MASS_SPRING.encode(), "t.toml")
    t = time.perf_counter()
    d = derive(design, budget=1.5)
    assert time.perf_counter() - t < 4.5
    assert d.K.closed_form is not None and d.L.closed_form is not None
    assert d.separated.closed_form is None
    assert any("separated-loop derivation did not finish within 1.5 s" in n for n in d.notes)
    assert not any("closed-form derivation did not finish" in n for n in d.notes)
    assert d.passed


def test_run_bounded_steps_reraises_our_errors_and_reports_a_crash():
    from symbolic.runtime.budget import run_bounded_steps
    from symbolic.runtime.errors import StructureError

    def steps(fail: str):
        yield 1
        if fail == "ours":
            raise StructureError("no such gain", key="plant")
        raise ZeroDivisionError("a bug")

    with pytest.raises(StructureError, match="no such gain"):
        run_bounded_steps(steps, ("ours",), seconds=20)
    results, at, stopped = run_bounded_steps(steps, ("bug",), seconds=20)
    assert results == [1] and len(at) == 1
    assert "ZeroDivisionError: a bug" in str(stopped)


def _sleep_then(seconds: float, value):
    import time

    time.sleep(seconds)
    return value


def test_bounded_children_run_side_by_side_and_keep_their_budgets():
    """BoundedChild forks at once and is collected later: two 1 s children take about 1 s
    together, not 2; each still has its own budget; a cancelled one is gone."""
    import multiprocessing as mp
    import time

    from symbolic.runtime.budget import BoundedChild
    from symbolic.runtime.errors import BudgetExceeded

    t = time.perf_counter()
    first = BoundedChild(_sleep_then, (1.0, "a"), seconds=20)
    second = BoundedChild(_sleep_then, (1.0, "b"), seconds=20)
    assert (first.result(), second.result()) == ("a", "b")
    assert time.perf_counter() - t < 1.8
    late = BoundedChild(_sleep_then, (5.0, "c"), seconds=0.5)
    with pytest.raises(BudgetExceeded, match="did not finish within 0.5 s"):
        late.result()
    stuck = BoundedChild(_sleep_then, (60.0, "d"), seconds=100)
    stuck.cancel()
    assert not [p for p in mp.active_children() if p.is_alive()]
    assert BoundedChild(_sleep_then, (0.0, "e"), seconds=None).result() == "e"  # in-process


WINCH = WORKED_FILES[0].parent / "hoist_winch.toml"


def test_extensions_started_beside_the_main_stage_equal_those_derived_afterwards():
    """derive starts the closed forms of integral action and of the digital controller in
    children beside its own, and runs the reduced observer's in its own child after K; the
    results are those of the extension functions called afterwards on the same design."""
    from symbolic.derivation.digital import digital_controller
    from symbolic.derivation.integral import integral_action
    from symbolic.derivation.reduced import reduced_observer

    d = derive(symbolic.load_design(WINCH))
    assert d.passed and d.integral is not None and d.discrete is not None
    assert d.reduced_observer is not None
    assert d.integral.closed_form == integral_action(d).closed_form
    assert d.reduced_observer.Ke_closed_form == reduced_observer(d).Ke_closed_form
    later = digital_controller(d)
    assert d.discrete.Phi_closed_form == later.Phi_closed_form
    assert d.discrete.Gamma_closed_form == later.Gamma_closed_form
    assert d.discrete.K_closed_form == later.K_closed_form
    assert "Putzer" in d.discrete.method
    assert not any("did not finish" in n for n in d.notes)


def test_a_failing_derivation_leaves_no_extension_child_behind(monkeypatch):
    """The sample time aliases the controller poles: derive raises after it started the
    extensions' children (here a slow one), and stops them."""
    import multiprocessing as mp
    import time

    from symbolic.derivation import zoh as _zoh
    from symbolic.runtime.errors import StructureError

    def slow(*args):
        time.sleep(60)

    monkeypatch.setattr(_zoh, "zero_order_hold_and_method", slow)
    text = WINCH.read_text().replace("sample_time = 0.05", "sample_time = 2.0")
    t = time.perf_counter()
    with pytest.raises(StructureError, match="aliases"):
        derive(parse_design(text.encode(), "winch.toml"))
    assert time.perf_counter() - t < 20
    assert not [p for p in mp.active_children() if p.is_alive()]


def test_reduced_observer_step_past_the_budget_is_noted_and_numeric(monkeypatch):
    """The reduced observer's closed form runs in the main symbolic child after the separated
    loop; when that child runs out of budget first, the reduced observer says its closed form
    did not run (and why) and gives numbers, which still pass their checks."""
    import time

    from symbolic.derivation import closed_form as _closed_form

    original = _closed_form.separated_forms

    def slow(*a, **k):
        time.sleep(5)
        return original(*a, **k)

    monkeypatch.setattr(_closed_form, "separated_forms", slow)
    text = MASS_SPRING.replace("[observer]\n", '[observer]\nkind = "reduced"\n').replace(
        'poles = ["-16+12j", "-16-12j"]', 'poles = ["-20"]'
    )
    d = derive(parse_design(text.encode(), "t.toml"), budget=1.5)
    assert d.K.closed_form is not None and d.reduced_observer is not None
    assert d.reduced_observer.Ke_closed_form is None
    assert any(
        "reduced-order observer: the closed form of the reduced observer did not run"
        " (the separated-loop derivation did not finish within 1.5 s)" in n
        for n in d.notes
    ), d.notes
    assert d.passed
