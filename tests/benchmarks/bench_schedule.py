"""Timing of the vectorised closed form behind ``gainsmith schedule``.

Run on demand only (see README.md in this folder)::

    python -m pytest tests/benchmarks/bench_schedule.py -m benchmark -s -n 0

K of the worked belt drive (4 states, 5 parameters) is evaluated at 1,000,000
random parameter points three ways:

* the vectorised closed form (:func:`symbolic.render.gain_evaluator.gain_evaluator`:
  ``sympy.lambdify`` with NumPy, common subexpressions, small powers as
  products, evaluated in cache-sized blocks);
* ``scipy.signal.place_poles`` point by point, timed over 2000 points and
  extrapolated to 1e6 (the matrices are built beforehand and not timed);
* a NumPy expression of the same formula written out by hand from the closed
  form that ``gainsmith derive worked_designs/belt_drive.toml`` prints.

Targets (this project's goals, common practice, no source): the closed form
at least 1000 times faster than SciPy point by point, and no more than twice
the time of the hand-written expression.  Wall-clock numbers depend on the
machine and its load; the printed lines are the result, the asserts flag a
clear miss.
"""

from __future__ import annotations

import os
import statistics
import time

import numpy as np
import pytest
import sympy as sp
from scipy.signal import place_poles

from symbolic import derive, load_design
from symbolic.render.gain_evaluator import gain_evaluator
from symbolic.render.gain_formulas import gain_formulas

from ..conftest import ROOT

pytestmark = pytest.mark.benchmark

POINTS = 1_000_000
SCIPY_POINTS = 2000
REPEATS = 3
TARGET_SCIPY_RATIO = 1000.0  # scipy (extrapolated) / closed form, at least
TARGET_HAND_RATIO = 2.0  # closed form / hand-written NumPy, at most


def _hand_written_K(J1, J2, ks, b, kt):
    """K of belt_drive.toml as printed by ``gainsmith derive`` (K[0][0] ... K[0][3]).

    Written out by hand, the way an engineer would type the printed formulas
    into NumPy: no shared subexpressions, powers with ``**``.
    """
    k0 = (
        32174560 * J1 * J2 * b**2
        - 4351604 * J1 * J2 * b * ks
        + 328681 * J1 * J2 * ks**2
        - 100 * J1 * ks**3
        - 100 * J2 * ks**3
    ) / (100 * J2 * ks**2 * kt)
    k1 = (100 * J1 * J2 - J1 * b - J2 * b) / (J2 * kt)
    k2 = (
        32174560 * J1 * J2**2 * ks
        - 32174560 * J1 * J2 * b**2
        + 4351604 * J1 * J2 * b * ks
        - 328681 * J1 * J2 * ks**2
        + 100 * J1 * ks**3
        + 100 * J2 * ks**3
    ) / (100 * J2 * ks**2 * kt)
    k3 = (
        -8043640 * J1 * J2**2 * b
        + 1087901 * J1 * J2**2 * ks
        - 2500 * J1 * J2 * ks**2
        + 25 * J1 * b * ks**2
        + 25 * J2 * b * ks**2
    ) / (25 * J2 * ks**2 * kt)
    return np.stack([k0, k1, k2, k3], axis=-1)


def _median_time(func, repeats: int = REPEATS) -> tuple[float, object]:
    times = []
    result = None
    for _ in range(repeats):
        start = time.perf_counter()
        result = func()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def _random_points(design, count: int, rng) -> dict[str, np.ndarray]:
    """Uniform in each parameter's range, or within +-20 % of its value without one."""
    out = {}
    for prm in design.parameters:
        if prm.range is not None:
            lo, hi = float(prm.range[0]), float(prm.range[1])
        else:
            v = float(prm.value)
            lo, hi = sorted((0.8 * v, 1.2 * v))
        out[prm.name] = rng.uniform(lo, hi, count)
    return out


