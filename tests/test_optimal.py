"""The optimal pole rules: the linear-quadratic regulator and the Kalman–Bucy observer.

External values and methods, each named beside its check:

* the double integrator with Q = diag(1, 0), R = 1 has P = [[√2, 1], [1, √2]], K = [1, √2]
  and closed-loop poles −(1 ± j)/√2: B. D. O. Anderson and J. B. Moore, *Optimal Control:
  Linear Quadratic Methods*, Prentice Hall, 1990, Ch. 2-3 (the example is recalled from
  memory; the values also follow by hand from the three scalar Riccati equations);
* the independent Riccati solution of the random plants is the stable invariant subspace of
  the Hamiltonian matrix, computed here with NumPy's eigenvectors: J. E. Potter, "Matrix
  quadratic solutions", SIAM Journal on Applied Mathematics 14(3):496-501, 1966 (the method
  from memory); gainsmith itself calls ``scipy.linalg.solve_continuous_are`` (a Schur method);
* the Kalman–Bucy gain is the regulator gain of the dual pair (Aᵀ, Cᵀ): R. E. Kalman and
  R. S. Bucy, "New results in linear filtering and prediction theory", Journal of Basic
  Engineering 83(1):95-108, 1961.

The plants of the bad-input table are invented demos.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
import sympy as sp

import symbolic
from symbolic import DesignFileError, derive, load_design
from symbolic.derivation.numeric import numeric_ackermann
from symbolic.derivation.optimal import (
    OPTIMAL_POLE_DIGITS,
    ROUNDING_TOLERANCE,
    entrywise_difference,
    rounded_poles,
    rounding_for,
)
from symbolic.derivation.pole_rules import requested_rule
from symbolic.derivation.riccati import riccati_gain

DOUBLE_INTEGRATOR = textwrap.dedent(
    """\
    title = "Double integrator, optimal weights"

    [parameters.b]
    value = 1.0
    range = [0.5, 2.0]

    [plant]
    A = [[0, 1], [0, 0]]
    B = [[0], ["b"]]
    C = [[1, 0]]
    outputs = ["pos"]

    [controller]
    method = "optimal"
    state_weights = [1, 0]
    input_weights = [1]

    [observer]
    method = "optimal"
    process_noise = [0, 1]
    measurement_noise = [1]
    """
)


def hamiltonian_riccati(A, B, Q, R) -> np.ndarray:
    """P of AᵀP + PA − PBR⁻¹BᵀP + Q = 0 from the stable eigenvectors of the Hamiltonian
    (Potter 1966, from memory): independent of SciPy's Schur-based solver."""
    n = A.shape[0]
    H = np.block([[A, -B @ np.linalg.solve(R, B.T)], [-Q, -A.T]])
    w, V = np.linalg.eig(H)
    stable = V[:, w.real < 0]
    assert stable.shape[1] == n
    P = np.real(stable[n:, :] @ np.linalg.inv(stable[:n, :]))
    return (P + P.T) / 2


def matrix_toml(M: np.ndarray) -> str:
    return "[" + ", ".join("[" + ", ".join(repr(float(x)) for x in row) + "]" for row in M) + "]"


def random_design(seed: int, n: int = 3) -> tuple[str, dict]:
    """A random controllable and observable plant with random weights, as a design file."""
    rng = np.random.default_rng(seed)
    A = np.round(rng.normal(size=(n, n)), 3)
    B = np.round(rng.normal(size=(n, 1)), 3)
    C = np.round(rng.normal(size=(1, n)), 3)
    G = rng.normal(size=(n, n))
    Q = np.round(G @ G.T, 3)
    W = np.round(np.diag(rng.uniform(0.1, 2.0, n)), 3)
    R, V = np.array([[round(rng.uniform(0.1, 3.0), 3)]]), np.array([[0.05]])
    text = textwrap.dedent(
        f"""\
        title = "Random plant {seed}"

        [plant]
        A = {matrix_toml(A)}
        B = {matrix_toml(B)}
        C = {matrix_toml(C)}

        [controller]
        method = "optimal"
        state_weights = {matrix_toml(Q)}
        input_weights = {matrix_toml(R)}

        [observer]
        method = "optimal"
        process_noise = {matrix_toml(W)}
        measurement_noise = {matrix_toml(V)}
        """
    )
    return text, dict(A=A, B=B, C=C, Q=Q, R=R, W=W, V=V)


