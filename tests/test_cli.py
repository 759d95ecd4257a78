"""The ``gainsmith`` command line: ``derive`` output, exit codes and error messages.

Most tests call :func:`symbolic.cli.main` in-process (fast); a few start
``python -m symbolic`` to check what a shell sees: exit codes, a single line
on stderr and no traceback.

The published facts used to check the JSON output:

* The closed-loop poles of ``u = -K x`` are the eigenvalues of ``A - B K``, and
  those of the observer error are the eigenvalues of ``A - L C``; K. Ogata,
  *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 10-2 and
  10-5 (section numbers from memory).
* Separation: the observer-based loop has exactly the controller poles together
  with the observer poles; Ogata, same edition, Sec. 10-6 (from memory).
* The reference gain N makes the DC gain from r to the tracked output 1,
  i.e. ``C (-(A - B K))^-1 B N = 1``; G. F. Franklin, J. D. Powell,
  A. Emami-Naeini, *Feedback Control of Dynamic Systems*, 7th ed., Pearson,
  2015, Sec. 7.6 "Introduction of the reference input" (from memory).
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
import sympy as sp
from scipy.optimize import linear_sum_assignment

import symbolic
from symbolic import load_design
from symbolic.cli import main
from symbolic.derivation import gains as _gains
from symbolic.derivation import numeric as _numeric

from .conftest import ROOT, WORKED_FILES

WORKED_IDS = [p.stem for p in WORKED_FILES]
PUBLIC_KEYS = {
    "K",
    "L",
    "reference_gain",
    "controller_poles",
    "observer_poles",
    "closed_loop_poles",
    "formulas",
    "conditions",
    "checks",
    "parameters",
}
FORMULA_KEYS = {"K", "L", "reference_gain", "controller_charpoly", "observer_charpoly"}

#: A design whose closed loop has three nearly coincident poles (10 nanoradians
#: apart).  The characteristic polynomial is then a near cube, whose roots are
#: determined by floating-point data only to about eps**(1/3) ~ 6e-6 (J. H.
#: Wilkinson, *The Algebraic Eigenvalue Problem*, Oxford, 1965, Ch. 2, the
#: perturbation of a multiple eigenvalue), so the eigenvalues of A - BK computed
#: by LAPACK miss the requested poles by more than the 1e-6 tolerance of the
#: double-precision check; the gain rounded to double is K = [7, 7, 0], whose
#: loop has the exact triple pole -2, within 5e-9 (relative) of the request, so
#: the 50-digit confirmation accepts it.  The plant is K. Ogata, *Modern Control
#: Engineering*, 5th ed., 2010, Example 10-1 (from memory).
NEARLY_REPEATED = """\
title = "Nearly repeated poles"
[plant]
A = [[0, 1, 0], [0, 0, 1], [-1, -5, -6]]
B = [0, 0, 1]
C = [1, 0, 0]
[controller]
poles = ["-2", "-2+1e-8j", "-2-1e-8j"]
[observer]
poles = [-20, -21, -22]
"""

#: Invented demo: a fan-cooled heat sink (thermal capacity Cth, resistance
#: Rth) with a second, lumped sensor lag; the bad variants below break it.
HEAT_SINK = """\
title = "Heat sink temperature loop"
[parameters.Cth]
value = 45.0
unit = "J/K"
[parameters.Rth]
value = 0.8
unit = "K/W"
[parameters.tau]
value = 2.0
unit = "s"
[plant]
A = [["-1/(Rth*Cth)", 0], ["1/tau", "-1/tau"]]
B = [["1/Cth"], [0]]
C = [[0, 1]]
outputs = ["T_sensor"]
[controller]
overshoot_percent = 5
settling_time = 60
[observer]
speed_factor = 4
"""


# --------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------
def run_main(*argv: str) -> tuple[int, str, str]:
    """``main(argv)`` with stdout and stderr captured (usable in module fixtures)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


