"""``gainsmith export``: the generated C99 and Python code against SciPy and each other.

The external reference is ``scipy.signal.place_poles`` (A. L. Tits and Y. Yang,
"Globally convergent algorithms for robust pole assignment by state feedback",
IEEE Trans. Automatic Control 41(10):1432-1452, 1996, as implemented in SciPy),
with the observer gain from the dual problem; the defining properties are the
eigenvalues of A - BK and A - LC and the unit steady-state gain of N.  The C
code is compiled with ``gcc -std=c99 -Wall -Wextra -Werror -pedantic``.
"""

from __future__ import annotations

import importlib.util
import re
import shutil
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
import sympy as sp
from scipy.signal import place_poles

from symbolic import derive
from symbolic.cli import main
from symbolic.derivation.numeric import eigenvalue_tolerance, evaluate_matrix, pole_residual
from symbolic.input.reader import load_design, parse_design
from symbolic.render.c_code import c_sources
from symbolic.render.code_comments import comment_text
from symbolic.render.code_printers import c_identifier_prefix, c_member_names, python_local_names
from symbolic.render.export import check_export_options, export_code, write_export
from symbolic.render.gain_evaluator import gain_evaluator
from symbolic.render.gain_formulas import (
    CODE_NOT_FINITE,
    CODE_OK,
    CODE_UNCONTROLLABLE,
    CODE_UNOBSERVABLE,
    ZERO_TOLERANCE,
    gain_formulas,
)
from symbolic.render.python_code import python_source
from symbolic.runtime.errors import DesignFileError, RenderError

from .conftest import WORKED, WORKED_FILES

POINTS = 1000  # random parameter points per worked design
#: Every point is compared with place_poles (0.35 ms per call on an idle machine, ten times
#: that on a busy one): 1000 points per worked design, as the export's acceptance asks.
SCIPY_STRIDE = 1
SCIPY_TOLERANCE = 1e-9  # relative, closed form vs place_poles
PYTHON_TOLERANCE = 1e-12  # relative, C vs the exported Python module
SENTINEL = 12345.25  # written into the output struct before each call

GCC = shutil.which("gcc")
needs_gcc = pytest.mark.skipif(GCC is None, reason="gcc is not installed (CI has it)")


# --------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------
def _relative(a, b) -> float:
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    return float(np.linalg.norm(a - b) / max(np.linalg.norm(b), 1e-300))


def _import(path: Path):
    name = f"exported_{path.stem}_{abs(hash(str(path)))}"
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _driver_source(formulas) -> str:
    """A test driver: one line of parameter values in, one line of results out."""
    design = formulas.design
    prefix = c_identifier_prefix(design)
    up = prefix.upper()
    members = c_member_names([p.name for p in design.parameters], prefix)
    assign = "\n".join(
        f"        p.{members[prm.name]} = v[{k}];" for k, prm in enumerate(design.parameters)
    )
    return f"""
#include <stdio.h>
#include <stdlib.h>
#include "{design.slug}_gains.h"

static void fill({prefix}_gains_out *o, double x)
{{
    int i, j;
    for (i = 0; i < {up}_INPUTS; ++i) for (j = 0; j < {up}_STATES; ++j) o->K[i][j] = x;
    for (i = 0; i < {up}_STATES; ++i) for (j = 0; j < {up}_OUTPUTS; ++j) o->L[i][j] = x;
    o->reference_gain = x;
}}

int main(void)
{{
    {prefix}_parameters p;
    {prefix}_gains_out out;
    double v[{up}_PARAMETERS + 1];
    char line[8192];
    while (fgets(line, sizeof line, stdin) != NULL) {{
        char *s = line;
        char *end;
        int k, i, j, rc;
        for (k = 0; k < {up}_PARAMETERS; ++k) {{
            v[k] = strtod(s, &end);
            s = end;
        }}
{assign}
        (void)v; /* a design without parameters reads none */
        fill(&out, {SENTINEL!r});
        rc = {prefix}_gains(&p, &out);
        printf("%d", rc);
        for (i = 0; i < {up}_INPUTS; ++i) for (j = 0; j < {up}_STATES; ++j)
            printf(" %.17g", out.K[i][j]);
        for (i = 0; i < {up}_STATES; ++i) for (j = 0; j < {up}_OUTPUTS; ++j)
            printf(" %.17g", out.L[i][j]);
        printf(" %.17g\\n", out.reference_gain);
    }}
    return 0;
}}
"""


