"""Timing of ``gainsmith compare OLD NEW`` (run on demand).

    python -m pytest tests/benchmarks/bench_compare.py -m benchmark -s -n 0

The command is two derivations and two simulation studies, then the comparison itself.
Targets (this project's own goals, common practice, no source): the comparison of two
finished runs (every item, the expression comparison of the plant entries and the closed
forms included) in under 0.5 s; the whole process, interpreter start and imports included,
in under 8 s for each pair of worked designs below (each revision differs from the shipped
file in one parameter value).
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import time

import pytest

import symbolic
from symbolic.analysis.revision_diff import compare_revisions
from symbolic.analysis.study import simulation_run

from ..conftest import ROOT, WORKED

pytestmark = pytest.mark.benchmark

#: (worked design, the parameter line edited, its new text)
PAIRS = (
    ("focus_actuator.toml", "value = 0.012\n", "value = 0.014\n"),
    ("belt_drive.toml", "value = 6.0e-4\n", "value = 7.0e-4\n"),
)


def _revised(tmp_path, name, old, new):
    text = (WORKED / name).read_text(encoding="utf-8")
    assert text.count(old) == 1
    path = tmp_path / f"revised_{name}"
    path.write_text(text.replace(old, new), encoding="utf-8")
    return path


def _median(func, repeats=5):
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        func()
        times.append(time.perf_counter() - t)
    return statistics.median(times), times


@pytest.mark.parametrize("name, old, new", PAIRS)
def test_comparison_of_two_finished_runs(tmp_path, name, old, new):
    runs = [
        simulation_run(symbolic.derive(symbolic.load_design(p)))
        for p in (WORKED / name, _revised(tmp_path, name, old, new))
    ]
    med, times = _median(lambda: compare_revisions(*runs))
    print(f"\ncompare_revisions, {name}: median {med:.3f} s {[round(t, 3) for t in times]}")
    assert med < 0.5


@pytest.mark.parametrize("name, old, new", PAIRS)
def test_whole_process(tmp_path, name, old, new):
    revised = _revised(tmp_path, name, old, new)
    argv = [sys.executable, "-m", "symbolic", "compare", str(WORKED / name), str(revised)]

    def once():
        done = subprocess.run(argv, cwd=ROOT, capture_output=True, text=True, timeout=120)
        assert done.returncode in (0, 1), done.stderr

    med, times = _median(once, repeats=3)
    print(f"\ngainsmith compare, {name}: median {med:.2f} s {[round(t, 2) for t in times]}")
    assert med < 8.0