def run_process(*argv: str, cwd: Path = ROOT) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env.pop("GAINSMITH_DEBUG", None)
    return subprocess.run(
        [sys.executable, "-m", "symbolic", *map(str, argv)],
        capture_output=True,
        text=True,
        cwd=cwd,
        env=env,
        timeout=120,
    )


def complex_list(pairs) -> np.ndarray:
    assert all(isinstance(p, list) and len(p) == 2 for p in pairs), pairs
    return np.array([complex(re, im) for re, im in pairs])


def assert_same_poles(got, want, rtol: float = 1e-7) -> None:
    """Equal as multisets: paired by an optimal assignment, relative to max(1, |p|)."""
    got, want = np.asarray(got, complex), np.asarray(want, complex)
    assert got.shape == want.shape
    cost = np.abs(got[:, None] - want[None, :]) / np.maximum(1.0, np.abs(want))[None, :]
    rows, cols = linear_sum_assignment(cost)
    assert cost[rows, cols].max() <= rtol, (got, want)


def numeric_plant(path: Path, overrides: dict[str, str] | None = None):
    """A, B, C, D of a design file evaluated at its (overridden) values."""
    design = load_design(path, overrides)
    values = design.values
    return tuple(
        np.array(getattr(design.plant, name).xreplace(values).evalf(30), dtype=float)
        for name in "ABCD"
    )


def formula_namespace(parameters: dict[str, float]) -> dict[str, sp.Symbol]:
    """Names for reading back our own formula strings (never a design file's text)."""
    names = {name: sp.Symbol(name, real=True) for name in parameters}
    names["s"] = sp.Symbol("s")
    return names


def read_formula(text: str, namespace: dict[str, sp.Symbol]) -> sp.Expr:
    # Only gainsmith's own JSON output reaches sympify here, and the worked
    # designs are ours; design-file text is never parsed this way.
    return sp.sympify(text, locals=namespace)


def values_of(parameters: dict[str, float], namespace) -> dict[sp.Symbol, sp.Rational]:
    return {namespace[k]: sp.Rational(repr(v)) for k, v in parameters.items()}


@pytest.fixture(scope="module")
def worked_json() -> dict[str, dict]:
    """``derive --json`` of every worked design, run once per module."""
    out = {}
    for path in WORKED_FILES:
        code, stdout, stderr = run_main("derive", "--json", path)
        assert code == 0, stderr
        assert stderr == ""
        out[path.stem] = json.loads(stdout)  # the whole of stdout is one JSON object
    return out


# --------------------------------------------------------------------------
# derive --json on the worked designs
# --------------------------------------------------------------------------
@pytest.mark.parametrize("name", WORKED_IDS)
def test_json_has_the_public_keys_and_types(worked_json, name):
    data = worked_json[name]
    path = ROOT / "worked_designs" / f"{name}.toml"
    assert isinstance(data, dict)
    assert PUBLIC_KEYS <= data.keys()
    A, B, C, _D = numeric_plant(path)
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    assert np.array(data["K"]).shape == (m, n)
    assert np.array(data["reference_gain"]).shape == (m, 1)
    assert len(complex_list(data["controller_poles"])) == n
    if data["observer_kind"] == "reduced-order":
        # the top level describes the shipped reduced observer: n - p poles, Ke (n - p) x p
        assert np.array(data["L"]).shape == (n - p, p)
        assert len(complex_list(data["observer_poles"])) == n - p
        assert len(complex_list(data["closed_loop_poles"])) == 2 * n - p
        full = data["full_order_observer"]
        assert "not the observer that is shipped" in full["note"]
        assert np.array(full["L"]).shape == (n, p)
        assert len(complex_list(full["observer_poles"])) == n
    else:
        assert data["observer_kind"] == "full-order"
        assert "full_order_observer" not in data
        assert np.array(data["L"]).shape == (n, p)
        assert len(complex_list(data["observer_poles"])) == n
        assert len(complex_list(data["closed_loop_poles"])) == 2 * n
    assert FORMULA_KEYS <= data["formulas"].keys()
    assert all(isinstance(c, str) for c in data["conditions"])
    assert data["checks"]
    for check in data["checks"]:
        assert {"name", "value", "tolerance", "passed"} <= check.keys()
        assert isinstance(check["name"], str)
        assert check["passed"] in (True, False, None)
        assert check["value"] is None or isinstance(check["value"], float | int)
        assert check["tolerance"] is None or isinstance(check["tolerance"], float | int)


