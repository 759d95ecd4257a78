"""``gainsmith schedule``: gains over a parameter grid, checked against SciPy.

External reference: ``scipy.signal.place_poles`` (A. L. Tits and Y. Yang,
"Globally convergent algorithms for robust pole assignment by state
feedback", IEEE Trans. Automatic Control 41(10):1432-1452, 1996, as
implemented in SciPy), the observer gain from the dual problem, and the
defining property of N (unit steady-state gain from r to the tracked output).
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest
from scipy.signal import place_poles

from symbolic import derive
from symbolic.analysis.schedule import MAX_SCIPY_CHECKS, check_indices
from symbolic.cli import main
from symbolic.derivation.numeric import evaluate_matrix
from symbolic.input.reader import load_design, parse_design
from symbolic.render.schedule_code import gain_schedule
from symbolic.render.schedule_pages import schedule_csv, schedule_summary
from symbolic.runtime.errors import DesignFileError

from .conftest import WORKED

PNG = b"\x89PNG\r\n\x1a\n"


@pytest.fixture
def quick_figures(monkeypatch):
    """Skip rendering the figure where a test is about the table or the summary
    (matplotlib takes seconds on a busy machine; one test renders it for real)."""
    import symbolic.render.schedule_pages as pages

    monkeypatch.setattr(
        pages,
        "figure_files",
        lambda fig, stem: {f"{stem}.pdf": b"%PDF-stub", f"{stem}.png": PNG + b"stub"},
    )


@pytest.fixture(scope="module")
def belt():
    return derive(load_design(WORKED / "belt_drive.toml"))


@pytest.fixture(scope="module")
def focus():
    return derive(load_design(WORKED / "focus_actuator.toml"))


def _rows(data: bytes) -> tuple[list[str], list[dict[str, str]]]:
    reader = csv.DictReader(io.StringIO(data.decode("utf-8")))
    return list(reader.fieldnames or []), list(reader)


# A focus actuator variant of our own whose coil constant range reaches zero
# (a coil with a broken winding): the plant is uncontrollable at kf = 0.
def _focus_text(kf_range: str) -> str:
    text = (WORKED / "focus_actuator.toml").read_text()
    return text.replace("range = [2.2, 2.6]", f"range = {kf_range}")


@pytest.fixture
def focus_zero(tmp_path):
    path = tmp_path / "focus_zero.toml"
    path.write_text(_focus_text("[0.0, 3.0]"))
    return path


# --------------------------------------------------------------------------
# The table
# --------------------------------------------------------------------------
def test_csv_columns_and_row_count(belt):
    s = gain_schedule(belt, points=4)
    header, rows = _rows(schedule_csv(s))
    assert header == [
        "J2",
        "ks",
        *[f"K_{i}" for i in range(1, 5)],
        *[f"L_{i}" for i in range(1, 5)],
        "N",
        "valid",
        "scipy_agrees",
        "note",
    ]
    assert len(rows) == 4 * 4 == s.size
    # the ends of each range are grid points, exactly
    assert {float(r["J2"]) for r in rows} >= {4.0e-4, 9.0e-4}
    assert {float(r["ks"]) for r in rows} >= {0.9, 1.5}
    assert all(r["valid"] == "1" and r["scipy_agrees"] == "1" and r["note"] == "" for r in rows)
    assert s.passed


@pytest.mark.parametrize("row_index", [0, 5, 10, 15])
def test_rows_equal_place_poles(belt, row_index):
    design = belt.design
    s = gain_schedule(belt, points=4)
    _header, rows = _rows(schedule_csv(s))
    row = rows[row_index]
    values = dict(design.values)
    for prm in design.parameters:
        if prm.name in row:
            values[prm.symbol] = float(row[prm.name])
    A = evaluate_matrix(design.plant.A, values)
    B = evaluate_matrix(design.plant.B, values)
    C = evaluate_matrix(design.plant.C, values)
    ctrl = belt.controller_poles.values
    obs = belt.observer_poles.values
    # scipy.signal.place_poles (Tits & Yang 1996); L from the dual problem
    K_ref = place_poles(A, B, ctrl).gain_matrix[0]
    L_ref = place_poles(A.T, C.T, obs).gain_matrix[0]
    K = np.array([float(row[f"K_{i}"]) for i in range(1, 5)])
    L = np.array([float(row[f"L_{i}"]) for i in range(1, 5)])
    assert np.linalg.norm(K - K_ref) <= 1e-9 * np.linalg.norm(K_ref)
    assert np.linalg.norm(L - L_ref) <= 1e-9 * np.linalg.norm(L_ref)
    # N = 1 / (C (-(A - BK))^-1 B): unit steady-state gain (D = 0)
    dc = (C @ np.linalg.solve(-(A - B @ K[None, :]), B)).item()
    assert abs(float(row["N"]) * dc - 1) <= 1e-9


def test_only_varied_parameters_change(focus):
    s = gain_schedule(focus, points=3, vary=["m", "m", "kf"])  # a repeated name counts once
    assert [a.name for a in s.axes] == ["m", "kf"]
    assert dict(s.fixed) == {"k": 180.0, "c": 0.9}
    header, rows = _rows(schedule_csv(s))
    assert header[:2] == ["m", "kf"] and len(rows) == 9
    # L does not depend on kf: equal along each kf line (Ackermann on the dual pair)
    L1 = np.array([float(r["L_1"]) for r in rows]).reshape(3, 3)
    assert np.all(L1 == L1[:, :1])


# --------------------------------------------------------------------------
# Invalid points
# --------------------------------------------------------------------------
def test_range_through_an_uncontrollable_value_is_flagged(
    focus_zero, tmp_path, capsys, quick_figures
):
    out = tmp_path / "out"
    code = main(
        [
            "schedule",
            str(focus_zero),
            "-o",
            str(out),
            "--points",
            "4",
            "--vary",
            "kf",
            "--vary",
            "m",
        ]
    )
    assert code == 1
    text = capsys.readouterr().out
    assert "invalid points: 4 of 16; the first is row 1 (kf = 0, m = 0.01)" in text
    assert "uncontrollable: kf = 0" in text
    _header, rows = _rows((out / "focus_zero_schedule.csv").read_bytes())
    bad = [r for r in rows if float(r["kf"]) == 0.0]
    assert len(bad) == 4
    for r in bad:  # flagged, and no gain is written for them
        assert r["valid"] == "0" and r["note"] == "uncontrollable: kf = 0"
        assert r["K_1"] == r["K_2"] == r["N"] == "" and r["scipy_agrees"] == ""
    assert all(r["valid"] == "1" for r in rows if float(r["kf"]) != 0.0)


def test_singularity_between_grid_points_is_flagged(tmp_path, capsys):
    path = tmp_path / "focus_wide.toml"
    path.write_text(_focus_text("[-1.0, 3.0]"))  # kf = 0 lies between grid points
    d = derive(load_design(path))
    s = gain_schedule(d, points=6, vary=["kf"])
    kf = s.points[:, 0]
    assert not np.any(kf == 0.0)
    near = (kf == kf[kf < 0].max()) | (kf == kf[kf > 0].min())
    assert np.array_equal(~s.valid, near)
    assert np.all(np.isfinite(s.K[near]))  # the values themselves are right
    assert "kf = 0 (uncontrollable) lies between grid points" in s.singularities[0]
    assert not s.passed
    summary = schedule_summary(s)
    assert summary["invalid_points"] == 2 and summary["passed"] is False
    assert "between this point and its neighbour in kf" in summary["first_invalid"]["note"]


def test_disagreement_with_scipy_is_flagged(focus, monkeypatch):
    import symbolic.analysis.schedule as schedule

    real = schedule.scipy_placement

    def off_by_a_bit(A, B, poles):
        K, how = real(A, B, poles)
        return (None if K is None else K * (1 + 1e-6)), how

    monkeypatch.setattr(schedule, "scipy_placement", off_by_a_bit)
    s = gain_schedule(focus, points=2, vary=["m"])
    assert np.all(s.agrees == 0) and not s.passed and s.valid.all()
    assert "differs from scipy.signal.place_poles by 1.0e-06" in s.notes[0]
    summary = schedule_summary(s)
    assert summary["disagreements"] == 2 and summary["first_disagreement"]["row"] == 1


def test_repeated_poles_are_checked_by_their_eigenvalues(write_design):
    # place_poles refuses a pole repeated more often than rank(B) (TECH-NOTES);
    # the schedule then checks the eigenvalues of A - BK instead.
    path = write_design(
        """
        [parameters.m]
        value = 2.0
        range = [1.0, 3.0]
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[0], ["1/m"]]
        C = [[1, 0]]
        [controller]
        poles = ["-2", "-2"]
        [observer]
        poles = ["-8", "-8"]
        """
    )
    s = gain_schedule(derive(load_design(path), budget=0), points=3)
    assert s.passed and np.all(s.agrees == 1)
    assert "place_poles refused" in s.notes[0] and "eigenvalues" in s.notes[0]
    # (s + 2)^2 = s^2 + 4 s + 4: K = m * [4, 4]
    assert np.allclose(s.K[:, 0, :], np.array([[4, 4], [8, 8], [12, 12]]), rtol=1e-15)


def test_checked_points_are_all_or_evenly_spread():
    idx, text = check_indices(MAX_SCIPY_CHECKS)
    assert idx.size == MAX_SCIPY_CHECKS and text == f"every grid point ({MAX_SCIPY_CHECKS})"
    idx, text = check_indices(14641)
    assert idx.size == MAX_SCIPY_CHECKS and idx[0] == 0 and idx[-1] == 14640
    assert np.all(np.diff(idx) >= 7) and "evenly spread" in text


# --------------------------------------------------------------------------
# Bad requests
# --------------------------------------------------------------------------
@pytest.mark.parametrize(
    "points, vary, key, problem",
    [
        (11, ["kq"], "--vary kq", "no parameter named 'kq' (the parameters are: m, k, c, kf)"),
        (1, None, "--points", "expected 2 to 1001 grid points per parameter, got 1"),
        (1002, ["m"], "--points", "expected 2 to 1001 grid points per parameter, got 1002"),
        (
            1001,
            ["m", "k"],
            "--points",
            "the grid would have 1001 x 1001 = 1002001 points, more than the limit of 1000000",
        ),
        (
            32,
            None,
            "--points",
            "the grid would have 32 x 32 x 32 x 32 = 1048576 points",
        ),
    ],
)
def test_bad_requests_are_input_errors(focus, points, vary, key, problem):
    with pytest.raises(DesignFileError) as info:
        gain_schedule(focus, points=points, vary=vary)
    assert info.value.key == key
    assert problem in info.value.problem


def test_vary_a_parameter_without_range(belt):
    with pytest.raises(DesignFileError) as info:
        gain_schedule(belt, vary=["kt"])
    assert info.value.key == "parameters.kt.range"
    assert info.value.problem.startswith("parameter kt has no range")


def test_no_parameter_with_a_range(write_design):
    path = write_design(
        """
        [parameters.m]
        value = 2.0
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[0], ["1/m"]]
        C = [[1, 0]]
        [controller]
        poles = ["-2", "-3"]
        """
    )
    with pytest.raises(DesignFileError, match="no parameter has a range"):
        gain_schedule(derive(load_design(path), budget=0))


def test_command_bad_request_exits_2_before_deriving(tmp_path, capsys, monkeypatch):
    import symbolic

    def no_derivation(*_a, **_k):  # the request is refused before any symbolic work
        raise AssertionError("derived anyway")

    monkeypatch.setattr(symbolic, "derive", no_derivation)
    src = str(WORKED / "belt_drive.toml")
    assert main(["schedule", src, "-o", str(tmp_path), "--vary", "kt"]) == 2
    err = capsys.readouterr().err
    assert "parameters.kt.range: parameter kt has no range" in err and err.count("\n") == 1
    assert main(["schedule", src, "-o", str(tmp_path), "--points", "1"]) == 2
    assert not any(tmp_path.iterdir())


def test_parameter_named_like_a_column(write_design, tmp_path):
    path = write_design(
        """
        [parameters.N]
        value = 2.0
        range = [1.0, 3.0]
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[0], ["1/N"]]
        C = [[1, 0]]
        [controller]
        poles = ["-2", "-3"]
        [observer]
        poles = ["-8", "-9"]
        """
    )
    s = gain_schedule(derive(load_design(path), budget=0), points=3)
    header, rows = _rows(schedule_csv(s))
    assert header[0] == "param_N" and header.count("N") == 1
    # double integrator with input 1/N: K = N * [6, 5] ((s + 2)(s + 3) = s^2 + 5 s + 6)
    assert [float(r["K_1"]) for r in rows] == [6.0, 12.0, 18.0]


# --------------------------------------------------------------------------
# The command: files, exit codes, JSON
# --------------------------------------------------------------------------
def test_command_writes_csv_and_figures_and_exits_0(tmp_path, capsys):
    src = str(WORKED / "belt_drive.toml")
    out = tmp_path / "sched"
    assert main(["schedule", src, "-o", str(out), "--points", "3"]) == 0
    names = sorted(p.name for p in out.iterdir())
    assert names == [
        "belt_drive_schedule.csv",
        "belt_drive_schedule.pdf",
        "belt_drive_schedule.png",
    ]
    assert (out / "belt_drive_schedule.png").read_bytes().startswith(PNG)
    assert (out / "belt_drive_schedule.pdf").read_bytes().startswith(b"%PDF")
    text = capsys.readouterr().out
    assert "grid: 9 points (3 J2 x 3 ks)" in text
    assert "invalid points: none of 9" in text and "disagreements: none" in text
    for name in ("K_1", "L_4", "N"):
        assert f"  {name}" in text


def test_command_json_summary(focus_zero, tmp_path, capsys, quick_figures):
    out = tmp_path / "j"
    code = main(
        ["schedule", str(focus_zero), "-o", str(out), "--points", "3", "--vary", "kf", "--json"]
    )
    assert code == 1
    summary = json.loads(capsys.readouterr().out)
    assert summary["grid_points"] == 3
    assert summary["axes"] == [{"name": "kf", "unit": "N/A", "low": 0.0, "high": 3.0, "points": 3}]
    assert summary["invalid_points"] == 1
    assert summary["first_invalid"] == {
        "row": 1,
        "point": {"kf": 0.0},
        "note": "uncontrollable: kf = 0",
    }
    assert summary["disagreements"] == 0 and summary["passed"] is False
    assert set(summary["gain_ranges"]) == {"K_1", "K_2", "L_1", "L_2", "N"}
    assert summary["gain_ranges"]["K_1"]["min"] < summary["gain_ranges"]["K_1"]["max"]
    assert summary["sha256"] == load_design(focus_zero).sha256
    assert len(summary["files"]) == 3


def test_grid_ends_are_exact_and_sorted(focus):
    s = gain_schedule(focus, points=7, vary=["c"])
    c = s.axes[0].values
    assert c[0] == 0.6 and c[-1] == 1.2 and np.all(np.diff(c) > 0)


def test_design_parsed_from_text(tmp_path):
    # a design given as text (no file on disk) works too
    text = _focus_text("[2.0, 2.8]").encode()
    d = derive(parse_design(text, str(tmp_path / "focus_text.toml")))
    assert gain_schedule(d, points=2, vary=["kf"]).passed
