"""``gainsmith check``: hand-calculated gains against published values and defining properties.

Every external number names its source beside it.  The defining property of
a gain claim is the set of poles it achieves, eig(A − B K) or eig(A − L C);
the tests compute those with NumPy themselves and never take them from
gainsmith.
"""

from __future__ import annotations

import dataclasses
import functools
import itertools
import json
import math
import os
import re
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy.signal import place_poles

from symbolic import derive
from symbolic.analysis.claims import ClaimReport, ClaimVerdict, check_claims
from symbolic.cli import main
from symbolic.input.reader import parse_design
from symbolic.model.design import Claims
from symbolic.runtime.errors import DesignFileError

from .conftest import ROOT

# K. Ogata, Modern Control Engineering, 5th ed., Prentice Hall, 2010,
# Example 10-1 (from memory): A = [[0,1,0],[0,0,1],[-1,-5,-6]], B = [0,0,1]ᵀ,
# poles -2 ± j4 and -10 give K = [199, 55, 8].
OGATA_10_1_A = np.array([[0.0, 1, 0], [0, 0, 1], [-1, -5, -6]])
OGATA_10_1_B = np.array([[0.0], [0], [1]])
OGATA_10_1_C = np.array([[1.0, 0, 0]])
OGATA_10_1_POLES = [-2 + 4j, -2 - 4j, -10]
OGATA_10_1_K = [199.0, 55.0, 8.0]

# K. Ogata, Modern Control Engineering, 5th ed., Prentice Hall, 2010,
# Example 10-5 (from memory): A = [[0, 20.6], [1, 0]], C = [0, 1], observer
# poles -10, -10 give Ke = [120.6, 20]ᵀ.  (B = [0, 1]ᵀ and the controller
# poles below are ours: the example concerns the observer only.)
OGATA_10_5_A = np.array([[0.0, 20.6], [1, 0]])
OGATA_10_5_C = np.array([[0.0, 1]])
OGATA_10_5_L = [120.6, 20.0]

OGATA_10_1_PLANT = """
title = "Ogata Example 10-1 plant"
[plant]
A = [[0, 1, 0], [0, 0, 1], [-1, -5, -6]]
B = [0, 0, 1]
C = [[1, 0, 0]]
[controller]
poles = {poles}
"""

OGATA_10_5_PLANT = """
title = "Ogata Example 10-5 plant"
[plant]
A = [[0, 20.6], [1, 0]]
B = [0, 1]
C = [[0, 1]]
[controller]
poles = ["-1.8+2.4j", "-1.8-2.4j"]
[observer]
poles = ["-10", "-10"]
"""

OGATA_POLES_TEXT = '["-2+4j", "-2-4j", "-10"]'


def ogata_10_1(claimed: str, poles: str = OGATA_POLES_TEXT) -> str:
    return OGATA_10_1_PLANT.format(poles=poles) + "[claimed]\n" + claimed + "\n"


def ogata_10_5(claimed: str) -> str:
    return OGATA_10_5_PLANT + "[claimed]\n" + claimed + "\n"


def run_cli(capsys, path, *options: str) -> tuple[int, str, str]:
    code = main(["check", str(path), *options])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def run_json(capsys, path, *options: str) -> tuple[int, dict]:
    code, out, _err = run_cli(capsys, path, "--json", *options)
    return code, json.loads(out)


def poles_from_pairs(pairs) -> np.ndarray:
    return np.array([complex(re_, im) for re_, im in pairs])


def same_multiset(a, b, rtol: float) -> bool:
    """Equal as multisets of complex numbers (brute-force matching, small sets only)."""
    a = np.asarray(a, dtype=complex)
    b = np.asarray(b, dtype=complex)
    if a.size != b.size:
        return False
    return (
        min(max_matched_distance(a, perm, b) for perm in itertools.permutations(range(a.size)))
        <= rtol
    )


def max_matched_distance(a, perm, b) -> float:
    return max(abs(a[i] - b[j]) / max(1.0, abs(b[j])) for i, j in enumerate(perm))


def independent_pole_error(achieved, requested) -> float:
    """Largest relative distance under the best pairing, by trying every pairing."""
    a = np.asarray(achieved, dtype=complex)
    r = np.asarray(requested, dtype=complex)
    return min(
        max(abs(a[j] - r[i]) / max(1.0, abs(r[i])) for i, j in enumerate(perm))
        for perm in itertools.permutations(range(a.size))
    )


_POLE = re.compile(r"(-?[\d.]+(?:e[+-]?\d+)?)(?:([±+-])([\d.]+(?:e[+-]?\d+)?)j)?")


