"""``gainsmith compare OLD NEW``: what changed between two revisions of a design.

Every revision here is a worked design copied to a temporary folder and edited as TOML text.
The independent checks:

* The gains of a changed revision are recomputed with SciPy's ``place_poles`` on the plant
  matrices written out by hand from the design file (A. L. Tits and Y. Yang, "Globally
  convergent algorithms for robust pole assignment by state feedback", IEEE Trans. Automatic
  Control 41(10):1432-1452, 1996, the method of ``scipy.signal.place_poles``); the observer
  gain by duality, ``L = place(Aᵀ, Cᵀ)ᵀ`` (D. G. Luenberger, "An introduction to observers",
  IEEE Trans. Automatic Control 16(6):596-602, 1971).  The reported old and new values and
  their relative change must equal SciPy's at both parameter values.
* The reference gain is ``N = 1 / (C (−(A − BK))⁻¹ B)`` (G. F. Franklin, J. D. Powell,
  A. Emami-Naeini, *Feedback Control of Dynamic Systems*, 7th ed., 2015, Sec. 7.6, from memory).
* Identities of rational functions used for the expression comparison are checked by the
  defining property: equal functions agree at every point, different ones differ somewhere.
"""

from __future__ import annotations

import contextlib
import io
import json
import shutil

import numpy as np
import pytest
import sympy as sp
from scipy.signal import place_poles

import symbolic
from symbolic.analysis.expression_equality import compare_expressions
from symbolic.analysis.revision_diff import SECTIONS, compare_revisions
from symbolic.analysis.study import simulation_run
from symbolic.cli import main
from symbolic.render.memo import build_memo
from symbolic.render.revision_pages import comparison_json, comparison_text

from .conftest import WORKED

FOCUS = WORKED / "focus_actuator.toml"  # meets every requirement
BALL = WORKED / "levitated_ball.toml"  # given poles; fails its actuator limit
BELT = WORKED / "belt_drive.toml"  # fourth order


def _edit(src, tmp_path, name, *replacements):
    """Copy ``src`` to ``tmp_path/name`` with each (old, new) text replaced exactly once."""
    text = src.read_text(encoding="utf-8")
    for old, new in replacements:
        assert text.count(old) == 1, old
        text = text.replace(old, new)
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _run(path):
    return simulation_run(symbolic.derive(symbolic.load_design(path)))


def _cli(*argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(argv))
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def ball_run(tmp_path_factory):
    path = tmp_path_factory.mktemp("old") / "levitated_ball.toml"
    shutil.copy(BALL, path)
    return path, _run(path)


# --------------------------------------------------------------------------------------------
# The independent computation: the levitated ball's plant written out from its design file
# --------------------------------------------------------------------------------------------
def _ball_gains(i0, controller, observer):
    g, z0, Lc, R = 9.81, 0.008, 0.25, 11.0
    A = np.array([[0, 1, 0], [2 * g / z0, 0, -2 * g / i0], [0, 0, -R / Lc]])
    B = np.array([[0.0], [0.0], [1 / Lc]])
    C = np.array([[1.0, 0.0, 0.0]])
    K = place_poles(A, B, controller).gain_matrix
    L = place_poles(A.T, C.T, observer).gain_matrix.T
    N = 1.0 / (C @ np.linalg.solve(-(A - B @ K), B))[0, 0]
    return K.ravel(), L.ravel(), N


BALL_CONTROLLER = [-60 + 45j, -60 - 45j, -150]
BALL_OBSERVER = [-240 + 180j, -240 - 180j, -500]


def _assert_gain_items(c, name, old, new):
    for j, (a, b) in enumerate(zip(old, new, strict=True)):
        label = name if len(old) == 1 else f"{name}_{j + 1}"
        (item,) = [d for d in c.section("gains") if d.item == label]
        assert item.old_value == pytest.approx(a, rel=1e-8)
        assert item.new_value == pytest.approx(b, rel=1e-8)
        assert item.relative == pytest.approx((b - a) / abs(a), rel=1e-6, abs=1e-12)
        assert item.changed == (abs(b - a) > 1e-6 * abs(a))


# --------------------------------------------------------------------------------------------
# The comparison
# --------------------------------------------------------------------------------------------
def test_a_design_compared_with_itself_reports_no_change(ball_run):
    path, run = ball_run
    c = compare_revisions(run, run)
    assert c.unchanged and not c.changes
    assert {d.section for d in c.differences} == set(SECTIONS)
    assert all(d.change == "unchanged" for d in c.differences)
    assert c.passed is run.passed is False  # the ball asks for more input than it has
    assert "No change" in comparison_text(c)