@pytest.mark.parametrize("name", WORKED_IDS)
def test_json_parameters_are_the_file_values(worked_json, name):
    raw = tomllib.loads((ROOT / "worked_designs" / f"{name}.toml").read_text("utf-8"))
    want = {k: float(v["value"]) for k, v in raw.get("parameters", {}).items()}
    assert worked_json[name]["parameters"] == want


@pytest.mark.parametrize("name", WORKED_IDS)
def test_json_gains_place_the_poles(worked_json, name):
    # Ogata 5th ed. Sec. 10-2 and 10-5: closed-loop poles = eig(A - BK), observer
    # poles = eig(A - LC); Sec. 10-6: the loop with observer has both sets.
    data = worked_json[name]
    A, B, C, _D = numeric_plant(ROOT / "worked_designs" / f"{name}.toml")
    K, L = np.array(data["K"]), np.array(data["L"])
    controller = complex_list(data["controller_poles"])
    observer = complex_list(data["observer_poles"])
    assert_same_poles(np.linalg.eigvals(A - B @ K), controller)
    if data["observer_kind"] == "reduced-order":
        # Luenberger 1971: in x̄ = T x, the reduced observer's error obeys
        # e' = (A_bb - Ke A_ab) e; the shipped poles are those, the full-order L its own
        T = np.array(data["reduced_observer"]["T"])
        p = C.shape[0]
        Ab = T @ A @ np.linalg.inv(T)
        assert_same_poles(np.linalg.eigvals(Ab[p:, p:] - L @ Ab[:p, p:]), observer)
        full = data["full_order_observer"]
        Lf = np.array(full["L"])
        assert_same_poles(np.linalg.eigvals(A - Lf @ C), complex_list(full["observer_poles"]))
    else:
        assert_same_poles(np.linalg.eigvals(A - L @ C), observer)
    assert_same_poles(
        complex_list(data["closed_loop_poles"]), np.concatenate([controller, observer])
    )
    assert np.all(controller.real < 0) and np.all(observer.real < 0)


@pytest.mark.parametrize("name", WORKED_IDS)
def test_json_reference_gain_gives_unit_dc_gain(worked_json, name):
    # Franklin, Powell, Emami-Naeini 7th ed. Sec. 7.6: C (-(A - BK))^-1 B N = 1.
    data = worked_json[name]
    A, B, C, _D = numeric_plant(ROOT / "worked_designs" / f"{name}.toml")
    K, N = np.array(data["K"]), np.array(data["reference_gain"])
    dc = C @ np.linalg.solve(-(A - B @ K), B @ N)
    assert dc.item() == pytest.approx(1.0, rel=1e-9)