def parse_poles(text: str) -> list[complex]:
    """'-1.71±4j, -10.6' → [-1.71+4j, -1.71-4j, -10.6]."""
    out: list[complex] = []
    for item in text.split(","):
        m = _POLE.fullmatch(item.strip())
        assert m, f"cannot read the pole {item!r} in {text!r}"
        re_ = float(m.group(1))
        if m.group(2) is None:
            out.append(complex(re_, 0))
        elif m.group(2) == "±":
            out += [complex(re_, float(m.group(3))), complex(re_, -float(m.group(3)))]
        else:
            out.append(complex(re_, float(m.group(2) + m.group(3))))
    return out


def achieved_poles_in(explanation: str) -> list[complex]:
    m = re.search(r"the achieved poles are (.+?) instead of", explanation)
    assert m, explanation
    return parse_poles(m.group(1))


def assert_close_to_three_figures(quoted: list[complex], exact: np.ndarray) -> None:
    """Quoted to 3 significant figures: each part within half a unit of the third figure."""
    q = sorted(quoted, key=lambda z: (round(z.real, 1), z.imag))
    e = sorted(np.asarray(exact, dtype=complex), key=lambda z: (round(z.real, 1), z.imag))
    assert len(q) == len(e)
    for a, b in zip(q, e):
        assert abs(a.real - b.real) <= 5e-3 * max(abs(b.real), 1e-9) + 1e-12, (q, e)
        assert abs(a.imag - b.imag) <= 5e-3 * max(abs(b.imag), abs(b.real) * 1e-3) + 1e-12, (q, e)


# --------------------------------------------------------------------------
# Published gains hold
# --------------------------------------------------------------------------
def test_ogata_example_10_1_published_gain_holds(capsys, write_design):
    # Ogata, 5th ed., Example 10-1 (from memory): K = [199, 55, 8].
    path = write_design(ogata_10_1("K = [199, 55, 8]"))
    code, out, err = run_cli(capsys, path)
    assert code == 0, out + err
    assert "HOLDS" in out and "DOES NOT HOLD" not in out
    assert "every claim holds" in out
    assert "tolerance 0.001" in out


def test_ogata_example_10_5_published_observer_gain_holds(capsys, write_design):
    # Ogata, 5th ed., Example 10-5 (from memory): Ke = [120.6, 20]ᵀ for observer poles -10, -10.
    path = write_design(ogata_10_5("L = [[120.6], [20]]"))
    code, doc = run_json(capsys, path)
    assert code == 0
    (claim,) = doc["claims"]
    assert claim["name"] == "L" and claim["holds"]
    # defining property, computed here: eig(A − Ke C) = {-10, -10}
    own = np.linalg.eigvals(OGATA_10_5_A - np.array([OGATA_10_5_L]).T @ OGATA_10_5_C)
    assert same_multiset(own, [-10, -10], 1e-6)
    assert same_multiset(poles_from_pairs(claim["achieved_poles"]), own, 1e-6)


def test_reference_gain_from_franklin_reference_input_formula(capsys, write_design):
    # G. F. Franklin, J. D. Powell, A. Emami-Naeini, Feedback Control of Dynamic
    # Systems, 7th ed., Pearson, 2015, Sec. 7.5, introducing the reference input
    # (from memory): [A B; C D][Nx; Nu] = [0; 1] and N = Nu + K Nx.  For Ogata's
    # Example 10-1 plant with K = [199, 55, 8] this gives N = 200.
    A, B, C = OGATA_10_1_A, OGATA_10_1_B, OGATA_10_1_C
    M = np.block([[A, B], [C, np.zeros((1, 1))]])
    sol = np.linalg.solve(M, np.r_[np.zeros(3), 1.0])
    N = sol[3] + np.array(OGATA_10_1_K) @ sol[:3]
    assert N == pytest.approx(200.0, rel=1e-12)

    path = write_design(ogata_10_1("K = [199, 55, 8]\nreference_gain = 200"))
    code, doc = run_json(capsys, path)
    assert code == 0
    ref = doc["claims"][1]
    assert ref["name"] == "reference_gain" and ref["holds"]
    assert ref["achieved_dc_gain"] == pytest.approx(1.0, rel=1e-9)

    # 5 % low: steady-state gain 0.95 with the published K (final value theorem,
    # y_ss = −C (A − BK)⁻¹ B N, computed here)
    path = write_design(ogata_10_1("reference_gain = 190"), "low.toml")
    code, doc = run_json(capsys, path)
    assert code == 1
    ref = doc["claims"][0]
    Acl = A - B @ np.array([OGATA_10_1_K])
    expected_dc = (-C @ np.linalg.solve(Acl, B)).item() * 190.0
    assert ref["achieved_dc_gain"] == pytest.approx(expected_dc, rel=1e-9)
    assert expected_dc == pytest.approx(0.95, rel=1e-12)
    assert not ref["holds"] and "0.95" in ref["explanation"]