def _build(formulas, folder: Path) -> Path:
    """Write the C files and the driver, compile with warnings as errors."""
    for name, content in c_sources(formulas).items():
        (folder / name).write_bytes(content)
    (folder / "driver.c").write_text(_driver_source(formulas), encoding="ascii")
    exe = folder / "driver"
    cmd = [
        GCC,
        "-std=c99",
        "-Wall",
        "-Wextra",
        "-Werror",
        "-pedantic",
        "-O2",
        "-o",
        str(exe),
        str(folder / "driver.c"),
        str(folder / f"{formulas.design.slug}_gains.c"),
        "-lm",
    ]
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=folder, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return exe


def _run_driver(exe: Path, points: np.ndarray, shape) -> tuple[np.ndarray, ...]:
    """Run the driver once over every row of ``points``: codes, K, L, N."""
    text = "\n".join(" ".join(repr(float(x)) for x in row) for row in points) + "\n"
    if points.shape[1] == 0:
        text = "\n" * points.shape[0]
    proc = subprocess.run([str(exe)], input=text, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    rows = [line.split() for line in proc.stdout.splitlines()]
    assert len(rows) == points.shape[0]
    n, m, p = shape
    codes = np.array([int(r[0]) for r in rows])
    values = np.array([[float(x) for x in r[1:]] for r in rows])
    K = values[:, : m * n].reshape(-1, m, n)
    L = values[:, m * n : m * n + n * p].reshape(-1, n, p)
    N = values[:, -1]
    return codes, K, L, N


def _plant_stack(design, points: np.ndarray) -> list[np.ndarray]:
    """A, B, C, D at every row of ``points``: arrays (P, rows, cols), by test-side lambdify."""
    symbols = [p.symbol for p in design.parameters]
    columns = [points[:, k] for k in range(points.shape[1])]
    out = []
    for name in ("A", "B", "C", "D"):
        M = sp.Matrix(getattr(design.plant, name))
        stack = np.empty((points.shape[0],) + M.shape)
        for i in range(M.shape[0]):
            for j in range(M.shape[1]):
                stack[:, i, j] = sp.lambdify(symbols, M[i, j], "numpy")(*columns)
        out.append(stack)
    return out


def _random_points(design, count: int, seed: int) -> np.ndarray:
    """Uniform in each parameter's range, or within +-20 % of its value without one."""
    rng = np.random.default_rng(seed)
    cols = []
    for prm in design.parameters:
        if prm.range is not None:
            lo, hi = float(prm.range[0]), float(prm.range[1])
        else:
            v = float(prm.value)
            lo, hi = sorted((0.8 * v, 1.2 * v))
        cols.append(rng.uniform(lo, hi, count))
    return np.column_stack(cols) if cols else np.zeros((count, 0))


@pytest.fixture(scope="module")
def worked(request):
    """Derivation and formulas of every worked design (derived once)."""
    cache = {}
    for path in WORKED_FILES:
        d = derive(load_design(path))
        cache[path.stem] = (d, gain_formulas(d))
    return cache


@pytest.fixture(scope="module")
def built(worked, tmp_path_factory):
    """The compiled driver and the exported Python module of every worked design."""
    if GCC is None:
        pytest.skip("gcc is not installed (CI has it)")
    out = {}
    for name, (_d, formulas) in worked.items():
        folder = tmp_path_factory.mktemp(f"c_{name}")
        exe = _build(formulas, folder)
        for fname, content in python_source(formulas).items():
            (folder / fname).write_bytes(content)
        module = _import(folder / f"{formulas.design.slug}_gains.py")
        out[name] = (exe, module, folder)
    return out


# --------------------------------------------------------------------------
# C against SciPy, the Python module and the defining properties
# --------------------------------------------------------------------------
def _scipy_worst(A, B, C, K, L, formulas, stride: int) -> dict[str, float]:
    """Largest relative difference from scipy.signal.place_poles over every stride-th point."""
    ctrl = np.asarray(formulas.controller_poles)
    obs = np.asarray(formulas.observer_poles)
    worst = {"K": 0.0, "L": 0.0}
    for k in range(0, K.shape[0], stride):
        # scipy.signal.place_poles (Tits & Yang 1996, SciPy's implementation); the
        # observer gain from the dual problem (A', C')
        K_ref = place_poles(A[k], B[k], ctrl).gain_matrix
        L_ref = place_poles(A[k].T, C[k].T, obs).gain_matrix.T
        worst["K"] = max(worst["K"], _relative(K[k], K_ref))
        worst["L"] = max(worst["L"], _relative(L[k], L_ref))
    return worst


@needs_gcc
@pytest.mark.slow
@pytest.mark.parametrize("name", [p.stem for p in WORKED_FILES])
def test_c_gains_match_scipy_at_every_random_point(worked, built, name):
    d, formulas = worked[name]
    exe, _module, _folder = built[name]
    points = _random_points(d.design, POINTS, seed=20240611)
    codes, K, L, _N = _run_driver(exe, points, formulas.shape)
    assert np.all(codes == CODE_OK)
    A, B, C, _D = _plant_stack(d.design, points)
    worst = _scipy_worst(A, B, C, K, L, formulas, stride=1)
    assert max(worst.values()) <= SCIPY_TOLERANCE, worst


@needs_gcc
@pytest.mark.parametrize("name", [p.stem for p in WORKED_FILES])
def test_c_gains_match_scipy_and_python_at_random_points(worked, built, name):
    d, formulas = worked[name]
    exe, module, _folder = built[name]
    design = d.design
    points = _random_points(design, POINTS, seed=20240611)
    codes, K, L, N = _run_driver(exe, points, formulas.shape)
    assert np.all(codes == CODE_OK), np.unique(codes)

    # the exported Python module, vectorised over all points at once
    py = module.gains(**{prm.name: points[:, k] for k, prm in enumerate(design.parameters)})
    assert _relative(py["K"], K) <= PYTHON_TOLERANCE
    assert _relative(py["L"], L) <= PYTHON_TOLERANCE
    assert _relative(py["reference_gain"], N) <= PYTHON_TOLERANCE
    for k in range(POINTS):  # point by point too, not only in the norm over all points
        assert _relative(py["K"][k], K[k]) <= PYTHON_TOLERANCE
        assert _relative(py["L"][k], L[k]) <= PYTHON_TOLERANCE

    A, B, C, D = _plant_stack(design, points)
    worst = _scipy_worst(A, B, C, K, L, formulas, stride=SCIPY_STRIDE)
    assert max(worst.values()) <= SCIPY_TOLERANCE, worst

    # defining properties at all points: eig(A - BK) and eig(A - LC) are the requested poles
    ctrl = np.asarray(formulas.controller_poles)
    obs = np.asarray(formulas.observer_poles)
    Acl = A - B @ K
    eig_c = np.linalg.eigvals(Acl)
    eig_o = np.linalg.eigvals(A - L @ C)
    tol_c, tol_o = eigenvalue_tolerance(ctrl), eigenvalue_tolerance(obs)
    assert max(pole_residual(e, ctrl) for e in eig_c) <= tol_c
    assert max(pole_residual(e, obs) for e in eig_o) <= tol_o

    # N = 1 / (C (-(A - BK))^-1 B) (with D: (C - DK)(-(A - BK))^-1 B + D): unit DC gain
    track = design.tracking.output
    Ct, Dt = C[:, track : track + 1], D[:, track : track + 1]
    dc = ((Ct - Dt @ K) @ np.linalg.solve(-Acl, B) + Dt)[:, 0, 0]
    assert np.max(np.abs(N * dc - 1.0)) <= SCIPY_TOLERANCE


@needs_gcc
@pytest.mark.parametrize("name", [p.stem for p in WORKED_FILES])
def test_c_gains_at_the_nominal_values_are_derives(worked, built, name):
    d, formulas = worked[name]
    exe, _module, _folder = built[name]
    row = np.array([[float(p.value) for p in d.design.parameters]])
    codes, K, L, N = _run_driver(exe, row, formulas.shape)
    assert codes[0] == CODE_OK
    assert _relative(K[0], d.K.value) <= 1e-12
    assert _relative(L[0], d.L.value) <= 1e-12
    assert _relative(N, d.reference.value.ravel()) <= 1e-12
    # the plant matrices built in this test agree with the engine's exact evaluation
    A, B, C, D = _plant_stack(d.design, row)
    assert _relative(A[0], evaluate_matrix(d.design.plant.A, d.design.values)) <= 1e-15


@needs_gcc
def test_return_codes_focus_actuator(worked, built):
    d, formulas = worked["focus_actuator"]
    exe, module, _folder = built["focus_actuator"]
    names = [p.name for p in d.design.parameters]
    nominal = {p.name: float(p.value) for p in d.design.parameters}

    def row(**changes):
        return [{**nominal, **changes}[nm] for nm in names]

    rows = np.array(
        [
            row(kf=0.0),  # uncontrollable: det of the controllability matrix = -kf**2/m**2
            row(kf=-0.0),
            row(m=0.0),  # the plant is undefined: a denominator vanishes
            row(kf=0.0, m=0.0),  # both: the smaller code wins
            row(c=float("nan")),  # NaN input: not finite
            row(k=float("inf")),
            row(kf=1e-320),  # a subnormal force constant: gains overflow
            row(kf=-2.4),  # negative but nonzero: valid (the sign flips K)
        ]
    )
    codes, K, L, N = _run_driver(exe, rows, formulas.shape)
    assert list(codes) == [
        CODE_UNCONTROLLABLE,
        CODE_UNCONTROLLABLE,
        CODE_NOT_FINITE,
        CODE_UNCONTROLLABLE,
        CODE_NOT_FINITE,
        CODE_NOT_FINITE,
        CODE_NOT_FINITE,
        CODE_OK,
    ]
    # on a nonzero return the struct is left as it was (no NaN is relied on)
    bad = codes != CODE_OK
    assert np.all(K[bad] == SENTINEL) and np.all(L[bad] == SENTINEL) and np.all(N[bad] == SENTINEL)
    assert np.all(np.isfinite(K[~bad]))
    # the vectorised evaluator and the Python module give the same codes
    values = {nm: rows[:, k] for k, nm in enumerate(names)}
    assert list(gain_evaluator(formulas)(values).code) == list(codes)
    with pytest.warns(RuntimeWarning, match="7 of 8 point"):
        py = module.gains(**values)
    assert np.all(np.isnan(py["K"][bad])) and np.all(np.isnan(py["reference_gain"][bad]))
    assert _relative(py["K"][~bad], K[~bad]) <= PYTHON_TOLERANCE


def test_zero_test_is_relative_to_the_terms():
    # k - c*m cancels to rounding at k = c*m; the factor must then count as zero
    text = """
    [parameters.k]
    value = 2.0
    [parameters.c]
    value = 0.5
    [parameters.m]
    value = 3.0
    [plant]
    A = [[0, 1], [0, "k - c*m"]]
    B = [[0], ["k - c*m"]]
    C = [[1, 0]]
    [controller]
    poles = ["-2", "-3"]
    [observer]
    poles = ["-8", "-9"]
    """
    d = derive(parse_design(text.encode(), "cancel.toml"), budget=0)
    formulas = gain_formulas(d)
    k, c, m = (sp.Symbol(name, real=True) for name in "kcm")
    (factor,) = [f for f in formulas.factors if f.code == CODE_UNCONTROLLABLE]
    assert sp.expand(factor.factor**2 - (k - c * m) ** 2) == 0
    evaluate = gain_evaluator(formulas)
    # 0.3 - 0.1*3.0 = -5.6e-17 in floating point, not 0: zero up to rounding
    assert 0.3 - 0.1 * 3.0 != 0
    got = evaluate({"k": np.array([0.3, 0.3 * (1 + 1e-9)]), "c": 0.1, "m": 3.0})
    assert list(got.code) == [CODE_UNCONTROLLABLE, CODE_OK]
    assert ZERO_TOLERANCE == 1e-12


# --------------------------------------------------------------------------
# Generated text
# --------------------------------------------------------------------------
@pytest.mark.parametrize("name", [p.stem for p in WORKED_FILES])
def test_files_carry_sha256_poles_conventions_and_caution(worked, name):
    d, formulas = worked[name]
    files = {**c_sources(formulas), **python_source(formulas)}
    assert set(files) == {f"{name}_gains.h", f"{name}_gains.c", f"{name}_gains.py"}
    from symbolic.runtime.version import __version__

    for fname, content in files.items():
        text = content.decode("ascii")
        head = text[:6000]
        assert d.design.sha256 in head, fname
        assert f"gainsmith {__version__}" in head, fname
        assert f"{name}.toml" in head, fname
        assert "u = -K x_hat + N r" in head, fname
        assert "CAUTION" in head and "verify" in head.lower(), fname
        for z in list(d.controller_poles.values) + list(d.observer_poles.values):
            re_ = repr(float(z.real)).removesuffix(".0")
            assert re_ in head, (fname, z)
            if z.imag:
                assert repr(abs(float(z.imag))).removesuffix(".0") + "j" in head, (fname, z)
        for f in formulas.factors:
            assert f.condition in head, (fname, f.condition)
    h = files[f"{name}_gains.h"].decode()
    up = c_identifier_prefix(d.design).upper()
    n = d.design.plant.order
    assert f"#define {up}_STATES {n}" in h
    assert f"#define {up}_INPUTS 1" in h and f"#define {up}_OUTPUTS 1" in h
    assert f"double K[{up}_INPUTS][{up}_STATES];" in h
    assert f"double L[{up}_STATES][{up}_OUTPUTS];" in h
    assert "double reference_gain;" in h
    assert f"int {name}_gains(const {name}_parameters *p, {name}_gains_out *out);" in h
    c = files[f"{name}_gains.c"].decode()
    assert "malloc" not in c and "static" not in c  # no allocation, no globals
    assert "const double t0 =" in c  # shared subexpressions


def test_python_module_imports_only_numpy(worked):
    _d, formulas = worked["belt_drive"]
    (text,) = python_source(formulas).values()
    imports = [
        line.strip() for line in text.decode().splitlines() if line.startswith(("import ", "from "))
    ]
    assert imports == ["import warnings", "import numpy"]
    assert b"pickle" not in text


# --------------------------------------------------------------------------
# The Python module
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def belt_module(worked, tmp_path_factory):
    _d, formulas = worked["belt_drive"]
    folder = tmp_path_factory.mktemp("py_belt")
    for fname, content in python_source(formulas).items():
        (folder / fname).write_bytes(content)
    return _import(folder / "belt_drive_gains.py")


@pytest.mark.parametrize("shape", [(5,), (2, 3)])
def test_python_module_broadcasts(belt_module, shape):
    rng = np.random.default_rng(7)
    args = dict(belt_module.NOMINAL)
    args["J2"] = rng.uniform(4e-4, 9e-4, shape)
    args["ks"] = rng.uniform(0.9, 1.5, shape[-1:])  # broadcasts against J2
    g = belt_module.gains(**args)
    assert g["K"].shape == shape + (1, 4)
    assert g["L"].shape == shape + (4, 1)
    assert g["reference_gain"].shape == shape
    flat = np.broadcast_to(args["ks"], shape)
    idx = (0,) * len(shape)
    single = belt_module.gains(**{**args, "J2": args["J2"][idx], "ks": flat[idx]})
    assert single["K"].shape == (1, 4) and np.ndim(single["reference_gain"]) == 0
    assert _relative(g["K"][idx], single["K"]) <= 1e-15


def test_python_module_nominal_values_are_derives(worked, belt_module):
    d, _f = worked["belt_drive"]
    g = belt_module.gains(**belt_module.NOMINAL)
    assert _relative(g["K"], d.K.value) <= 1e-12
    assert _relative(g["L"], d.L.value) <= 1e-12
    assert abs(g["reference_gain"] / d.reference.value.item() - 1) <= 1e-12
    assert belt_module.PARAMETERS == ("J1", "J2", "ks", "b", "kt")
    assert belt_module.DESIGN_SHA256 == d.design.sha256
    assert "ks = 0" in belt_module.VALIDITY and "kt = 0" in belt_module.VALIDITY
    assert "VALIDITY" in belt_module.gains.__doc__


@pytest.mark.parametrize(
    "change, message",
    [
        ({"drop": "kt"}, "missing parameter 'kt'"),
        ({"add": "kq"}, "unknown parameter 'kq'"),
    ],
)
def test_python_module_names_missing_and_unknown_parameters(belt_module, change, message):
    args = dict(belt_module.NOMINAL)
    if "drop" in change:
        del args[change["drop"]]
    else:
        args[change["add"]] = 1.0
    with pytest.raises(ValueError, match=message):
        belt_module.gains(**args)


def test_python_module_invalid_points_are_nan_with_a_warning(belt_module):
    args = dict(belt_module.NOMINAL)
    args["kt"] = np.array([0.05, 0.0, 0.04])
    with pytest.warns(RuntimeWarning, match="1 of 3 point.*uncontrollable"):
        g = belt_module.gains(**args)
    assert np.all(np.isnan(g["K"][1])) and np.all(np.isnan(g["L"][1]))
    assert np.isnan(g["reference_gain"][1])
    assert np.all(np.isfinite(g["K"][[0, 2]]))
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # valid points: no warning at all
        belt_module.gains(**belt_module.NOMINAL)


# --------------------------------------------------------------------------
# Names that are taken in C or Python
# --------------------------------------------------------------------------
def test_c_member_names_guard_keywords_and_macros():
    names = ["m", "int", "double", "auto", "NAN", "EOF", "EDOM", "p_int", "class", "kf"]
    got = c_member_names(names, "demo")
    assert got["m"] == "m" and got["kf"] == "kf"
    assert got["double"] == "p_double" and got["auto"] == "p_auto"
    assert got["NAN"] == "p_NAN" and got["EOF"] == "p_EOF" and got["EDOM"] == "p_EDOM"
    assert got["class"] == "p_class"  # C++ keyword: the header may be included from C++
    assert got["p_int"] == "p_int" and got["int"] == "p_p_int"  # unique
    assert len(set(got.values())) == len(names)
    # the generated header's own macros are taken too
    assert c_member_names(["DEMO_STATES"], "demo") == {"DEMO_STATES": "p_DEMO_STATES"}


def test_python_local_names_do_not_shadow():
    got = python_local_names(["m", "numpy", "float", "float_", "gains"])
    assert got["m"] == "m"
    assert got["numpy"] != "numpy" and got["float"] != "float" and got["gains"] != "gains"
    assert len(set(got.values())) == 5


# A demo of our own: a hanging gimbal whose parameter names are C keywords,
# C macros and Python builtins (invented values).
AWKWARD = """
title = "Gimbal */ with \\"\\"\\" awkward */ names\\\\"
[parameters.int]
value = 40.0
description = "stiffness */ #include <stdio.h> ??/"
[parameters.double]
value = 0.2
unit = "kg m^2 \\"\\"\\" \\\\"
[parameters.auto]
value = 0.05
[parameters.NAN]
value = 1.5
range = [1.0, 2.0]
[parameters.p_int]
value = 1.0
[parameters.numpy]
value = 2.0
[parameters.float]
value = 0.5
[plant]
A = [[0, 1], ["-int/double", "-auto/double"]]
B = [[0], ["NAN/double"]]
C = [["p_int*numpy", "float"]]
[controller]
poles = ["-4+3j", "-4-3j"]
[observer]
poles = ["-16", "-18"]
"""


@needs_gcc
def test_awkward_names_and_hostile_text_compile_and_agree(tmp_path):
    design = parse_design(AWKWARD.encode(), str(tmp_path / "gimbal.toml"))
    d = derive(design, budget=0)
    formulas = gain_formulas(d)
    exe = _build(formulas, tmp_path)
    h = (tmp_path / "gimbal_gains.h").read_text()
    assert "double p_p_int;" in h and "double p_int;" in h and "double p_NAN;" in h
    assert "double p_double;" in h and "double p_auto;" in h
    assert "*/ #include" not in h and "* / #include <stdio.h>" in h
    for fname, content in python_source(formulas).items():
        (tmp_path / fname).write_bytes(content)
    module = _import(tmp_path / "gimbal_gains.py")
    assert module.PARAMETERS == ("int", "double", "auto", "NAN", "p_int", "numpy", "float")
    rng = np.random.default_rng(3)
    points = np.column_stack(
        [rng.uniform(0.8, 1.2, 200) * float(p.value) for p in design.parameters]
    )
    codes, K, L, N = _run_driver(exe, points, formulas.shape)
    assert np.all(codes == CODE_OK)
    py = module.gains(**{p.name: points[:, k] for k, p in enumerate(design.parameters)})
    assert _relative(py["K"], K) <= PYTHON_TOLERANCE
    assert _relative(py["L"], L) <= PYTHON_TOLERANCE
    A, B, C, _D = _plant_stack(design, points)
    for k in range(0, 200, 20):
        # scipy.signal.place_poles (Tits & Yang 1996) as the reference
        K_ref = place_poles(A[k], B[k], formulas.controller_poles).gain_matrix
        assert _relative(K[k], K_ref) <= 1e-9
        L_ref = place_poles(A[k].T, C[k].T, formulas.observer_poles).gain_matrix.T
        assert _relative(L[k], L_ref) <= 1e-9
    # the output y = p_int*numpy*x1 + float*x2 vanishes at numpy = 0, float = 0: unobservable
    row = {p.name: float(p.value) for p in design.parameters}
    row.update(numpy=0.0, float=0.0)
    codes, *_ = _run_driver(exe, np.array([[row[p.name] for p in design.parameters]]), (2, 1, 1))
    assert codes[0] == CODE_UNOBSERVABLE


@pytest.mark.parametrize(
    "text, forbidden",
    [
        ("a */ b", "*/"),
        ("a /* b", "/*"),
        ("line\nbreak", "\n"),
        ('three """ quotes', '"'),
        ("back\\slash", "\\"),
        ("trigraph ??/", "??"),
        ("bell\x07 and \u2028 and é", "\x07"),
    ],
)
def test_comment_text_is_one_safe_line(text, forbidden):
    out = comment_text(text)
    assert forbidden not in out
    assert "\n" not in out and all(0x20 <= ord(ch) < 0x7F for ch in out)


# --------------------------------------------------------------------------
# Big coefficients and the command
# --------------------------------------------------------------------------
@needs_gcc
def test_large_integer_coefficients_print_as_doubles(tmp_path):
    # A chain of four integrators x' = [x2, x3, x4, u/m] measured at x1.  In this
    # controllable canonical form K_i = m * alpha_i, and in the observable
    # canonical form of the dual L = [beta_3, beta_2, beta_1, beta_0], with
    # alpha and beta the coefficients of the desired polynomials (K. Ogata,
    # Modern Control Engineering, 5th ed., Prentice Hall, 2010, Secs. 10-2 and
    # 10-5, from memory).  Observer poles near -1e4 make beta_0 about 1.2e16 >
    # 2**53: an integer no C integer literal should carry.
    text = """
    [parameters.m]
    value = 0.5
    [plant]
    A = [[0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1], [0, 0, 0, 0]]
    B = [[0], [0], [0], ["1/m"]]
    C = [[1, 0, 0, 0]]
    [controller]
    poles = ["-2", "-3", "-4", "-5"]
    [observer]
    poles = ["-10001", "-10003", "-10007", "-12011"]
    """
    design = parse_design(text.encode(), str(tmp_path / "chain.toml"))
    d = derive(design, budget=0)
    formulas = gain_formulas(d)
    beta = np.poly([-10001.0, -10003.0, -10007.0, -12011.0])  # [1, b3, b2, b1, b0]
    assert beta[-1] > 2**53 and formulas.L[3, 0].is_Integer  # printed by _print_Integer
    exe = _build(formulas, tmp_path)
    for fname, content in python_source(formulas).items():
        (tmp_path / fname).write_bytes(content)
    module = _import(tmp_path / "chain_gains.py")
    m = 0.5
    codes, K, L, N = _run_driver(exe, np.array([[m]]), formulas.shape)
    assert codes[0] == CODE_OK
    alpha = np.poly([-2.0, -3.0, -4.0, -5.0])
    assert _relative(K[0, 0], m * alpha[:0:-1]) <= 1e-15
    assert _relative(L[0, :, 0], beta[1:]) <= 1e-15
    assert abs(N[0] / (m * alpha[-1]) - 1) <= 1e-15  # N = alpha_0 / z(0), z(0) = 1/m
    py = module.gains(m=m)
    assert _relative(py["L"], L[0]) <= 1e-15
    for name in ("chain_gains.c",):
        source = c_sources(formulas)[name].decode()
        assert not re.search(r"(?<![.\w])\d{17,}(?![.\w])", source)  # no oversized literal


def test_no_closed_form_for_two_inputs(write_design, capsys):
    path = write_design(
        """
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[1, 0], [0, 1]]
        C = [[1, 0]]
        [controller]
        poles = ["-2", "-3"]
        [observer]
        poles = ["-8", "-9"]
        """
    )
    with pytest.raises(DesignFileError, match="no closed form to export: the plant has 2 inputs"):
        export_code(derive(load_design(path)), lang="c")
    assert main(["export", str(path), "--lang", "python", "-o", str(path.parent / "o")]) == 2
    err = capsys.readouterr().err
    assert "no closed form to export" in err and err.count("\n") == 1
    assert not (path.parent / "o").exists()


@pytest.mark.parametrize("lang, suffixes", [("c", [".h", ".c"]), ("python", [".py"])])
def test_command_writes_the_files(tmp_path, capsys, lang, suffixes):
    src = WORKED / "focus_actuator.toml"
    out = tmp_path / "export"
    assert main(["export", str(src), "--lang", lang, "-o", str(out)]) == 0
    names = sorted(p.name for p in out.iterdir())
    assert names == sorted(f"focus_actuator_gains{s}" for s in suffixes)
    text = capsys.readouterr().out
    assert "pass  exported formulas at the nominal values vs derive" in text
    assert "the gains do not exist where kf = 0: returns 1 (uncontrollable)" in text


def test_nothing_is_written_when_a_check_fails(tmp_path, monkeypatch, capsys):
    import symbolic.render.export as export

    monkeypatch.setattr(export, "self_check", lambda d, formulas: 1e-3)
    out = tmp_path / "export"
    code = main(["export", str(WORKED / "focus_actuator.toml"), "--lang", "c", "-o", str(out)])
    assert code == 1 and not out.exists()
    assert "FAIL  exported formulas" in capsys.readouterr().out
    result = export_code(derive(load_design(WORKED / "focus_actuator.toml")), lang="c")
    assert not result.passed and not result.check.passed and result.derivation_passed
    with pytest.raises(RenderError, match="nothing written"):
        write_export(result, out)
    assert not out.exists()


def test_unknown_language_is_an_input_error(tmp_path):
    with pytest.raises(DesignFileError, match="unknown language 'rust'"):
        check_export_options(
            load_design(WORKED / "focus_actuator.toml"), lang="rust", digital=False, form=None
        )
    with pytest.raises(DesignFileError, match="unknown language 'rust'"):
        export_code(derive(load_design(WORKED / "focus_actuator.toml")), lang="rust")


@pytest.mark.skipif(shutil.which("g++") is None, reason="g++ is not installed")
def test_header_is_valid_cpp(worked, tmp_path):
    _d, formulas = worked["belt_drive"]
    for name, content in c_sources(formulas).items():
        (tmp_path / name).write_bytes(content)
    (tmp_path / "use.cpp").write_text('#include "belt_drive_gains.h"\nint main() { return 0; }\n')
    proc = subprocess.run(
        [
            "g++",
            "-std=c++11",
            "-Wall",
            "-Wextra",
            "-Werror",
            "-pedantic",
            "-fsyntax-only",
            "use.cpp",
        ],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        timeout=60,
    )
    assert proc.returncode == 0, proc.stderr


if __name__ == "__main__":  # pragma: no cover
    sys.exit(pytest.main([__file__, "-q"]))


@needs_gcc
def test_design_without_parameters(tmp_path):
    # a double integrator with fixed numbers: K = [6, 5] for (s + 2)(s + 3)
    text = """
    [plant]
    A = [[0, 1], [0, 0]]
    B = [[0], [1]]
    C = [[1, 0]]
    [controller]
    poles = ["-2", "-3"]
    [observer]
    poles = ["-8", "-9"]
    """
    design = parse_design(text.encode(), str(tmp_path / "fixed.toml"))
    formulas = gain_formulas(derive(design, budget=0))
    assert formulas.factors == ()
    exe = _build(formulas, tmp_path)
    codes, K, L, N = _run_driver(exe, np.zeros((1, 0)), formulas.shape)
    assert codes[0] == CODE_OK and K[0].tolist() == [[6.0, 5.0]] and N[0] == 6.0
    assert L[0].ravel().tolist() == [17.0, 72.0]  # (s + 8)(s + 9) = s^2 + 17 s + 72
    for fname, content in python_source(formulas).items():
        (tmp_path / fname).write_bytes(content)
    g = _import(tmp_path / "fixed_gains.py").gains()
    assert g["K"].tolist() == [[6.0, 5.0]] and float(g["reference_gain"]) == 6.0


def test_docstring_examples():
    import doctest

    import symbolic.render.code_printers as printers
    import symbolic.render.gain_formulas as formulas

    results = [
        doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        for module in (formulas, printers)
    ]
    assert sum(r.attempted for r in results) >= 4 and not any(r.failed for r in results)