def relative(a, b) -> float:
    return float(np.linalg.norm(np.asarray(a) - np.asarray(b)) / np.linalg.norm(b))


# --------------------------------------------------------------------------------------------
# Published values
# --------------------------------------------------------------------------------------------
def test_double_integrator_riccati_closed_form():
    # Anderson and Moore 1990, Ch. 2-3 (from memory): P = [[√2, 1], [1, √2]], K = [1, √2],
    # poles −(1 ± j)/√2
    A, B = np.array([[0.0, 1.0], [0.0, 0.0]]), np.array([[0.0], [1.0]])
    sol = riccati_gain(A, B, np.diag([1.0, 0.0]), np.array([[1.0]]))
    r2 = math.sqrt(2.0)
    assert np.allclose(sol.riccati, [[r2, 1.0], [1.0, r2]], rtol=0, atol=1e-12)
    assert np.allclose(sol.gain, [[1.0, r2]], rtol=0, atol=1e-12)
    assert np.allclose(sorted(sol.poles, key=lambda z: z.imag), [-(1 + 1j) / r2, -(1 - 1j) / r2])
    assert sol.residual < 1e-14


def test_double_integrator_design_ships_the_optimal_gain(write_design):
    d = derive(load_design(write_design(DOUBLE_INTEGRATOR)))
    r2 = math.sqrt(2.0)
    assert d.controller_poles.origin == "optimal" and d.observer_poles.origin == "optimal"
    # the exact closed form at b = 1 is the LQR gain [1, √2] (Anderson and Moore, from memory),
    # up to rounding the poles (to within 1e-7 of the gain, entry by entry)
    assert relative(d.K.value, [[1.0, r2]]) < 2e-6
    # the dual problem with W = diag(0, 1), V = 1 is the same Riccati equation transposed
    assert relative(d.L.value, [[r2], [1.0]]) < 2e-6
    expected = {-(1 + 1j) / r2, -(1 - 1j) / r2}
    for z in d.controller_poles.values:
        assert min(abs(z - e) for e in expected) < 1e-6
    assert all(c.passed for c in d.checks), [c.name for c in d.checks if not c.passed]


def test_closed_form_places_the_rounded_poles_at_every_parameter_value(write_design):
    d = derive(load_design(write_design(DOUBLE_INTEGRATOR)))
    (b,) = d.design.plant.free_symbols
    for value in (sp.Rational(1, 2), sp.Integer(3)):
        A = np.array(d.design.plant.A.subs(b, value), dtype=float)
        B = np.array(d.design.plant.B.subs(b, value), dtype=float)
        K = np.array(d.K.closed_form.subs(b, value), dtype=float)
        achieved = np.sort_complex(np.linalg.eigvals(A - B @ K))
        assert np.allclose(achieved, np.sort_complex(d.controller_poles.values), atol=1e-12)


# --------------------------------------------------------------------------------------------
# Independent computations on random plants
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", [3, 11, 20])
def test_random_plant_gain_equals_the_hamiltonian_lqr_gain(write_design, seed):
    text, m = random_design(seed)
    d = derive(load_design(write_design(text)))
    P = hamiltonian_riccati(m["A"], m["B"], m["Q"], m["R"])
    K_ref = np.linalg.solve(m["R"], m["B"].T @ P)
    # rounding the poles to 6 significant digits moves K by about 1e-6 relative
    assert relative(d.K.value, K_ref) < 1e-4
    assert relative(d.controller_poles.optimal.gain, K_ref) < 1e-9
    assert relative(d.controller_poles.optimal.riccati, P) < 1e-9
    assert all(c.passed for c in d.checks), [c.name for c in d.checks if not c.passed]