# --------------------------------------------------------------------------
# Rounding and tolerance
# --------------------------------------------------------------------------
def companion_form_gain(plant_coefficients, poles) -> np.ndarray:
    """K for a plant in controllable canonical form, by coefficient matching.

    K. Ogata, Modern Control Engineering, 5th ed., 2010, Sec. 10-2, method 1 with
    T = I (from memory): K = [α_n − a_n, …, α_1 − a_1] for plant polynomial
    s^n + a_1 s^(n−1) + … + a_n and desired polynomial with coefficients α_i.
    """
    alpha = np.real(np.poly(poles))[1:]
    return (alpha - np.asarray(plant_coefficients, dtype=float))[::-1]


def test_claim_rounded_to_four_significant_figures_holds(capsys, write_design):
    poles = [-1.7 + 3.3j, -1.7 - 3.3j, -8.6]
    exact = companion_form_gain([6, 5, 1], poles)  # Ogata 10-1 plant: s³ + 6s² + 5s + 1
    np.testing.assert_allclose(exact, [117.508, 38.02, 6.0], rtol=1e-12)
    rounded = [float(f"{k:.3e}") for k in exact]  # 4 significant figures
    assert rounded == [117.5, 38.02, 6.0]
    path = write_design(
        ogata_10_1(f"K = {rounded}", '["-1.7+3.3j", "-1.7-3.3j", "-8.6"]'),
    )
    code, doc = run_json(capsys, path)
    assert code == 0
    (claim,) = doc["claims"]
    assert claim["holds"]
    assert claim["relative_error"] == pytest.approx(
        np.linalg.norm(np.array(rounded) - exact) / np.linalg.norm(exact), rel=1e-9
    )
    assert claim["relative_error"] < 1e-3


def test_tolerance_option_overrides_the_file(capsys, write_design):
    poles = '["-1.7+3.3j", "-1.7-3.3j", "-8.6"]'
    # relative error of [117.5, 38.02, 6] is 6.5e-5 (see the test above)
    path = write_design(ogata_10_1("K = [117.5, 38.02, 6]\ntolerance = 1e-5", poles))
    code, out, _ = run_cli(capsys, path)
    assert code == 1 and "tolerance 1e-05" in out and "DOES NOT HOLD" in out
    code, out, _ = run_cli(capsys, path, "--tolerance", "1e-3")
    assert code == 0 and "tolerance 0.001" in out and "--tolerance" in out
    code, doc = run_json(capsys, path, "--tolerance", "2e-3")
    assert code == 0 and doc["tolerance"] == 2e-3
    assert all(c["holds"] for c in doc["claims"])


@pytest.mark.parametrize("bad", ["0", "-1e-3", "nan", "inf", "2"])
def test_tolerance_option_out_of_range_is_bad_input(capsys, write_design, bad):
    path = write_design(ogata_10_1("K = [199, 55, 8]"))
    code, out, err = run_cli(capsys, path, f"--tolerance={bad}")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "--tolerance" in err


