"""Timing of the simulation and of ``gainsmith memo`` (run on demand).

    python -m pytest tests/benchmarks/bench_simulate_memo.py -m benchmark -s -n 0

Targets (this project's own goals, common practice, no source): the three
step cases of a 4-state plant with its observer (8 states) over 10,000
samples in under 0.2 s; the observer-speed sweep with 20 factors in under
2 s; ``gainsmith memo`` of the 4-state worked design, figures and
``.tex``/``.md`` included and the PDF compile excluded, in under 5 s as a
whole process.  The PDF compile time is reported separately.
"""

from __future__ import annotations

import os
import shutil
import statistics
import subprocess
import sys
import time

import pytest

import symbolic
from symbolic.analysis.study import SPEED_FACTORS, _speed_study, simulation_study
from symbolic.verification.loop import loop_model
from symbolic.verification.shipped_assembly import shipped_controller
from symbolic.verification.step_cases import simulate_cases

from ..conftest import ROOT, WORKED

pytestmark = pytest.mark.benchmark


def _median(func, repeats=5):
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        func()
        times.append(time.perf_counter() - t)
    return statistics.median(times), times


@pytest.fixture(scope="module")
def belt():
    return symbolic.derive(symbolic.load_design(WORKED / "belt_drive.toml"))


def test_three_cases_10000_samples(belt):
    model = loop_model(belt)
    med, times = _median(lambda: simulate_cases(model, samples=10_000))
    print(
        f"\nthree cases, 4-state plant + observer, 10,000 samples: median {med:.3f} s {[round(t, 3) for t in times]}"
    )
    assert med < 0.2


def test_shipped_study_without_sweep(belt):
    med, times = _median(lambda: simulation_study(belt, sweep=False))
    print(f"\nshipped-loop study, three cases: median {med:.3f} s {[round(t, 3) for t in times]}")
    assert med < 0.5


def test_observer_speed_sweep_20_factors(belt):
    ctrl = shipped_controller(belt)

    def sweep():
        _speed_study(ctrl, 1.0, None, None, 2001)

    med, times = _median(sweep, repeats=3)
    print(f"\nobserver-speed sweep, 20 factors: median {med:.3f} s {[round(t, 3) for t in times]}")
    assert len(SPEED_FACTORS) == 20
    assert med < 2.0


def test_memo_whole_process(tmp_path):
    times = []
    for i in range(3):
        out = tmp_path / f"m{i}"
        t = time.perf_counter()
        proc = subprocess.run(
            [
                sys.executable,
                "-m",
                "symbolic",
                "memo",
                str(WORKED / "belt_drive.toml"),
                "-o",
                str(out),
                "--no-pdf",
            ],
            cwd=ROOT,
            capture_output=True,
        )
        assert proc.returncode in (0, 1), proc.stderr  # 1: the memo lists open items
        times.append(time.perf_counter() - t)
    med = statistics.median(times)
    load = os.getloadavg()[0]
    print(
        f"\nmemo (belt_drive, no PDF), whole process: median {med:.2f} s {[round(t, 2) for t in times]}, load {load:.1f}"
    )
    if shutil.which("pdflatex"):
        t = time.perf_counter()
        proc = subprocess.run(
            [
                sys.executable,
                "-m",
                "symbolic",
                "memo",
                str(WORKED / "belt_drive.toml"),
                "-o",
                str(tmp_path / "pdf"),
            ],
            cwd=ROOT,
            capture_output=True,
            text=True,
        )
        assert proc.returncode in (0, 1), proc.stderr  # 1: the memo lists open items
        print(
            f"memo with PDF: {time.perf_counter() - t:.2f} s; {proc.stdout.strip().splitlines()[-1]}"
        )
    assert med < 5.0