@pytest.mark.parametrize("seed", [3, 11])
def test_random_plant_observer_gain_equals_the_kalman_bucy_gain(write_design, seed):
    text, m = random_design(seed)
    d = derive(load_design(write_design(text)))
    # the dual pair (Kalman and Bucy 1961): AP + PAᵀ − PCᵀV⁻¹CP + W = 0, L = PCᵀV⁻¹
    P = hamiltonian_riccati(m["A"].T, m["C"].T, m["W"], m["V"])
    L_ref = P @ m["C"].T @ np.linalg.inv(m["V"])
    assert relative(d.L.value, L_ref) < 1e-4
    assert relative(d.observer_poles.optimal.gain, L_ref) < 1e-9
    achieved = np.linalg.eigvals(m["A"] - d.L.value @ m["C"])
    assert np.allclose(np.sort_complex(achieved), np.sort_complex(d.observer_poles.values))


def test_riccati_residual_is_zero_and_P_is_positive_semidefinite():
    rng = np.random.default_rng(5)
    for _ in range(10):
        A, B = rng.normal(size=(4, 4)), rng.normal(size=(4, 1))
        G = rng.normal(size=(4, 2))
        Q, R = G @ G.T, np.array([[rng.uniform(0.1, 5.0)]])
        sol = riccati_gain(A, B, Q, R)
        P = sol.riccati
        residual = A.T @ P + P @ A - P @ B @ np.linalg.solve(R, B.T @ P) + Q
        assert np.linalg.norm(residual) <= 1e-9 * (1 + np.linalg.norm(P) * np.linalg.norm(A))
        assert np.linalg.eigvalsh(P).min() > -1e-9 * np.linalg.norm(P)
        assert np.all(np.linalg.eigvals(A - B @ sol.gain).real < 0)


def test_rounded_poles_are_exact_conjugate_pairs_within_the_rounding():
    z = np.array([-1.23456789 + 2.3456789j, -1.23456789 - 2.3456789j, -0.000123456789])
    poles = rounded_poles(z)
    assert all(p.is_Rational or sp.re(p).is_Rational for p in poles)
    assert poles[1] == sp.conjugate(poles[2])
    for p in poles:
        nearest = min(abs(complex(p) - w) for w in z)
        assert nearest <= 10.0 ** (1 - OPTIMAL_POLE_DIGITS) * abs(complex(p))


# --------------------------------------------------------------------------------------------
# The rule, the checks and the comparison
# --------------------------------------------------------------------------------------------
def test_requested_rule_and_checks(write_design):
    design = load_design(write_design(DOUBLE_INTEGRATOR))
    assert requested_rule("controller", design) == "optimal"
    assert requested_rule("observer", design) == "optimal"
    d = derive(design)
    names = [c.name for c in d.checks]
    assert any("residual of the algebraic Riccati equation" in n for n in names)
    assert sum("vs the optimal gain" in n for n in names) == 4


def test_no_stabilising_solution_is_one_line_naming_the_weights(write_design):
    # Q = 0 hides the double integrator's poles at s = 0: no stabilising solution exists
    text = DOUBLE_INTEGRATOR.replace("state_weights = [1, 0]", "state_weights = [0, 0]")
    path = write_design(text)
    with pytest.raises(DesignFileError) as info:
        derive(load_design(path))
    message = str(info.value)
    assert "\n" not in message and str(path) in message
    assert "controller.state_weights" in message and "stabilising" in message