def test_rounding_that_moves_the_poles_does_not_hold(capsys, write_design):
    # Invented scenario (demo values): a telescope focuser driven through a
    # flexible coupling.  Rounding K to 4 significant figures keeps the gain
    # within 1e-4 but the position gain is the small sum K_1 + K_3 of two
    # large, nearly opposite entries, so the poles move by about 10 %.  The
    # check is the defining property eig(A − B K), computed here with NumPy,
    # and SciPy's place_poles is the reference gain.
    J1, J2, ks, b, kt = 5e-5, 3e-4, 0.8, 5e-4, 0.03
    A = np.array(
        [
            [0, 1, 0, 0],
            [-ks / J1, -b / J1, ks / J1, b / J1],
            [0, 0, 0, 1],
            [ks / J2, b / J2, -ks / J2, -b / J2],
        ]
    )
    B = np.array([[0], [kt / J1], [0], [0]])
    poles = [-5 + 6j, -5 - 6j, -30, -33]
    K = place_poles(A, B, poles).gain_matrix
    rounded = [float(f"{k:.3e}") for k in K[0]]
    path = write_design(
        f"""
        title = "Telescope focuser (demo values)"
        [parameters]
        J1 = {{ value = {J1} }}
        J2 = {{ value = {J2} }}
        ks = {{ value = {ks} }}
        b = {{ value = {b} }}
        kt = {{ value = {kt} }}
        [plant]
        A = [[0, 1, 0, 0], ["-ks/J1", "-b/J1", "ks/J1", "b/J1"], [0, 0, 0, 1],
             ["ks/J2", "b/J2", "-ks/J2", "-b/J2"]]
        B = [0, "kt/J1", 0, 0]
        C = [[0, 0, 1, 0]]
        [controller]
        poles = ["-5+6j", "-5-6j", "-30", "-33"]
        [claimed]
        K = {rounded}
        """
    )
    code, doc = run_json(capsys, path)
    assert code == 1
    (claim,) = doc["claims"]
    own = np.linalg.eigvals(A - B @ np.array([rounded]))
    assert independent_pole_error(own, poles) > 1e-2
    assert claim["relative_error"] < 1e-3  # the gain itself is close
    assert not claim["holds"]
    assert claim["pole_error"] == pytest.approx(independent_pole_error(own, poles), rel=1e-6)
    assert "more significant figures" in claim["explanation"]
    assert_close_to_three_figures(achieved_poles_in(claim["explanation"]), own)


def test_repeated_observer_pole_is_held_to_the_root_of_the_tolerance(capsys, write_design):
    # Ogata, 5th ed., Example 10-5 (from memory) with L_2 written 20.002: the
    # gain is within 1.6e-5, but a double pole splits as the square root of the
    # perturbation: s² + 20.002 s + 100 has roots -10.001 ± 0.1414 (quadratic
    # formula), 1.4 % from -10.  The bound is tol**(1/2) = 0.0316 (J. H. Wilkinson,
    # The Algebraic Eigenvalue Problem, Oxford, 1965, Ch. 2).
    path = write_design(ogata_10_5("L = [120.6, 20.002]"))
    code, doc = run_json(capsys, path)
    (claim,) = doc["claims"]
    own = np.roots([1, 20.002, 100])
    assert same_multiset(poles_from_pairs(claim["achieved_poles"]), own, 1e-9)
    assert claim["pole_error"] == pytest.approx(independent_pole_error(own, [-10, -10]), rel=1e-6)
    assert claim["pole_tolerance"] == pytest.approx(1e-3**0.5)
    assert claim["holds"] and code == 0
    # L_2 = 20.1: the gain is still within 0.082 % (norm), but the pair splits
    # into -9.05 and -11.1 (roots of s² + 20.1 s + 100), 11 % off: beyond 0.0316
    path = write_design(ogata_10_5("L = [120.6, 20.1]"), "off.toml")
    code, doc = run_json(capsys, path)
    assert code == 1 and not doc["claims"][0]["holds"]
    assert "more significant figures" in doc["claims"][0]["explanation"]
    assert_close_to_three_figures(
        achieved_poles_in(doc["claims"][0]["explanation"]), np.roots([1, 20.1, 100])
    )


# --------------------------------------------------------------------------
# A wrong entry
# --------------------------------------------------------------------------
def test_one_wrong_entry_of_K_fails_and_names_entry_and_poles(capsys, write_design):
    # Ogata, 5th ed., Example 10-1 (from memory): the published K is [199, 55, 8];
    # the claim writes 50 for the middle entry.
    claimed = [199.0, 50.0, 8.0]
    path = write_design(ogata_10_1(f"K = {claimed}"))
    code, out, _ = run_cli(capsys, path)
    assert code == 1
    assert "DOES NOT HOLD" in out and "CLAIMS DO NOT HOLD" in out
    own = np.linalg.eigvals(OGATA_10_1_A - OGATA_10_1_B @ np.array([claimed]))
    (line,) = [ln for ln in out.splitlines() if "the achieved poles are" in ln]
    assert "K_2" in line and "K_1" not in line and "K_3" not in line
    assert "9.1 %" in line  # |50 − 55| / 55
    assert_close_to_three_figures(achieved_poles_in(line), own)

    code, doc = run_json(capsys, path)
    (claim,) = doc["claims"]
    assert same_multiset(poles_from_pairs(claim["achieved_poles"]), own, 1e-9)
    assert claim["difference"] == [[0.0, -5.0, 0.0]]
    assert claim["pole_error"] == pytest.approx(
        independent_pole_error(own, OGATA_10_1_POLES), rel=1e-9
    )