@pytest.mark.parametrize("name", WORKED_IDS)
def test_json_formulas_evaluate_to_the_numbers(worked_json, name):
    data = worked_json[name]
    ns = formula_namespace(data["parameters"])
    at = values_of(data["parameters"], ns)
    formulas = data["formulas"]
    for key in ("K", "L"):
        if formulas[key] is None:  # no closed form within the budget
            continue
        closed = sp.Matrix([[read_formula(t, ns) for t in row] for row in formulas[key]])
        assert closed.free_symbols <= set(at), key  # a formula in the parameters only
        value = np.array(closed.xreplace(at).evalf(30), dtype=float)
        np.testing.assert_allclose(value, data[key], rtol=1e-12, err_msg=key)
    N = read_formula(formulas["reference_gain"], ns)
    assert float(N.xreplace(at)) == pytest.approx(data["reference_gain"][0][0], rel=1e-12)
    pairs = [(formulas["controller_charpoly"], data["controller_poles"])]
    if data["observer_kind"] == "reduced-order":
        assert formulas["observer_charpoly"] is None
        full = data["full_order_observer"]
        pairs.append((full["charpoly"], full["observer_poles"]))
    else:
        pairs.append((formulas["observer_charpoly"], data["observer_poles"]))
    for text, poles in pairs:
        poly = sp.Poly(read_formula(text, ns), ns["s"])
        assert poly.LC() == 1 and poly.degree() == len(poles)
        roots = np.roots([float(c) for c in poly.all_coeffs()])
        assert_same_poles(roots, complex_list(poles), rtol=1e-6)


@pytest.mark.parametrize("name", WORKED_IDS)
def test_json_checks_all_pass(worked_json, name):
    checks = worked_json[name]["checks"]
    assert all(c["passed"] is not False for c in checks), [c for c in checks if not c["passed"]]
    for c in checks:
        if c["value"] is not None and c["tolerance"] is not None:
            assert c["value"] <= c["tolerance"]


def test_json_conditions_name_the_parameter(worked_json):
    # focus actuator: det [B, AB] = -kf^2/m^2 vanishes only at kf = 0
    assert "uncontrollable if kf = 0" in worked_json["focus_actuator"]["conditions"]


# --------------------------------------------------------------------------
# --set
# --------------------------------------------------------------------------
def test_set_changes_parameters_and_gains_consistently(worked_json):
    path = ROOT / "worked_designs" / "focus_actuator.toml"
    code, out, err = run_main("derive", "--json", path, "--set", "m=0.015", "--set", "kf=2.2")
    assert code == 0, err
    data = json.loads(out)
    nominal = worked_json["focus_actuator"]
    assert data["parameters"] == {**nominal["parameters"], "m": 0.015, "kf": 2.2}
    # same specifications, so the same poles; a heavier carriage needs other gains
    assert data["controller_poles"] == nominal["controller_poles"]
    assert not np.allclose(data["K"], nominal["K"], rtol=1e-3)
    # the new K places the poles of the plant at the new values ...
    A, B, C, _D = numeric_plant(path, {"m": "0.015", "kf": "2.2"})
    assert_same_poles(
        np.linalg.eigvals(A - B @ np.array(data["K"])), complex_list(data["controller_poles"])
    )
    assert_same_poles(
        np.linalg.eigvals(A - np.array(data["L"]) @ C), complex_list(data["observer_poles"])
    )
    # ... and is the same formula evaluated at them
    ns = formula_namespace(data["parameters"])
    closed = sp.Matrix([[read_formula(t, ns) for t in row] for row in data["formulas"]["K"]])
    value = np.array(closed.xreplace(values_of(data["parameters"], ns)).evalf(30), dtype=float)
    np.testing.assert_allclose(value, data["K"], rtol=1e-12)
    assert data["formulas"]["K"] == nominal["formulas"]["K"]


# --------------------------------------------------------------------------
# The terminal summary
# --------------------------------------------------------------------------
@pytest.mark.parametrize("name", WORKED_IDS)
def test_summary_shows_K_and_all_checks_passed(worked_json, name):
    code, out, err = run_main("derive", ROOT / "worked_designs" / f"{name}.toml")
    assert code == 0 and err == ""
    for row in worked_json[name]["K"]:
        for x in row:
            assert f"{x:.6g}" in out, (x, out)
    for row in worked_json[name]["L"]:
        for x in row:
            assert f"{x:.6g}" in out, (x, out)
    assert out.rstrip().endswith("all checks passed")
    with pytest.raises(json.JSONDecodeError):
        json.loads(out)