def test_comparison_builds_what_the_specification_rule_ships(write_design):
    from symbolic.analysis.pole_comparison import pole_comparison
    from symbolic.analysis.study import simulation_study
    from symbolic.verification.shipped_assembly import shipped_controller

    spec_lines = "overshoot_percent = 10\nsettling_time = 6\n"
    optimal = DOUBLE_INTEGRATOR.replace(
        "input_weights = [1]\n", "input_weights = [1]\n" + spec_lines
    )
    d = derive(load_design(write_design(optimal, "optimal.toml")))
    comparison = pole_comparison(d, shipped_controller(d))
    # the twin that states only the specifications and the default observer rule
    twin = (
        textwrap.dedent(
            """\
        [parameters.b]
        value = 1.0
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[0], ["b"]]
        C = [[1, 0]]
        [controller]
        """
        )
        + spec_lines
    )
    t = derive(load_design(write_design(twin, "twin.toml")))
    alt = comparison.alternative
    assert np.allclose(
        np.sort_complex(alt.controller_poles), np.sort_complex(t.controller_poles.values)
    )
    assert np.allclose(
        np.sort_complex(alt.observer_poles), np.sort_complex(t.observer_poles.values)
    )
    study = simulation_study(t, sweep=False)
    # the numerically built loop against the twin's derived, exported gains
    assert alt.peak_input == pytest.approx(study.cases[1].metrics.peak_control, rel=1e-6)
    assert alt.peak_input_mismatched == pytest.approx(study.cases[2].metrics.peak_control, rel=1e-6)
    # the shipped loop: the peak input of the matched step is N r = K_1 at t = 0
    assert comparison.shipped.peak_input == pytest.approx(float(d.reference.value[0, 0]), rel=1e-9)


def test_memo_context_only_for_optimal_designs(write_design):
    from symbolic.render.comparison_memo import optimal_context
    from symbolic.verification.shipped_assembly import shipped_controller

    d = derive(load_design(write_design(DOUBLE_INTEGRATOR)))
    ctx = optimal_context(d, shipped_controller(d))
    assert len(ctx["blocks"]) == 2 and ctx["compared"]  # the speed-factor observer beside
    assert ctx["columns"][1] == "observer by the speed factor"
    given = DOUBLE_INTEGRATOR.split("[controller]")[0] + '[controller]\npoles = ["-1", "-2"]\n'
    g = derive(load_design(write_design(given, "given.toml")))
    assert optimal_context(g, shipped_controller(g)) is None


# --------------------------------------------------------------------------------------------
# Hostile input: one line naming the file and the key
# --------------------------------------------------------------------------------------------
W_LINE = "state_weights = [1, 0]"
R_LINE = "input_weights = [1]"
BAD = [
    ("q-too-short", W_LINE, "state_weights = [1]", "controller.state_weights", "diagonal"),
    ("q-wrong-rows", W_LINE, "state_weights = [[1, 0]]", "controller.state_weights", "2 × 2"),
    ("q-ragged", W_LINE, "state_weights = [[1, 0], [0]]", "controller.state_weights", "2 × 2"),
    ("q-mixed", W_LINE, "state_weights = [[1, 0], 0]", "controller.state_weights", "mixes"),
    ("q-negative", W_LINE, "state_weights = [1, -1]", "controller.state_weights", "semidefinite"),
    (
        "q-asymmetric",
        W_LINE,
        "state_weights = [[1, 2], [0, 1]]",
        "controller.state_weights",
        "not symmetric",
    ),
    (
        "q-indefinite",
        W_LINE,
        "state_weights = [[1, 2], [2, 1]]",
        "controller.state_weights",
        "negative eigenvalue",
    ),
    ("q-string", W_LINE, 'state_weights = ["b", 1]', "controller.state_weights[0]", "number"),
    ("q-nan", W_LINE, "state_weights = [nan, 1]", "controller.state_weights[0]", "finite"),
    ("q-huge", W_LINE, "state_weights = [1e300, 1]", "controller.state_weights[0]", "at most"),
    ("q-not-list", W_LINE, "state_weights = 1", "controller.state_weights", "expected a list"),
    ("r-singular", R_LINE, "input_weights = [0]", "controller.input_weights", "singular"),
    ("r-negative", R_LINE, "input_weights = [-1]", "controller.input_weights", "definite"),
    ("r-shape", R_LINE, "input_weights = [1, 1]", "controller.input_weights", "diagonal"),
    ("r-missing", R_LINE, "", "controller.input_weights", "missing"),
    (
        "weights-with-poles",
        R_LINE,
        R_LINE + '\npoles = ["-1", "-2"]',
        "controller.poles",
        "optimal",
    ),
    (
        "weights-without-method",
        'method = "optimal"\nstate',
        'method = "specifications"\nstate',
        "controller.state_weights",
        'only used with method = "optimal"',
    ),
    (
        "unknown-method",
        'method = "optimal"\nstate',
        'method = "lqr"\nstate',
        "controller.method",
        "unknown",
    ),
    (
        "band-without-specs",
        R_LINE,
        R_LINE + "\nsettling_band = 0.02",
        "controller.settling_band",
        "specifications",
    ),
    (
        "v-singular",
        "measurement_noise = [1]",
        "measurement_noise = [0]",
        "observer.measurement_noise",
        "singular",
    ),
    (
        "w-shape",
        "process_noise = [0, 1]",
        "process_noise = [[0, 1]]",
        "observer.process_noise",
        "2 × 2",
    ),
    (
        "w-negative",
        "process_noise = [0, 1]",
        "process_noise = [0, -1]",
        "observer.process_noise",
        "semidefinite",
    ),
    (
        "noise-with-speed-factor",
        "measurement_noise = [1]",
        "measurement_noise = [1]\nspeed_factor = 3",
        "observer.speed_factor",
        "optimal",
    ),
    (
        "noise-missing",
        "measurement_noise = [1]",
        "",
        "observer.measurement_noise",
        "missing",
    ),
    (
        "two-inputs",
        'B = [[0], ["b"]]',
        'B = [[0, 1], ["b", 0]]',
        "controller.method",
        "single-input",
    ),
    (
        "two-outputs-observer",
        'C = [[1, 0]]\noutputs = ["pos"]',
        'C = [[1, 0], [0, 1]]\noutputs = ["pos", "vel"]',
        "observer.method",
        "single-output",
    ),
]