def test_one_wrong_entry_of_L_fails_and_names_entry_and_poles(capsys, write_design):
    # Ogata, 5th ed., Example 10-5 (from memory): Ke = [120.6, 20]ᵀ; the claim
    # writes 102.6 for the first entry (two digits swapped).
    claimed = [102.6, 20.0]
    path = write_design(ogata_10_5(f"L = {claimed}"))
    code, doc = run_json(capsys, path)
    assert code == 1
    (claim,) = doc["claims"]
    own = np.linalg.eigvals(OGATA_10_5_A - np.array([claimed]).T @ OGATA_10_5_C)
    assert "L_1" in claim["explanation"] and "L_2" not in claim["explanation"]
    assert_close_to_three_figures(achieved_poles_in(claim["explanation"]), own)
    assert same_multiset(poles_from_pairs(claim["achieved_poles"]), own, 1e-9)


def test_destabilising_claim_is_called_unstable(capsys, write_design):
    # K = [199, 55, -8]: the last row of A − BK is [-200, -60, 2], so the
    # characteristic polynomial s³ − 2s² + 60s + 200 has a negative coefficient
    # and the loop is unstable (Routh–Hurwitz necessary condition; E. J. Routh,
    # A Treatise on the Stability of a Given State of Motion, 1877).
    path = write_design(ogata_10_1("K = [199, 55, -8]"))
    code, doc = run_json(capsys, path)
    assert code == 1
    own = np.linalg.eigvals(OGATA_10_1_A - OGATA_10_1_B @ np.array([[199, 55, -8]]))
    assert np.any(own.real > 0)
    assert "unstable" in doc["claims"][0]["explanation"]


# --------------------------------------------------------------------------
# Shapes
# --------------------------------------------------------------------------
@pytest.mark.parametrize(
    "claim", ["K = [199, 55, 8]", "K = [[199, 55, 8]]", "K = [[199], [55], [8]]"]
)
def test_K_as_flat_list_row_or_column(capsys, write_design, claim):
    # Ogata, 5th ed., Example 10-1 (from memory)
    code, doc = run_json(capsys, write_design(ogata_10_1(claim)))
    assert code == 0
    assert doc["claims"][0]["claimed"] == [OGATA_10_1_K]


@pytest.mark.parametrize("claim", ["L = [120.6, 20]", "L = [[120.6], [20]]", "L = [[120.6, 20]]"])
def test_L_as_flat_list_column_or_row(capsys, write_design, claim):
    # Ogata, 5th ed., Example 10-5 (from memory)
    code, doc = run_json(capsys, write_design(ogata_10_5(claim)))
    assert code == 0
    assert doc["claims"][0]["claimed"] == [[120.6], [20.0]]


@pytest.mark.parametrize(
    "claim, key",
    [
        ("K = [199, 55]", "claimed.K"),
        ("K = [199, 55, 8, 1]", "claimed.K"),
        ("K = [[199, 55, 8], [1, 2, 3]]", "claimed.K"),
        ("K = [[199, 55], [8, 1]]", "claimed.K"),
        ("K = [[199], [55, 8]]", "claimed.K"),
        ('K = ["199", 55, 8]', "claimed.K"),
        ("K = []", "claimed.K"),
        ("L = [1, 2]", "claimed.L"),
        ("L = [[1, 2, 3], [4, 5, 6]]", "claimed.L"),
        ("reference_gain = [1, 2]", "claimed.reference_gain"),
        ("tolerance = 0.01", "claimed"),
    ],
)
def test_wrong_shapes_are_bad_input_with_one_line(capsys, write_design, claim, key):
    code, out, err = run_cli(capsys, write_design(ogata_10_1(claim)))
    assert code == 2 and out == ""
    assert err.startswith("gainsmith: error:") and err.count("\n") == 1
    assert key in err


def test_single_reference_gain_with_several_inputs_is_bad_input(capsys, write_design):
    path = write_design(
        """
        [plant]
        A = [[0, 1], [-2, -3]]
        B = [[1, 0], [0, 1]]
        C = [[1, 0]]
        [controller]
        poles = ["-4", "-5"]
        [claimed]
        reference_gain = 1.5
        """
    )
    code, out, err = run_cli(capsys, path)
    assert code == 2 and err.count("\n") == 1 and "claimed.reference_gain" in err


def test_no_claimed_table_is_bad_input(capsys, write_design):
    path = write_design(OGATA_10_1_PLANT.format(poles=OGATA_POLES_TEXT))
    code, out, err = run_cli(capsys, path)
    assert code == 2 and out == ""
    assert err.count("\n") == 1
    assert "no [claimed] table: nothing to check" in err and "claimed" in err