# --------------------------------------------------------------------------
# Exit codes and one-line errors
# --------------------------------------------------------------------------
BAD_FILES = [
    pytest.param(
        HEAT_SINK.replace("overshoot_percent", "overshot_percent"),
        "controller.overshot_percent",
        "unknown key; did you mean 'overshoot_percent'?",
        id="unknown-key",
    ),
    pytest.param(
        HEAT_SINK.replace('"1/tau"', '"1/taus"'),
        "plant.A[1][0]",
        "undeclared name 'taus'; did you mean tau?",
        id="undeclared-parameter",
    ),
    pytest.param(
        HEAT_SINK.replace("value = 2.0", "value = nan"),
        "parameters.tau.value",
        "expected a finite number, got nan",
        id="nan",
    ),
    pytest.param(
        HEAT_SINK.replace('unit = "K/W"', 'unit = "K/W"\nrange = [1, 3]'),
        "parameters.Rth.value",
        "nominal 0.8 lies outside its range [1, 3]",
        id="nominal-outside-range",
    ),
    pytest.param(
        HEAT_SINK.replace("settling_time = 60", "settling_time = -60"),
        "controller.settling_time",
        "expected a positive time in seconds",
        id="negative-settling-time",
    ),
    pytest.param(
        HEAT_SINK.replace("C = [[0, 1]]", "C = [[0, 1, 0]]"),
        "plant.C",
        "has 3 columns",
        id="C-columns",
    ),
    pytest.param(
        HEAT_SINK.replace("speed_factor = 4", 'poles = ["-1+1j", "-3"]'),
        "observer.poles",
        "has no matching conjugate",
        id="no-conjugate",
    ),
    pytest.param(
        HEAT_SINK.replace("value = 0.8", "value = 0.8\n[parameters.h]\nvalue = 0").replace(
            '"1/tau"', '"1/(tau*h)"'
        ),
        "plant.A[1][0]",
        "is not a finite real number at the evaluated parameter values",
        id="division-by-zero-at-values",
    ),
    pytest.param(
        HEAT_SINK.replace('B = [["1/Cth"], [0]]', 'B = [["h/Cth"], [0]]').replace(
            "value = 0.8", "value = 0.8\n[parameters.h]\nvalue = 0"
        ),
        "plant",
        "the plant is uncontrollable at the evaluated parameter values",
        id="uncontrollable-at-values",
    ),
]


def assert_one_line_error(err: str, path: Path, key: str | None, problem: str) -> None:
    lines = err.splitlines()
    assert len(lines) == 1, err
    prefix = f"gainsmith: error: {path}: " + (f"{key}: " if key else "")
    assert lines[0].startswith(prefix), lines[0]
    assert problem in lines[0]
    assert "Traceback" not in err


def test_heat_sink_demo_is_valid(write_design):
    code, out, err = run_main("derive", write_design(HEAT_SINK))
    assert code == 0, err
    assert "all checks passed" in out


@pytest.mark.parametrize("text, key, problem", BAD_FILES)
def test_bad_file_exits_2_with_one_line(write_design, text, key, problem):
    path = write_design(text)
    code, out, err = run_main("derive", "--json", path)
    assert code == 2
    assert out == ""
    assert_one_line_error(err, path, key, problem)


@pytest.mark.parametrize(
    "set_args, key, problem",
    [
        pytest.param(["tauu=3"], "--set tauu", "not a declared parameter; did you mean 'tau'?"),
        pytest.param(["tau=slow"], "parameters.tau", "--set tau=slow: number 'slow'"),
        pytest.param(["tau=inf"], "parameters.tau", "--set tau=inf: "),
        pytest.param(["tau"], "--set tau", "expected NAME=VALUE"),
        pytest.param(["=3"], "--set =3", "expected NAME=VALUE"),
        pytest.param(
            ["Rth=1.5"],
            "--set Rth",
            "value 1.5 lies outside its range [0.6, 1.0] declared at parameters.Rth.range",
        ),
    ],
    ids=["undeclared", "not-a-number", "inf", "no-equals", "no-name", "outside-range"],
)
def test_bad_set_exits_2_with_one_line(write_design, set_args, key, problem):
    path = write_design(HEAT_SINK.replace('unit = "K/W"', 'unit = "K/W"\nrange = [0.6, 1.0]'))
    argv = ["derive", path]
    for item in set_args:
        argv += ["--set", item]
    code, out, err = run_main(*argv)
    assert code == 2 and out == ""
    assert_one_line_error(err, path, key, problem)