@pytest.mark.parametrize("old, new, key, words", [b[1:] for b in BAD], ids=[b[0] for b in BAD])
def test_bad_weights_are_one_line_naming_the_key(write_design, old, new, key, words):
    text = textwrap.dedent(DOUBLE_INTEGRATOR)
    assert text.count(old) == 1, old
    path = write_design(text.replace(old, new))
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith(f"{path}: {key}:"), message
    assert words in message, message


def test_public_api_reaches_the_rule(write_design):
    d = symbolic.derive(symbolic.load_design(write_design(DOUBLE_INTEGRATOR)))
    optimal = d.controller_poles.optimal
    assert optimal is not None and optimal.digits >= OPTIMAL_POLE_DIGITS
    assert optimal.rounding <= ROUNDING_TOLERANCE
    assert f"rounded to {optimal.digits} significant digits" in d.controller_poles.rule


def test_rounding_takes_more_digits_where_the_gain_is_sensitive():
    # a fast open-loop pole the Kalman filter hardly moves (the camera pan axis of the worked
    # designs, dual pair): rounding its pole to 6 digits would move the third entry of L by
    # about 15 %, so the rule keeps more digits
    J, b, kt, Rw, Lw = 0.0024, 0.004, 0.085, 2.6, 0.0012
    A = np.array([[0, 1, 0], [0, -b / J, kt / J], [0, -kt / Lw, -Rw / Lw]])
    C = np.array([[1.0, 0.0, 0.0]])
    W, V = np.diag([0.0, 400.0, 0.0]), np.array([[1e-7]])
    P = hamiltonian_riccati(A.T, C.T, W, V)
    L_ref = (P @ C.T / V[0, 0]).T  # the dual gain Lᵀ (Kalman and Bucy 1961)
    poles = np.linalg.eigvals(A - L_ref.T @ C)
    coarse = [complex(z) for z in rounded_poles(poles, OPTIMAL_POLE_DIGITS)]
    assert entrywise_difference(numeric_ackermann(A.T, C.T, coarse), L_ref) > 1e-3
    rounded, digits, effect = rounding_for(A.T, C.T, poles)
    assert digits > OPTIMAL_POLE_DIGITS and effect <= ROUNDING_TOLERANCE
    placed = numeric_ackermann(A.T, C.T, [complex(z) for z in rounded])
    assert entrywise_difference(placed, L_ref) < 1e-6