# --------------------------------------------------------------------------
# Several inputs: K is not unique
# --------------------------------------------------------------------------
def test_several_inputs_judged_by_the_poles(capsys, write_design):
    # With B = I every K = A − M places the eigenvalues of M (defining property):
    # M = [[-4, 7], [0, -5]] is triangular with eigenvalues -4, -5, so
    # K = A − M = [[4, -6], [-2, 2]] is right although it differs from any
    # particular placement routine's answer.
    A = np.array([[0.0, 1], [-2, -3]])
    M = np.array([[-4.0, 7], [0, -5]])
    K = A - M
    text = """
        [plant]
        A = [[0, 1], [-2, -3]]
        B = [[1, 0], [0, 1]]
        C = [[1, 0]]
        [controller]
        poles = ["-4", "-5"]
        [claimed]
        K = {K}
        """
    code, doc = run_json(capsys, write_design(text.format(K=K.tolist())))
    assert code == 0
    (claim,) = doc["claims"]
    assert claim["holds"] and "not unique" in claim["explanation"]
    assert same_multiset(poles_from_pairs(claim["achieved_poles"]), [-4, -5], 1e-12)
    # a K that places -4 and -6 instead is wrong
    K_wrong = A - np.array([[-4.0, 7], [0, -6]])
    code, doc = run_json(capsys, write_design(text.format(K=K_wrong.tolist()), "wrong.toml"))
    assert code == 1 and not doc["claims"][0]["holds"]


def test_output_with_zero_at_origin_has_no_reference_gain(capsys, write_design):
    # y = velocity of x'' = -2x - 3x' + u: the transfer function s/(s² + 3s + 2)
    # vanishes at s = 0, so no constant N gives unit steady-state gain.
    path = write_design(
        """
        [plant]
        A = [[0, 1], [-2, -3]]
        B = [0, 1]
        C = [[0, 1]]
        [controller]
        poles = ["-4", "-5"]
        [claimed]
        reference_gain = 1
        """
    )
    code, doc = run_json(capsys, path)
    assert code == 1
    (claim,) = doc["claims"]
    assert not claim["holds"] and claim["derived"] == [[None]]
    assert "no reference gain exists" in claim["explanation"]


# --------------------------------------------------------------------------
# JSON and the process boundary
# --------------------------------------------------------------------------
def test_json_keys(capsys, write_design):
    path = write_design(ogata_10_1("K = [199, 55, 8]\nL = [1, 2, 3]\nreference_gain = 200"))
    code, doc = run_json(capsys, path)
    assert {"holds", "tolerance", "claims"} <= set(doc)
    assert doc["tolerance"] == 1e-3 and doc["holds"] is False and code == 1
    assert [c["name"] for c in doc["claims"]] == ["K", "L", "reference_gain"]
    keys = {
        "name",
        "claimed",
        "derived",
        "difference",
        "relative_error",
        "achieved_poles",
        "requested_poles",
        "pole_error",
        "holds",
        "explanation",
    }
    for claim in doc["claims"]:
        assert keys <= set(claim)
        assert isinstance(claim["holds"], bool) and isinstance(claim["explanation"], str)
    K, L, N = doc["claims"]
    assert K["holds"] and not L["holds"] and N["holds"]
    for claim in (K, L):
        assert all(len(pair) == 2 for pair in claim["achieved_poles"])
        assert all(len(pair) == 2 for pair in claim["requested_poles"])
    assert N["achieved_poles"] is None and N["pole_error"] is None
    assert same_multiset(poles_from_pairs(K["requested_poles"]), OGATA_10_1_POLES, 1e-12)