#: The heat sink with its controller poles written as a user writes complex numbers.
HEAT_SINK_POLES = HEAT_SINK.replace(
    "overshoot_percent = 5\nsettling_time = 60", 'poles = ["-2+3j", "-2-3j"]'
)


def test_derive_prints_poles_as_the_design_file_writes_them(write_design):
    assert HEAT_SINK_POLES != HEAT_SINK
    code, out, err = run_main("derive", write_design(HEAT_SINK_POLES))
    assert code == 0, err
    assert "  controller: -2+3j, -2-3j\n" in out
    assert "  observer:   -8+12j, -8-12j\n" in out  # 4 x the controller poles (speed_factor)
    assert "3*I" not in out and " + 3j" not in out and "±" not in out


def test_derive_json_keeps_poles_as_pairs(write_design):
    code, out, err = run_main("derive", "--json", write_design(HEAT_SINK_POLES))
    assert code == 0, err
    data = json.loads(out)
    assert data["controller_poles"] == [[-2.0, 3.0], [-2.0, -3.0]]


def test_seventeen_significant_digits_are_accepted(write_design):
    # repr(0.1 + 0.2) and other 17-digit doubles (ISO/IEC 9899:2018, DBL_DECIMAL_DIG = 17)
    text = HEAT_SINK.replace("value = 45.0", 'value = "45.000000000000007"')
    code, out, err = run_main(
        "derive", "--json", write_design(text), "--set", "tau=2.0000000000000004"
    )
    assert code == 0, err
    values = json.loads(out)["parameters"]
    assert values["Cth"] == float("45.000000000000007") != 45.0
    assert values["tau"] == float("2.0000000000000004") != 2.0


@pytest.mark.parametrize(
    ("value", "set_args", "key"),
    [
        ('"45.0000000000000001"', [], "parameters.Cth.value"),
        ("45.0", ["--set", "Cth=45.0000000000000001"], "parameters.Cth"),
    ],
    ids=["in-the-file", "with-set"],
)
def test_eighteen_significant_digits_exit_2_with_one_line(write_design, value, set_args, key):
    path = write_design(HEAT_SINK.replace("value = 45.0", f"value = {value}"))
    code, out, err = run_main("derive", path, *set_args)
    assert code == 2 and out == ""
    assert_one_line_error(err, path, key, "has 18 significant digits; at most 17")


def test_missing_file_exits_2(tmp_path):
    path = tmp_path / "nowhere.toml"
    code, out, err = run_main("derive", path)
    assert code == 2 and out == ""
    assert_one_line_error(err, path, None, "cannot read the file")


def test_nearly_repeated_poles_pass_after_the_50_digit_confirmation(write_design):
    path = write_design(NEARLY_REPEATED)
    code, out, err = run_main("derive", "--json", path)
    assert code == 0 and err == ""
    data = json.loads(out)
    check = next(c for c in data["checks"] if c["name"].startswith("eigenvalues of A − BK"))
    assert check["passed"] is True and check["value"] <= check["tolerance"]
    assert "confirmed in 50-digit arithmetic" in check["note"]
    # the double-precision residual that the confirmation overruled is above the 1e-6 floor
    double = float(check["note"].split("double-precision residual ")[1].split()[0])
    assert double > 1e-6