def test_one_parameter_value_changes_exactly_the_dependent_items(ball_run, tmp_path):
    old_path, old = ball_run
    new_path = _edit(old_path, tmp_path, "ball_i0.toml", ("value = 0.8\n", "value = 0.85\n"))
    c = compare_revisions(old, _run(new_path))
    assert c.changed_items("parameters") == ("i0 value",)
    (i0,) = [d for d in c.section("parameters") if d.item == "i0 value"]
    assert i0.relative == pytest.approx(0.05 / 0.8)
    assert set(c.changed_items("design")) == {"file", "SHA-256"}
    # i0 enters A as -2*g/i0: the expressions are the same, the requests and poles too
    assert c.changed_items("plant") == ()
    assert c.changed_items("requests") == ()
    assert c.changed_items("poles") == ()
    # K, L, N move by what SciPy's place_poles gives at both values; the closed forms do not
    K0, L0, N0 = _ball_gains(0.8, BALL_CONTROLLER, BALL_OBSERVER)
    K1, L1, N1 = _ball_gains(0.85, BALL_CONTROLLER, BALL_OBSERVER)
    _assert_gain_items(c, "K", K0, K1)
    _assert_gain_items(c, "L", L0, L1)
    _assert_gain_items(c, "N", [N0], [N1])
    forms = {d.item: d for d in c.section("gains") if d.item.endswith("closed form")}
    assert {k: d.change for k, d in forms.items()} == dict.fromkeys(
        ("K closed form", "L closed form", "N closed form"), "unchanged"
    )
    # the claimed K was worked out by hand at i0 = 0.8: it no longer holds
    (claims,) = [d for d in c.section("requirements") if d.item == "hand-calculated claims"]
    assert claims.change == "now fails"


def test_a_pole_change_shows_in_the_requests_the_poles_and_the_gains(ball_run, tmp_path):
    old_path, old = ball_run
    new_path = _edit(
        old_path, tmp_path, "ball_pole.toml", ('"-60-45j", "-150"]', '"-60-45j", "-200"]')
    )
    c = compare_revisions(old, _run(new_path))
    assert c.changed_items("requests") == ("controller poles",)
    assert c.changed_items("poles") == ("controller poles",)
    (poles,) = [d for d in c.section("poles") if d.item == "controller poles"]
    assert poles.relative == pytest.approx(50 / 150)
    assert poles.new == "-200, -60-45j, -60+45j"
    K0, L0, N0 = _ball_gains(0.8, BALL_CONTROLLER, BALL_OBSERVER)
    K1, L1, N1 = _ball_gains(0.8, [-60 + 45j, -60 - 45j, -200], BALL_OBSERVER)
    _assert_gain_items(c, "K", K0, K1)
    _assert_gain_items(c, "N", [N0], [N1])
    assert np.allclose(L0, L1)
    assert not any(d.changed for d in c.section("gains") if d.item.startswith("L"))
    forms = {d.item: d.change for d in c.section("gains") if d.item.endswith("closed form")}
    assert forms["K closed form"] == "changed" and forms["L closed form"] == "unchanged"
    assert c.changed_items("parameters") == c.changed_items("plant") == ()


def test_a_verdict_that_flips_shows_and_sets_the_exit_code(tmp_path):
    old = _edit(FOCUS, tmp_path, "old.toml")
    new = _edit(FOCUS, tmp_path, "new.toml", ("u_max = 1.5", "u_max = 0.2"))
    code, out, err = _cli("compare", str(old), str(new), "--json")
    assert code == 1 and not err
    data = json.loads(out)
    assert data["old"]["passed"] and not data["new"]["passed"] and data["verdict_changed"]
    rows = {d["item"]: d for d in data["sections"]["requirements"]["items"]}
    assert rows["actuator limit (peak input)"]["change"] == "now fails"
    (verdict,) = data["sections"]["verdict"]["items"]
    assert verdict["change"] == "now fails"
    assert [d["item"] for d in data["sections"]["requests"]["items"] if d["changed"]] == [
        "simulation u_max"
    ]
    assert data["sections"]["gains"]["changed"] == 0  # a limit is no part of the gains
    # and back: the new revision passes, so compare exits 0 though the old one failed
    code, out, _ = _cli("compare", str(new), str(old))
    assert code == 0 and "now passes" in out


def test_plants_of_different_order_compare_and_say_so(tmp_path):
    old, new = _edit(FOCUS, tmp_path, "focus.toml"), _edit(BELT, tmp_path, "belt.toml")
    code, out, err = _cli("compare", str(old), str(new))
    assert code == 1 and not err  # the belt drive falls short of its margins
    assert "the plants differ in order" in out
    c = symbolic.compare(old, new)
    assert not c.same_order and (c.old.order, c.new.order) == (2, 4)
    (size,) = [d for d in c.section("plant") if d.item == "size"]
    assert size.changed and size.note == "the plants differ in order"
    (K,) = [d for d in c.section("gains") if d.item == "K"]
    assert K.changed and "different shapes" in K.note
    assert {d.change for d in c.section("parameters")} == {"added", "removed"}
    json.dumps(comparison_json(c), allow_nan=False)