def test_subprocess_exit_code_and_table(write_design):
    path = write_design(ogata_10_1("K = [199, 50, 8]"))
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.run(
        [sys.executable, "-m", "symbolic", "check", str(path)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        env=env,
        timeout=60,
    )
    assert proc.returncode == 1, proc.stderr
    assert "K_2" in proc.stdout and "CLAIMS DO NOT HOLD" in proc.stdout
    assert proc.stderr == ""


# --------------------------------------------------------------------------
# The library function and its defining properties
# --------------------------------------------------------------------------
@functools.cache
def ogata_derivation():
    design = parse_design(ogata_10_1("K = [199, 55, 8]").encode(), "ogata.toml")
    return design, derive(design, budget=0)


def test_check_claims_result_objects():
    design, derivation = ogata_derivation()
    report = check_claims(derivation, design.claims)
    assert isinstance(report, ClaimReport) and report.holds and report.tolerance == 1e-3
    (verdict,) = report.verdicts
    assert isinstance(verdict, ClaimVerdict)
    with pytest.raises(dataclasses.FrozenInstanceError):
        verdict.holds = False  # type: ignore[misc]
    assert verdict.relative_error < 1e-12 and verdict.pole_error < 1e-9
    assert verdict.achieved_dc_gain is None


@pytest.mark.parametrize("tolerance", [0.0, -1e-3, math.nan, 1.5])
def test_check_claims_rejects_bad_tolerance(tolerance):
    design, derivation = ogata_derivation()
    with pytest.raises(DesignFileError, match="tolerance"):
        check_claims(derivation, design.claims, tolerance)


def test_check_claims_rejects_claims_of_another_shape():
    design, derivation = ogata_derivation()
    with pytest.raises(DesignFileError, match="claimed.K"):
        check_claims(derivation, Claims(K=((199.0, 55.0),)))
    with pytest.raises(ValueError, match="claimed.L"):
        check_claims(derivation, Claims(L=((1.0, 2.0, 3.0),)))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    direction=st.lists(
        st.floats(-1, 1, allow_nan=False, allow_infinity=False), min_size=3, max_size=3
    ),
    size=st.floats(-8, -0.5),
    tolerance=st.sampled_from([1e-4, 1e-3, 1e-2]),
)
def test_verdict_follows_its_definition(direction, size, tolerance):
    # Ogata, 5th ed., Example 10-1 (from memory) perturbed: the verdict must be
    # exactly "relative error within tolerance and every pole within tolerance",
    # with both quantities recomputed here from their definitions.
    u = np.array(direction)
    assume(np.linalg.norm(u) > 1e-3)
    published = np.array(OGATA_10_1_K)
    claimed = published + 10**size * np.linalg.norm(published) * u / np.linalg.norm(u)
    design, derivation = ogata_derivation()
    (verdict,) = check_claims(derivation, Claims(K=(tuple(claimed),)), tolerance).verdicts
    rel = np.linalg.norm(claimed - published) / np.linalg.norm(published)
    own = np.linalg.eigvals(OGATA_10_1_A - OGATA_10_1_B @ claimed.reshape(1, 3))
    pole_err = independent_pole_error(own, OGATA_10_1_POLES)
    assume(abs(rel - tolerance) > 1e-9 and abs(pole_err - tolerance) > 1e-9)
    assert verdict.relative_error == pytest.approx(rel, rel=1e-9)
    assert verdict.pole_error == pytest.approx(pole_err, rel=1e-6, abs=1e-12)
    assert same_multiset(verdict.achieved_poles, own, 1e-9)
    np.testing.assert_allclose(verdict.difference, (claimed - published).reshape(1, 3), atol=1e-9)
    assert verdict.holds == (rel <= tolerance and pole_err <= tolerance)
    if not verdict.holds:
        assert re.search(r"K_\d\b", verdict.explanation) or "significant figures" in (
            verdict.explanation
        )


# --------------------------------------------------------------------------
# Explanations quote the error that was judged, its tolerance, and numbers
# that differ when the values differ
# --------------------------------------------------------------------------
def _ogata_verdict(K=None, N=None, tolerance=1e-3):
    _design, derivation = ogata_derivation()
    claims = Claims(K=None if K is None else (tuple(K),), reference_gain=N)
    (verdict,) = check_claims(derivation, claims, tolerance).verdicts
    return verdict


def test_explanation_states_the_judged_error_beside_the_tolerance():
    # Ogata, 5th ed., Example 10-1 (from memory), K = [199, 55, 8] with the last
    # entry written 8.3: the whole matrix is off by 0.3/‖[199, 55, 8]‖ = 0.145 %
    # while that entry alone is off by 0.3/8 = 3.75 %.
    verdict = _ogata_verdict(K=[199, 55, 8.3], tolerance=1e-3)
    rel = 0.3 / np.linalg.norm(OGATA_10_1_K)
    assert f"{100 * rel:.2g}" == "0.15"
    assert verdict.explanation.startswith(
        "K differs from gainsmith's K by 0.15 % (tolerance 0.1 %): K_3 differs by 3.8 %"
    ), verdict.explanation
    # the same claim judged at 5 %: it holds, and the sentence quotes 0.15 %, not 3.8 %
    verdict = _ogata_verdict(K=[199, 55, 8.3], tolerance=5e-2)
    assert verdict.holds
    assert verdict.explanation.startswith(
        "K differs from gainsmith's K by 0.15 % (tolerance 5.0 %)"
    ), verdict.explanation