def test_failed_check_exits_1(monkeypatch, write_design):
    # A confirmation that allows no error at all (tolerance 0) rejects the nearly repeated
    # poles that LAPACK misses by ~1e-5: the eigenvalue check fails and exit is 1.
    real = _numeric.confirm_eigenvalues

    def strict(matrix, requested, **kw):
        return real(matrix, requested, **kw)[0], 0.0

    monkeypatch.setattr(_numeric, "confirm_eigenvalues", strict)
    path = write_design(NEARLY_REPEATED)
    code, out, err = run_main("derive", "--json", path)
    assert code == 1 and err == ""
    data = json.loads(out)
    failed = [c for c in data["checks"] if c["passed"] is False]
    assert any(c["name"].startswith("eigenvalues of A − BK") for c in failed), failed
    for c in failed:
        assert c["value"] > c["tolerance"]  # reported honestly, with the numbers
    code, out, _err = run_main("derive", path)
    assert code == 1
    assert out.rstrip().endswith("SOME CHECKS FAILED")
    assert "FAIL" in out


def test_zero_gain_tolerance_fails_the_scipy_comparison(monkeypatch, worked_json):
    # With no rounding allowed, the closed-form K of the belt drive and SciPy's
    # iterative place_poles differ in the last bits: that check fails and exit is 1.
    # (The same tolerance also governs the reference-gain checks; the SciPy comparison's
    # tolerance, widened on hard plants by gain_tolerance, is pinned to zero too.)
    monkeypatch.setattr(_gains, "GAIN_TOLERANCE", 0.0)
    monkeypatch.setattr(_gains, "gain_tolerance", lambda reference, other: 0.0)
    code, out, err = run_main("derive", "--json", ROOT / "worked_designs" / "belt_drive.toml")
    data = json.loads(out)
    failed = [c for c in data["checks"] if c["passed"] is False]
    assert any(c["name"].startswith("K: ") and "place_poles" in c["name"] for c in failed)
    assert all(c["value"] > 0 and c["tolerance"] == 0 for c in failed)
    assert data["K"] == worked_json["belt_drive"]["K"]  # the numbers did not change
    assert code == 1 and data["passed"] is False


def test_internal_error_exits_3_with_one_line(monkeypatch, write_design):
    def broken(design, **kw):
        raise RuntimeError("simulated defect")

    monkeypatch.setattr(symbolic, "derive", broken)
    monkeypatch.delenv("GAINSMITH_DEBUG", raising=False)
    code, out, err = run_main("derive", write_design(HEAT_SINK))
    assert code == 3 and out == ""
    lines = err.splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert lines[0].startswith("gainsmith: internal error (RuntimeError: simulated defect)")


def test_no_command_is_a_usage_error(capsys):
    with pytest.raises(SystemExit) as info:
        main([])
    assert info.value.code == 2
    assert "usage: gainsmith" in capsys.readouterr().err


def test_version(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0
    assert capsys.readouterr().out.strip() == f"gainsmith {symbolic.__version__}"


# --------------------------------------------------------------------------
# As a shell sees it: python -m symbolic
# --------------------------------------------------------------------------
def test_process_derive_json_exit_0():
    path = WORKED_FILES[0]
    proc = run_process("derive", "--json", path)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    data = json.loads(proc.stdout)
    assert PUBLIC_KEYS <= data.keys() and data["passed"] is True


def test_process_eighteen_digits_exit_2_one_line_no_traceback(tmp_path):
    path = tmp_path / "long.toml"
    path.write_text(
        HEAT_SINK.replace("value = 0.8", 'value = "0.800000000000000044"'), encoding="utf-8"
    )
    proc = run_process("derive", path)
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert_one_line_error(
        proc.stderr, path, "parameters.Rth.value", "has 18 significant digits; at most 17"
    )


def test_process_bad_file_exit_2_one_line_no_traceback(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(
        HEAT_SINK.replace("overshoot_percent = 5", "overshoot_percent = 150"), encoding="utf-8"
    )
    proc = run_process("derive", path)
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert_one_line_error(
        proc.stderr, path, "controller.overshoot_percent", "expected a percentage with 0 < OS < 100"
    )
