"""Timing of a nonlinear model's linearisation and derivation.

Run on demand only (see README.md in this folder)::

    python -m pytest tests/benchmarks/bench_linearise.py -m benchmark -s -n 0

The plant is a demonstration of our own (invented values): a cart of mass M on a rail carrying
a pendulum of mass m on a massless rod of length l, pushed by a force F, four states (cart
position and speed, pendulum angle from upright and its rate), held upright at a cart position
of 0.3 m (the angle's range [-1, 1] rad picks the upright equilibrium, not the hanging one).  The equations are the textbook ones for this machine (derived from the Lagrangian;
they are the nonlinear cart–pendulum model of e.g. K. Ogata, *Modern Control Engineering*, 5th
ed., Prentice Hall, 2010, Sec. 3-5 -- from memory), with sin and cos of the angle.  Timed in
this process: reading the file, solving the equilibrium (in the forked child the reader uses),
the symbolic Jacobians, and the whole derivation of K and L in closed form with its checks,
median of 3 runs after one warm-up.  Target (the issue's): under 1 s on the 2-core reference
machine.
"""

from __future__ import annotations

import statistics
import time

import pytest

from symbolic import derive, load_design

TARGET_SECONDS = 1.0

CART_PENDULUM = """
title = "Cart and pendulum (benchmark)"

[parameters.M]
value = 1.2
unit = "kg"
[parameters.m]
value = 0.25
unit = "kg"
[parameters.l]
value = 0.5
unit = "m"
[parameters.c]
value = 0.4
unit = "N s/m"
[parameters.g]
value = 9.81
unit = "m/s^2"

[model]
states = ["position", "speed", { name = "angle", unit = "rad", range = [-1.0, 1.0] }, "rate"]
inputs = [{ name = "force", unit = "N" }]
outputs = ["position", "angle_out"]
state_equations = [
  "speed",
  "(force - c*speed + m*l*rate**2*sin(angle) - m*g*sin(angle)*cos(angle)) / (M + m*sin(angle)**2)",
  "rate",
  "((M + m)*g*sin(angle) - (force - c*speed + m*l*rate**2*sin(angle))*cos(angle)) / (l*(M + m*sin(angle)**2))",
]
output_equations = ["position", "angle"]

[model.operating_point]
position = 0.3
"""


@pytest.mark.benchmark
def test_linearise_and_derive_four_states(tmp_path):
    path = tmp_path / "cart_pendulum.toml"
    path.write_text(CART_PENDULUM + _design_rest())
    t = time.perf_counter()
    derive(load_design(path))  # warm-up: imports and caches
    first = time.perf_counter() - t
    times = []
    for _ in range(3):
        t = time.perf_counter()
        d = derive(load_design(path))
        times.append(time.perf_counter() - t)
    median = statistics.median(times)
    print(
        f"\nlinearise + derive, 4-state cart and pendulum: median {median:.3f} s"
        f" (runs {', '.join(f'{x:.3f}' for x in times)}; the first, with imports, {first:.3f} s);"
        f" closed form K: {d.K.closed_form is not None}"
    )
    assert d.passed and d.K.closed_form is not None
    assert median < TARGET_SECONDS


def _design_rest() -> str:
    return """
[controller]
poles = ["-2+2j", "-2-2j", "-4", "-5"]

[observer]
speed_factor = 4
"""