def test_a_passing_claim_still_names_an_entry_off_by_more_than_the_tolerance():
    # Ogata 10-1 (from memory) with K = [199, 55.5, 8.1] at 1 %: the matrix is off
    # by ‖[0, 0.5, 0.1]‖/‖K‖ = 0.25 % and the poles by under 1 % (checked here with
    # NumPy), so the claim holds, but K_3 alone is off by 0.1/8 = 1.25 %.
    claimed = [199, 55.5, 8.1]
    own = np.linalg.eigvals(OGATA_10_1_A - OGATA_10_1_B @ np.array([claimed]))
    assert independent_pole_error(own, OGATA_10_1_POLES) < 1e-2
    verdict = _ogata_verdict(K=claimed, tolerance=1e-2)
    assert verdict.holds
    assert "by 0.25 % (tolerance 1.0 %)" in verdict.explanation
    assert re.search(
        r"its entry K_3 alone differs by 1\.[23] % \(claimed 8\.1, derived 8\)",
        verdict.explanation,
    ), verdict.explanation
    # an exact claim names no entry
    assert "alone" not in _ogata_verdict(K=OGATA_10_1_K).explanation


def _quoted(pattern: str, text: str) -> tuple[str, str]:
    m = re.search(pattern, text)
    assert m, text
    return m.group(1), m.group(2)


def test_a_failing_claim_never_prints_two_equal_numbers():
    # K_1 = 199.00001 instead of 199 at a tolerance of 1e-9: six significant
    # figures would print "claimed 199, derived 199" and the poles, to three,
    # "-2±4j, -10 instead of -2±4j, -10".
    verdict = _ogata_verdict(K=[199.00001, 55, 8], tolerance=1e-9)
    assert not verdict.holds
    c, d = _quoted(r"claimed ([-\d.e+]+), derived ([-\d.e+]+)\)", verdict.explanation)
    assert (c, d) == ("199.00001", "199")
    got, want = _quoted(r"the achieved poles are (.+?) instead of (.+?) \(", verdict.explanation)
    assert got != want
    own = np.linalg.eigvals(OGATA_10_1_A - OGATA_10_1_B @ np.array([[199.00001, 55, 8]]))
    assert same_multiset(parse_poles(got), own, 1e-6)
    # N: with C = [1, 0, 0] the reference gain is the constant coefficient 200 of
    # (s + 10)(s² + 4s + 20) (Franklin et al., 7th ed., Sec. 7.5, from memory)
    verdict = _ogata_verdict(N=199.99999, tolerance=1e-9)
    assert not verdict.holds
    c, d = _quoted(r"claimed ([-\d.e+]+), derived ([-\d.e+]+) ", verdict.explanation)
    assert (c, d) == ("199.99999", "200")
    dc = re.search(r"would be ([-\d.e+]+) instead of 1", verdict.explanation).group(1)
    assert dc != "1" and float(dc) == pytest.approx(199.99999 / 200, rel=1e-7)


def test_a_pole_error_just_over_its_tolerance_reads_differently_from_it():
    # Ogata 10-1 (from memory) with K = [199, 55.2, 8.1]: the poles are off by
    # 1.002 % (NumPy, here) against a 1 % tolerance; two-figure percentages
    # would print "1.0 %" twice.
    claimed = [199, 55.2, 8.1]
    own = np.linalg.eigvals(OGATA_10_1_A - OGATA_10_1_B @ np.array([claimed]))
    err = independent_pole_error(own, OGATA_10_1_POLES)
    assert 1e-2 < err < 1.01e-2
    verdict = _ogata_verdict(K=claimed, tolerance=1e-2)
    assert not verdict.holds
    off, tol = _quoted(r"off by ([\d.e+-]+) %, tolerance ([\d.e+-]+) %", verdict.explanation)
    assert off != tol and float(tol) == 1.0
    assert abs(float(off) - 100 * err) <= 5e-3


@settings(max_examples=200, deadline=None)
@given(
    a=st.floats(allow_nan=False, allow_infinity=False, width=64),
    b=st.floats(allow_nan=False, allow_infinity=False, width=64),
)
def test_distinct_numbers_tells_different_doubles_apart(a, b):
    from symbolic.analysis.claim_wording import distinct_numbers

    ta, tb = distinct_numbers(a, b)
    assert (ta == tb) == (a == b)
    # each text is the number rounded to at least six significant figures
    for x, t in ((a, ta), (b, tb)):
        assert float(t) == pytest.approx(x, rel=5e-6, abs=1e-300)
