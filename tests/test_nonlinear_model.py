"""Nonlinear plant models (``[model]``): equilibrium, linearisation, validation on the plant.

External checks:

* the linearised pendulum: for m l² θ'' = −m g l sin θ − b θ' + τ, A = [[0, 1], [−(g/l) cos θ*,
  −b/(m l²)]] and B = [0, 1/(m l²)]ᵀ, so the hanging equilibrium (θ* = 0) has −g/l and the
  upright one (θ* = π) +g/l (G. F. Franklin, J. D. Powell and A. Emami-Naeini, *Feedback
  Control of Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 9.2, the linearised pendulum --
  from memory);
* every Jacobian against NumPy central differences of the model's own equations at the
  operating point (independent computation), and the equilibrium by substitution back into
  f (the defining property);
* a model that is linear already gives exactly the gains of the same plant written as
  ``[plant]`` (the linearisation of a linear system is itself);
* the nonlinear simulation against the linear loop for a small step (the linearisation's
  defining property: the two agree to first order), and the reach found by the search
  against direct runs just inside and just outside it.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import sympy as sp

from symbolic import derive, load_design
from symbolic.analysis.nonlinear_loop import NonlinearLoop
from symbolic.analysis.nonlinear_study import _returns, nonlinear_study
from symbolic.analysis.study import simulation_study
from symbolic.input.reader import parse_design
from symbolic.runtime.errors import DesignFileError

from .conftest import ROOT, WORKED

PENDULUM = """
title = "pendulum"
[parameters.m]
value = 0.5
[parameters.l]
value = 0.3
[parameters.b]
value = 0.02
[parameters.g]
value = 9.81
[model]
states = [{{ name = "theta", unit = "rad", range = [{low}, {high}] }}, {{ name = "omega", unit = "rad/s" }}]
inputs = [{{ name = "torque", unit = "N m" }}]
outputs = ["angle"]
state_equations = ["omega", "(torque - m*g*l*sin(theta) - b*omega)/(m*l**2)"]
output_equations = ["theta"]
[model.operating_point]
theta = {point}
[controller]
poles = ["-6+4j", "-6-4j"]
[observer]
speed_factor = 4
"""


def _pendulum(point: str, low=-4.0, high=4.0, extra: str = ""):
    return parse_design(PENDULUM.format(point=point, low=low, high=high) + extra, "pendulum.toml")


def test_linearised_pendulum_hanging_and_upright():
    m, length, b, g = sp.symbols("m l b g", real=True)
    hanging = _pendulum("0")
    assert hanging.plant.A == sp.Matrix([[0, 1], [-g / length, -b / (length**2 * m)]])
    assert hanging.plant.B == sp.Matrix([[0], [1 / (length**2 * m)]])
    upright = _pendulum('"pi"')
    assert sp.simplify(upright.plant.A[1, 0] - g / length) == 0
    # the torque that holds the pendulum still is zero at both
    assert hanging.model.operating_point.inputs == (0,)
    assert sp.simplify(upright.model.operating_point.inputs[0]) == 0


def _central_jacobian(fun, z, h=1e-6):
    z = np.asarray(z, float)
    cols = []
    for k in range(z.size):
        step = np.zeros_like(z)
        step[k] = h * max(1.0, abs(z[k]))
        cols.append((fun(z + step) - fun(z - step)) / (2 * step[k]))
    return np.column_stack(cols)


@pytest.mark.parametrize("name", ["sensor_boom"])
def test_jacobians_equal_central_differences_and_the_point_is_an_equilibrium(name):
    design = load_design(WORKED / f"{name}.toml")
    d = derive(design)
    loop = NonlinearLoop(d, simulation_study(d, sweep=False).controller)
    n = loop.n
    x, u = loop.x_star, loop.u_star
    np.testing.assert_allclose(loop.f(x, u), 0.0, atol=1e-12)  # f(x*, u*) = 0
    np.testing.assert_allclose(loop.h(x, u), loop.y_star, atol=1e-12)
    A = _central_jacobian(lambda z: loop.f(z, u), x)
    B = _central_jacobian(lambda v: loop.f(x, v), u)
    C = _central_jacobian(lambda z: loop.h(z, u), x)
    np.testing.assert_allclose(d.plant.A, A, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(d.plant.B, B.reshape(n, -1), rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(d.plant.C, C.reshape(-1, n), rtol=1e-6, atol=1e-6)
    # the operating point is exact: substituted back, f vanishes identically
    model = design.model
    at = dict(
        zip(
            (*model.state_symbols, *model.input_symbols),
            (*model.operating_point.states, *model.operating_point.inputs),
            strict=True,
        )
    )
    assert all(sp.simplify(f.xreplace(at)) == 0 for f in model.state_equations)


LINEAR_MODEL = """
title = "mass on a spring"
[parameters.k]
value = 4.0
[parameters.m]
value = 0.5
[model]
states = ["x", "v"]
inputs = ["F"]
outputs = ["y"]
state_equations = ["v", "(F - k*x)/m"]
output_equations = ["x"]
[model.operating_point]
x = 0.25
[controller]
poles = ["-3+3j", "-3-3j"]
[observer]
speed_factor = 4
"""


def test_a_linear_model_gives_the_gains_of_the_same_plant():
    as_model = LINEAR_MODEL
    as_plant = """