def test_a_rewritten_entry_is_the_same_function_and_no_change(tmp_path):
    old = _edit(FOCUS, tmp_path, "old.toml")
    new = _edit(FOCUS, tmp_path, "new.toml", ('"-c/m"]', '"-(c*m + c)/(m**2 + m)"]'))
    c = symbolic.compare(old, new)
    (entry,) = [d for d in c.section("plant") if d.item == "A[2,2]"]
    assert entry.change == "rewritten" and not entry.changed
    assert entry.old == "-c/m" and entry.new != entry.old
    assert c.changed_items("plant") == c.changed_items("gains") == ()


@pytest.mark.parametrize(
    "a, b, verdict",
    [
        ("k/m", "k/m", "same"),
        ("(k + c)/m", "k/m + c/m", "equivalent"),
        ("(k**2 - c**2)/(k - c)", "k + c", "equivalent"),
        ("k/m", "k/m + 0.000000000001", "different"),
        ("k/m", "m/k", "different"),
        ("sqrt(k)*sqrt(m)", "sqrt(k*m)", "agree at sample points"),  # not equal for k, m < 0
    ],
)
def test_expressions_are_compared_as_functions(a, b, verdict):
    from symbolic.input.expressions import parse_expression

    names = {n: sp.Symbol(n, real=True) for n in ("k", "m", "c")}
    ea, eb = (parse_expression(x, names) for x in (a, b))
    assert compare_expressions(ea, eb) == verdict
    # the defining property, at a point of our own: equal functions agree there
    point = {names["k"]: sp.Rational(7, 3), names["m"]: sp.Rational(5, 11), names["c"]: 2}
    agree = sp.N((ea - eb).xreplace(point), 30) == 0
    assert agree == (verdict != "different")


# --------------------------------------------------------------------------------------------
# Hostile inputs: one line naming the file, exit 2
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "which, content",
    [
        ("old", None),  # missing
        ("new", None),
        ("old", "hello = 1\n"),  # TOML, but no design
        ("new", "[plant\nA = 1\n"),  # not TOML
        ("new", "\x00\xff binary"),
    ],
)
def test_bad_files_are_refused_with_one_line_naming_the_file(tmp_path, which, content):
    good = _edit(FOCUS, tmp_path, "good.toml")
    bad = tmp_path / f"bad_{which}.toml"
    if content is not None:
        bad.write_bytes(content.encode("utf-8", "surrogateescape"))
    args = (bad, good) if which == "old" else (good, bad)
    code, out, err = _cli("compare", *map(str, args))
    assert code == 2 and not out
    assert len(err.strip().splitlines()) == 1 and str(bad) in err
    assert "Traceback" not in err


def test_the_same_path_twice_is_no_change(tmp_path):
    path = _edit(FOCUS, tmp_path, "focus.toml")
    code, out, err = _cli("compare", str(path), str(path))
    assert code == 0 and not err
    assert "No change" in out
    code, out, _ = _cli("compare", str(path), str(path), "--json")
    data = json.loads(out)
    assert data["unchanged"] and data["changed_count"] == 0 and data["passed"]


def test_memo_compare_with_a_missing_file_writes_nothing(tmp_path):
    path = _edit(FOCUS, tmp_path, "focus.toml")
    missing = tmp_path / "nowhere.toml"
    code, out, err = _cli("memo", str(path), "--compare", str(missing), "-o", str(tmp_path / "m"))
    assert code == 2 and str(missing) in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "m").exists()


# --------------------------------------------------------------------------------------------
# The memo section
# --------------------------------------------------------------------------------------------
def test_the_memo_section_lists_the_changes_before_the_cautions(tmp_path):
    hostile = 'revision = "B\\\\input{x}_%"'
    old = _edit(  # the top-level revision and the last [[revisions]] entry must agree
        FOCUS,
        tmp_path,
        "old.toml",
        ('revision = "B"\n\n', hostile + "\n\n"),
        ('revision = "B"\ndate', hostile + "\ndate"),
    )
    new = _edit(FOCUS, tmp_path, "new.toml", ("value = 0.012\n", "value = 0.014\n"))
    d_new = symbolic.derive(symbolic.load_design(new))
    c = symbolic.compare(old, d_new)
    doc = build_memo(d_new, comparison=c)
    md, tex = doc.markdown, doc.tex
    assert md.count("## Changes since revision B") == 1
    assert md.index("## Changes since") < md.index("## Assumptions, limits and cautions")
    assert tex.count("\\section{Changes since revision B") == 1
    assert tex.index("Changes since") < tex.index("\\section{Assumptions, limits and cautions}")
    assert "\\input{x}" not in tex  # the old file's revision is user text, escaped
    assert "m value" in md and "0.014 kg" in md
    plain = build_memo(d_new)  # without a comparison there is no such section
    assert "Changes since" not in plain.markdown and "Changes since" not in plain.tex
