"""Numbers and poles printed the way a design file writes them, ``symbolic.model.numbers``.

The notation is Python's for complex numbers (Python Software Foundation, *The
Python Language Reference*, release 3.11, section 2.4.7 "Imaginary literals"),
which is also what a design file accepts (:func:`symbolic.input.expressions.parse_pole`).
The property checked is that the printed text reads back, with gainsmith's own
pole parser, as the pole to the printed precision: rounding a number to ``d``
significant figures moves it by at most half a unit in the last figure, i.e. by
at most ``0.5·10^(1−d)`` times its magnitude (the definition of rounding to
significant figures; common practice, no source).  With ``digits=None`` each
part is written so that it reads back as the same double: 17 significant digits
suffice for any IEEE 754 binary64 number (ISO/IEC 9899:2018, 5.2.4.2.2,
DBL_DECIMAL_DIG = 17) and Python's ``repr`` gives the shortest such text
(*What's New in Python 3.1*, from memory).

The random poles are drawn with a fixed seed; they are test inputs, not data.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

from symbolic.input.expressions import parse_pole
from symbolic.model.numbers import format_number, format_pole, format_poles, pole_parts
from symbolic.render.mathtex import pole_latex
from symbolic.render.memo_numbers import tex_number


@pytest.mark.parametrize(
    ("pole", "digits", "expected"),
    [
        (-4.0, 6, "-4"),
        (-4 + 0j, 6, "-4"),
        (-2 + 3j, 6, "-2+3j"),
        (-2 - 3j, 6, "-2-3j"),
        (-3j, 6, "-3j"),
        (3j, 6, "3j"),
        (0j, 6, "0"),
        (complex(-0.0, -0.0), 6, "0"),
        # round-off left by an eigenvalue solver on a real pole is not shown
        (complex(-4, 1e-17), 6, "-4"),
        (complex(-4, -1e-17), 6, "-4"),
        (complex(-1e-17, 5), 6, "5j"),
        # ... but an imaginary part that shows at the printed precision is kept
        (complex(-4, 1e-4), 6, "-4+0.0001j"),
        (complex(-4, 1e-4), 3, "-4"),
        (complex(-1 / 3, -2 / 3), 4, "-0.3333-0.6667j"),
        (complex(-1 / 3, -2 / 3), 6, "-0.333333-0.666667j"),
        (complex(-1234567.0, 2.5e-3), 6, "-1.23457e+06"),
        (complex(-1.5e-7, 2e-7), 6, "-1.5e-07+2e-07j"),
        (complex(-1.5e6, -2e6), 3, "-1.5e+06-2e+06j"),
        # digits=None: the shortest text that reads back as the same double
        (complex(-(0.1 + 0.2), 1 / 3), None, "-0.30000000000000004+0.3333333333333333j"),
        (-2.0, None, "-2"),
        (complex(-2, 1e-17), None, "-2"),
        (sp.Rational(-1, 10) + 3 * sp.I, None, "-0.1+3j"),  # a pole as the loader keeps it
        (sp.Integer(-12), 6, "-12"),
        (np.complex128(-8 + 6j), 6, "-8+6j"),
    ],
)
def test_format_pole(pole, digits, expected):
    assert format_pole(pole, digits) == expected


def test_format_poles_keeps_order_and_pairs():
    poles = np.array([-2 + 3j, -2 - 3j, -4.0, complex(-10, 1e-15)])
    assert format_poles(poles) == "-2+3j, -2-3j, -4, -10"
    assert format_poles([]) == ""
    assert format_poles([-1, -2], 6, " ") == "-1 -2"


def test_format_number_matches_percent_g():
    for x in (0.5, -9.81, 1e-7, 123456789.0, -2.0 / 3.0):
        assert format_number(x, 4) == f"{x:.4g}"
    assert format_number(-0.0) == "0"
    assert format_number(1e16, None) == "1e+16"
    assert format_number(3.0, None) == "3"


def test_pole_parts_say_which_part_is_shown():
    assert pole_parts(-2 + 3j) == ("-2", "3")
    assert pole_parts(-2 - 3j) == ("-2", "-3")
    assert pole_parts(complex(-4, 1e-17)) == ("-4", None)
    assert pole_parts(0j) == (None, None)


def random_poles(count: int, seed: int, roundoff: bool = True) -> list[complex]:
    """Real poles, complex poles, and real poles carrying round-off, over 7 decades."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(count):
        real = -(10.0 ** rng.uniform(-3, 4)) * rng.uniform(1, 10)
        kind = rng.integers(0, 3 if roundoff else 2)
        if kind == 0:
            imag = 0.0
        elif kind == 1:
            imag = rng.choice([-1, 1]) * 10.0 ** rng.uniform(-3, 4) * rng.uniform(1, 10)
        else:
            imag = rng.uniform(-1, 1) * 1e-16 * abs(real)
        out.append(complex(real, imag))
    return out


def as_complex(expr: sp.Expr) -> complex:
    real, imag = expr.as_real_imag()
    return complex(float(real), float(imag))


@pytest.mark.parametrize("digits", [3, 4, 6, 8, 12])
def test_printed_poles_read_back_to_the_printed_precision(digits):
    half_unit = 0.5 * 10.0 ** (1 - digits) * (1 + 1e-12)
    for z in random_poles(1500, seed=20240612 + digits):
        text = format_pole(z, digits)
        assert " " not in text
        back = as_complex(parse_pole(text))
        real_text, imag_text = pole_parts(z, digits)
        for part, printed, value in (
            (z.real, real_text, back.real),
            (z.imag, imag_text, back.imag),
        ):
            if printed is None:  # left out: below half a unit of the last figure of |z|
                assert value == 0.0
                assert abs(part) < half_unit * abs(z), (z, text)
            else:
                assert abs(value - part) <= half_unit * abs(part), (z, text)
        if abs(z.imag) < 1e-15 * abs(z):
            assert "j" not in text, (z, text)  # round-off never shows


def test_poles_printed_without_digits_read_back_as_the_same_doubles():
    # (round-off parts of the size 1e-16·|z| that 17 figures keep are below the parser's
    # 1e-15 literal limit for small poles, so they are left out of this round trip)
    for z in random_poles(1500, seed=7, roundoff=False):
        text = format_pole(z, None)
        assert as_complex(parse_pole(text)) == z, (z, text)


def test_seventeen_figures_leave_out_only_what_is_below_the_last_one():
    # half a unit of the 17th figure of |z| = 4 is 2e-16
    assert format_pole(complex(-4, 1.9e-16), None) == "-4"
    assert format_pole(complex(-4, 2.1e-16), None) == "-4+2.1e-16j"


def _latex_to_plain(tex: str) -> str:
    """Undo the math typesetting: spaces, ``\\times 10^{k}``, ``\\times10^{k}``, ``\\,\\mathrm{j}``."""
    plain = tex.replace(" ", "").replace("\\,\\mathrm{j}", "j").replace("\\times10^", "e")
    return plain.replace("{", "").replace("}", "")


@pytest.mark.parametrize("digits", [3, 4, 6])
def test_latex_poles_carry_the_plain_text_numbers_and_j(digits):
    for z in random_poles(500, seed=99 + digits):
        plain = format_pole(z, digits)
        for tex in (pole_latex(z, digits), tex_number(z, digits)):
            assert "i" not in tex.replace("\\times", "").replace("\\mathrm", "")
            back = _latex_to_plain(tex)
            # the same parts, with the exponent written as a power of ten
            assert as_complex(parse_pole(back)) == as_complex(parse_pole(plain)), (z, tex, plain)