title = "mass on a spring"
[parameters.k]
value = 4.0
[parameters.m]
value = 0.5
[plant]
A = [[0, 1], ["-k/m", 0]]
B = [[0], ["1/m"]]
C = [[1, 0]]
[controller]
poles = ["-3+3j", "-3-3j"]
[observer]
speed_factor = 4
"""
    a = derive(parse_design(as_model, "model.toml"))
    b = derive(parse_design(as_plant, "plant.toml"))
    assert sp.simplify(a.K.closed_form - b.K.closed_form) == sp.zeros(1, 2)
    assert sp.simplify(a.L.closed_form - b.L.closed_form) == sp.zeros(2, 1)
    k = a.design.symbols["k"]
    assert a.design.model.operating_point.inputs == (k / 4,)  # F* = k x*


def test_two_equilibria_need_a_range_and_the_range_picks_one():
    # theta fixed at 0 from a torque: solved for theta instead by fixing the torque
    text = PENDULUM.replace("theta = {point}", "torque = 0").format(point="", low=-4, high=4)
    with pytest.raises(DesignFileError, match="equilibria fit") as err:
        parse_design(text, "two.toml")
    assert "model.operating_point" in str(err.value)
    narrowed = PENDULUM.replace("theta = {point}", "torque = 0").format(point="", low=-1, high=1)
    assert parse_design(narrowed, "one.toml").model.operating_point.states[0] == 0


@pytest.fixture(scope="module")
def boom():
    """The worked sensor boom: derivation, linear study and the nonlinear study, once."""
    d = derive(load_design(WORKED / "sensor_boom.toml"))
    study = simulation_study(d, sweep=False)
    return d, study, nonlinear_study(d, study.controller, study.horizon)


def test_small_steps_follow_the_linear_loop_and_large_ones_do_not(boom):
    _d, _study, result = boom
    differences = [s.largest_difference for s in result.steps]
    assert differences == sorted(differences)  # the larger the step, the further apart
    assert differences[0] < 0.02 and differences[-1] > 0.05
    assert all(s.settled for s in result.steps)  # integral action removes the offset


def test_the_reach_is_where_the_runs_stop_returning(boom):
    d, study, result = boom
    loop = NonlinearLoop(d, study.controller)
    angle = result.reach[0]
    assert angle.state == "angle"
    scale = np.array(result.scales)
    # inside the estimate the loop returns; past the resolution of the search it does not
    for side, reach, bound in (
        (-1, angle.below, angle.bound_below),
        (1, angle.above, angle.bound_above),
    ):
        assert _returns(loop, 0, side * 0.99 * reach, study.horizon, study.u_max, scale)
        beyond = reach + bound / 2**7
        if beyond < bound:
            assert not _returns(loop, 0, side * beyond, study.horizon, study.u_max, scale)


def test_required_offsets_out_of_reach_fail_the_verdict(tmp_path):
    text = (WORKED / "sensor_boom.toml").read_text().replace("angle = 0.3", "angle = 1.5")
    path = tmp_path / "too_far.toml"
    path.write_text(text)
    done = subprocess.run(
        [sys.executable, "-m", "symbolic", "simulate", str(path)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 1, done.stderr
    assert "FAIL  recovery from an initial offset" in done.stdout


def test_the_digital_controller_is_run_at_its_samples_on_the_nonlinear_plant():
    # a plant that is linear already, written as a [model], with a digital controller: the
    # sampled runs on "the nonlinear plant" (fixed-step Runge-Kutta between the samples) must
    # reproduce the linear loop's exact zero-order-hold simulation (Van Loan's matrix
    # exponential, symbolic.verification) -- the same loop computed two independent ways
    text = LINEAR_MODEL + "\n[discrete]\nsample_time = 0.02\n"
    d = derive(parse_design(text, "digital.toml"))
    study = simulation_study(d, sweep=False)
    assert study.controller.digital
    result = nonlinear_study(d, study.controller, study.horizon)
    assert "Runge" in result.method and "grid" in result.reach_method
    assert all(s.settled for s in result.steps)
    assert max(s.largest_difference for s in result.steps) < 1e-6
    # a linear stable loop returns from anywhere: the whole search bound on every side
    assert all(r.below == r.bound_below and r.above == r.bound_above for r in result.reach)


def test_a_digital_sensor_boom_is_judged_not_skipped():
    text = (WORKED / "sensor_boom.toml").read_text() + "\n[discrete]\nsample_time = 0.005\n"
    d = derive(parse_design(text, "digital.toml"))
    from symbolic.analysis.verdict import requirement_table

    table = requirement_table(d, simulation_study(d, sweep=False))
    rows = {r.key: r for r in table.rows}
    assert rows["nonlinear_steps"].passed and rows["nonlinear_reach"].passed
    assert "grid of 64" in rows["nonlinear_reach"].basis


BASE = """
title = "t"
[parameters.k]
value = 2.0
[model]
states = ["x", "v"]
inputs = ["u"]
state_equations = ["v", "u - k*x"]
output_equations = ["x"]
[model.operating_point]
x = 1.0
[controller]
poles = ["-2", "-3"]
[observer]
speed_factor = 4
"""

HOSTILE = [
    ('state_equations = ["v", "u - k*x"]', 'state_equations = ["v"]', "model.state_equations"),
    (
        'state_equations = ["v", "u - k*x"]',
        'state_equations = ["v", "__import__(\'os\')"]',
        "model.state_equations[1]",
    ),
    (
        'state_equations = ["v", "u - k*x"]',
        'state_equations = ["v", "u.real"]',
        "model.state_equations[1]",
    ),
    ('state_equations = ["v", "u - k*x"]', 'state_equations = ["v", 3]', None),
    (
        'state_equations = ["v", "u - k*x"]',
        'state_equations = ["v", "u - q*x"]',
        "model.state_equations[1]",
    ),
    ("x = 1.0", "x = 1.0\nv = 0.0", "model.operating_point"),
    ("x = 1.0", "speed = 1.0", "model.operating_point.speed"),
    ("x = 1.0", 'x = "exp(exp(1e15))"', "model.operating_point.x"),
    ('states = ["x", "v"]', 'states = ["k", "v"]', "model.states[0].name"),
    (
        'states = ["x", "v"]',
        'states = [{ name = "x", range = [2, 1] }, "v"]',
        "model.states[0].range",
    ),
    (
        'states = ["x", "v"]',
        'states = [{ name = "x", range = [2, 3] }, "v"]',
        "model.operating_point",
    ),
    ('inputs = ["u"]', "", "model.inputs"),
    ("[model.operating_point]", "steps = [0.0]\n[model.operating_point]", "model.steps"),
    ("[model.operating_point]", "colour = 1\n[model.operating_point]", "model.colour"),
    ("[controller]", "[plant]\nA = [[0]]\nB = [[1]]\nC = [[1]]\n[controller]", "model"),
    ('output_equations = ["x"]', 'output_equations = "x"', "model.output_equations"),
]


@pytest.mark.parametrize(("old", "new", "key"), HOSTILE)
def test_bad_models_are_refused_with_the_key(old, new, key):
    text = BASE.replace(old, new)
    assert text != BASE
    with pytest.raises(DesignFileError) as err:
        parse_design(text, "bad.toml")
    message = str(err.value)
    assert "\n" not in message and "bad.toml" in message
    if key is not None:
        assert key in message, message


def test_command_line_bad_model_is_one_line_and_exit_2(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(BASE.replace('"u - k*x"', "\"__import__('os').system('touch HACKED')\""))
    done = subprocess.run(
        [sys.executable, "-m", "symbolic", "derive", str(path)],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 2
    assert len(done.stderr.strip().splitlines()) == 1 and "Traceback" not in done.stderr
    assert not (tmp_path / "HACKED").exists()


def test_model_sections_and_rows_are_in_the_committed_memo():
    # the committed memo is checked current by tests/test_memo.py
    text = (WORKED / "sensor_boom.md").read_text(encoding="utf-8")
    assert "## Nonlinear model and operating point" in text
    assert "## Validation on the nonlinear plant" in text
    assert "steps on the nonlinear plant" in text
    assert "recovery from an initial offset (nonlinear plant)" in text


def test_a_moved_operating_point_is_a_changed_request():
    from symbolic.analysis.revision_inputs import plant_differences, request_differences

    text = (WORKED / "sensor_boom.toml").read_text()
    old = parse_design(text, "a.toml")
    new = parse_design(text.replace("angle_measured = 0.7", "angle_measured = 0.8"), "b.toml")
    changed = {d.item: d for d in request_differences(old, new) if d.change == "changed"}
    assert set(changed) == {"operating point angle_measured"}
    assert (
        changed["operating point angle_measured"].old,
        changed["operating point angle_measured"].new,
    ) == ("7/10", "4/5")
    # and the linearisation moved with it: cos(7/10) became cos(4/5) in A
    plant = [d.item for d in plant_differences(old.plant, new.plant) if d.change == "changed"]
    assert plant == ["A[2,1]"]


def test_json_operating_point_is_the_hand_equilibrium():
    # holding still at angle θ* needs the torque kt·i* = m g l sin θ* and the voltage R i*
    # (rate zero, so no back-EMF): the equilibrium by hand, with NumPy
    from symbolic.render.report import derivation_json

    d = derive(load_design(WORKED / "sensor_boom.toml"))
    point = derivation_json(d)["operating_point"]
    m, g, l_arm, kt, R = 2.5, 9.81, 0.4, 1.8, 2.0
    current = m * g * l_arm * np.sin(0.7) / kt
    assert point["fixed"] == ["angle_measured"] and point["closed_form"]
    assert point["states"]["rate"]["value"] == 0.0
    np.testing.assert_allclose(point["states"]["current"]["value"], current, rtol=1e-14)
    np.testing.assert_allclose(point["inputs"]["voltage"]["value"], R * current, rtol=1e-14)