def test_closed_form_schedule_speed():
    design = load_design(ROOT / "worked_designs" / "belt_drive.toml")
    d = derive(design)
    formulas = gain_formulas(d)
    assert [p.name for p in design.parameters] == ["J1", "J2", "ks", "b", "kt"]
    evaluate = gain_evaluator(formulas, ("K",), validity=False)
    rng = np.random.default_rng(2024)
    values = _random_points(design, POINTS, rng)
    args = [values[name] for name in ("J1", "J2", "ks", "b", "kt")]

    # the hand-written formula must be the same formula (else the design changed)
    sample = {k: v[:1000] for k, v in values.items()}
    closed_sample = evaluate(sample).K[:, 0, :]
    hand_sample = _hand_written_K(*[sample[n] for n in ("J1", "J2", "ks", "b", "kt")])
    diff = np.max(np.abs(closed_sample - hand_sample) / np.abs(hand_sample))
    assert diff <= 1e-12, (
        "the hand-written K no longer matches belt_drive.toml: copy the formulas from"
        " `gainsmith derive worked_designs/belt_drive.toml` again"
    )

    closed_time, closed = _median_time(lambda: evaluate(values).K)
    hand_time, hand = _median_time(lambda: _hand_written_K(*args))
    assert closed.shape == (POINTS, 1, 4) and np.all(np.isfinite(closed))
    assert np.max(np.abs(closed[:, 0, :] - hand) / np.abs(hand)) <= 1e-12

    # scipy.signal.place_poles point by point over SCIPY_POINTS points
    symbols = [p.symbol for p in design.parameters]
    A_of = sp.lambdify(symbols, sp.Matrix(design.plant.A), "numpy")
    B_of = sp.lambdify(symbols, sp.Matrix(design.plant.B), "numpy")
    mats = [
        (
            np.asarray(A_of(*[a[k] for a in args]), dtype=float),
            np.asarray(B_of(*[a[k] for a in args]), dtype=float),
        )
        for k in range(SCIPY_POINTS)
    ]
    poles = d.controller_poles.values
    gains = np.empty((SCIPY_POINTS, 4))
    start = time.perf_counter()
    for k, (A, B) in enumerate(mats):
        gains[k] = place_poles(A, B, poles).gain_matrix[0]
    scipy_per_point = (time.perf_counter() - start) / SCIPY_POINTS
    scipy_time = scipy_per_point * POINTS
    worst = np.max(
        np.linalg.norm(gains - closed[:SCIPY_POINTS, 0, :], axis=1) / np.linalg.norm(gains, axis=1)
    )
    assert worst <= 1e-9  # the timed methods agree (Tits & Yang 1996 via SciPy)

    ratio_scipy = scipy_time / closed_time
    ratio_hand = closed_time / hand_time
    print()
    print(f"K of belt_drive.toml at {POINTS:,} random parameter points")
    print(
        f"  closed form (vectorised)      {closed_time:8.3f} s"
        f"  ({closed_time / POINTS * 1e9:6.1f} ns per point, median of {REPEATS})"
    )
    print(
        f"  hand-written NumPy            {hand_time:8.3f} s"
        f"  ({hand_time / POINTS * 1e9:6.1f} ns per point, median of {REPEATS})"
    )
    print(
        f"  scipy place_poles, per point  {scipy_time:8.1f} s"
        f"  ({scipy_per_point * 1e3:.3f} ms per point over {SCIPY_POINTS}, extrapolated)"
    )
    print(
        f"  ratio scipy / closed form     {ratio_scipy:10.0f}  (target >= {TARGET_SCIPY_RATIO:g})"
    )
    print(f"  ratio closed form / hand      {ratio_hand:10.2f}  (target <= {TARGET_HAND_RATIO:g})")
    print(f"  (load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs)")
    assert ratio_scipy >= TARGET_SCIPY_RATIO
    assert ratio_hand <= TARGET_HAND_RATIO
