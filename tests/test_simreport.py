"""The simulation study of a derivation: `gainsmith simulate`, spec verdicts, saturation, sweep."""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest

import symbolic
from symbolic import derive
from symbolic.analysis.study import SPEED_FACTORS, simulation_study
from symbolic.cli import main
from symbolic.derivation.second_order import second_order_step_metrics
from symbolic.render.study_pages import simulation_json
from symbolic.verification.metrics import step_metrics

from .conftest import WORKED

CASE_KEYS = {
    "name",
    "overshoot_percent",
    "settling_time_2pct",
    "settling_time_1pct",
    "rise_time",
    "peak_time",
    "steady_state_error",
    "peak_control",
    "estimation_settling_time",
}

THIRD_ORDER = """
[parameters.a]
value = 2.0
[plant]
A = [[0, 1, 0], [0, 0, 1], [0, "-a", -3]]
B = [[0], [0], [1]]
C = [{output}]
[controller]
overshoot_percent = 10
settling_time = 2.0
remaining_pole_factor = {factor}
[simulation]
u_max = {u_max}
"""


@pytest.fixture(scope="module")
def focus():
    d = derive(symbolic.load_design(WORKED / "focus_actuator.toml"))
    return d, simulation_study(d)


def test_json_has_the_public_keys(focus):
    d, s = focus
    out = simulation_json(s)
    assert {"cases", "time_horizon", "samples"} <= set(out)
    assert [c["name"] for c in out["cases"]][0].startswith("state feedback")
    for case in out["cases"]:
        assert CASE_KEYS <= set(case)
    assert out["cases"][0]["estimation_settling_time"] is None  # no observer: not applicable
    assert out["cases"][2]["estimation_settling_time"] > 0  # mismatched estimate converges
    assert out["samples"] == d.design.simulation.samples
    json.dumps(out, allow_nan=False)


def test_measurements_are_the_metrics_of_the_responses(focus):
    _, s = focus
    for c in s.cases:
        again = step_metrics(c.response, reference=s.reference)
        assert again.overshoot_percent == c.metrics.overshoot_percent
    # separation principle: the matched observer reproduces the true-state response
    a, b = s.cases[0].response, s.cases[1].response
    np.testing.assert_allclose(
        a.tracked_output, b.tracked_output, rtol=0, atol=1e-10 * abs(s.reference)
    )


def test_second_order_plant_meets_its_specs_as_predicted(focus):
    # a second-order plant under state feedback IS the standard second-order system (no zeros):
    # the measured overshoot equals the exact formula 100 exp(-zeta pi / sqrt(1 - zeta^2))
    # (N. S. Nise, Control Systems Engineering, 7th ed., Sec. 4.6).
    d, s = focus
    pair = d.controller_poles.dominant
    exact = second_order_step_metrics(pair.damping_ratio, pair.natural_frequency, 0.02)
    m = s.cases[0].metrics
    assert m.overshoot_percent == pytest.approx(exact["overshoot_percent"], rel=1e-4)
    assert m.settling_time_2pct == pytest.approx(exact["settling_time"], rel=2e-3)
    assert all(v.passed for v in s.verdicts)
    assert s.passed


def test_observer_speed_study_spans_the_factors(focus):
    _, s = focus
    factors = [f for f, _ in s.speed_study]
    assert len(factors) == 20
    assert factors[0] == pytest.approx(0.5) and factors[-1] == pytest.approx(10.0)
    assert factors == list(SPEED_FACTORS)
    peaks = [m.peak_control for _, m in s.speed_study]
    assert peaks[-1] > peaks[0]  # a faster observer asks for more input from the same error


def test_extra_pole_near_the_pair_is_explained(write_design, capsys):
    # the remaining pole as slow as the pair: no overshoot at all, unlike the prediction
    path = write_design(THIRD_ORDER.format(factor=1.0, u_max=1e6, output="[1, 0, 0]"))
    code = main(["simulate", str(path)])
    out = capsys.readouterr().out
    assert code == 0  # both specs still met (overshoot 0 %, settling under 2 s)
    assert "further poles at -2" in out and "second-order approximation" in out


def test_plant_zero_near_the_pair_fails_the_specs_and_says_why(write_design, capsys):
    # y = 1.5 x1 + x2: a zero at s = -1.5, slower than the dominant pair's real part (-2)
    path = write_design(THIRD_ORDER.format(factor=5.0, u_max=1e6, output="[1.5, 1, 0]"))
    code = main(["simulate", str(path)])
    out = capsys.readouterr().out
    assert code == 1
    assert "NOT ACCEPTABLE" in out
    assert re.search(r"R\d+\s+FAIL\s+overshoot", out)
    assert "plant zeros at -1.5" in out


def test_actuator_limit_warning_and_saturated_run(write_design):
    path = write_design(THIRD_ORDER.format(factor=5.0, u_max=0.5, output="[1, 0, 0]"))
    d = derive(symbolic.load_design(path))
    s = simulation_study(d, sweep=False)
    assert any(r.startswith("WARNING") and "u_max = 0.5" in r for r in s.remarks)
    assert s.saturated is not None
    for c in s.saturated:
        assert np.max(np.abs(c.response.control)) <= 0.5 * (1 + 1e-9)
        assert c.response.saturated
    out = simulation_json(s)
    assert out["saturated_cases"] and out["u_max"] == 0.5


def test_no_saturated_run_below_the_limit(focus):
    _, s = focus
    assert s.saturated is None  # the peak input stays under u_max = 1.5 A
    assert any("stays within the actuator limit" in r for r in s.remarks)


def test_simulate_command_json(capsys):
    code = main(["simulate", str(WORKED / "levitated_ball.toml"), "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code in (0, 1)
    assert out["time_horizon"] == pytest.approx(0.25)
    assert len(out["cases"]) == 3
    for case in out["cases"]:
        for key in CASE_KEYS - {"name"}:
            v = case[key]
            assert v is None or math.isfinite(v)


def test_simulate_bad_input_is_one_line(write_design, capsys):
    path = write_design(THIRD_ORDER.format(factor=5.0, u_max=-1, output="[1, 0, 0]"))
    assert main(["simulate", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "simulation.u_max" in err
