"""Property tests of the safe expression parser with random text.

The property is the parser's contract: for any text, ``parse_expression``
either returns a real SymPy expression free of ``nan``, ``zoo`` and ``oo`` or
raises ``ExpressionError`` (never another exception), within one second.  The
one-second bound and the token lists are our own choices (common practice, no
source).  Set ``GAINSMITH_FUZZ_EXAMPLES`` to run more examples.

The round-trip property of ``parse_number`` relies on 17 significant decimal
digits sufficing to write any IEEE 754 binary64 number so that it reads back
unchanged (ISO/IEC 9899:2018, 5.2.4.2.2, DBL_DECIMAL_DIG = 17; D. Goldberg,
"What Every Computer Scientist Should Know About Floating-Point Arithmetic",
ACM Computing Surveys 23(1), 1991, theorem 15; from memory) and on ``repr``
giving the shortest decimal string that rounds back to the same double
(Python Software Foundation, *What's New in Python 3.1*: float repr uses David
Gay's shortest-representation algorithm; from memory).  So every finite float
within the magnitude limits is accepted.
"""

from __future__ import annotations

import math
import os
import time
from fractions import Fraction

import sympy
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from symbolic.input.expressions import parse_expression, parse_number, parse_pole
from symbolic.runtime.errors import ExpressionError

FUZZ = settings(
    max_examples=int(os.environ.get("GAINSMITH_FUZZ_EXAMPLES", "300")),
    deadline=1000,
    database=None,  # write nothing into the checkout
    suppress_health_check=[HealthCheck.too_slow],
)
TIME_LIMIT = 1.0  # seconds of CPU time per example

SYMBOLS = {
    name: sympy.Symbol(name, real=True, positive=True) for name in ("m", "c", "k1", "g", "l", "T")
}
SYMBOLS["q"] = sympy.Symbol("q", real=True)  # a real parameter of unknown sign

UNDEFINED = (sympy.nan, sympy.zoo, sympy.oo, -sympy.oo)

TOKENS = [
    # declared and undeclared names, reserved names
    "m",
    "c",
    "k1",
    "g",
    "l",
    "T",
    "q",
    "x",
    "mm",
    "s",
    "z",
    "e",
    "E",
    "I",
    "pi",
    "j",
    "nan",
    "inf",
    # numbers
    "0",
    "1",
    "2",
    "3",
    "10",
    "0.5",
    "1e15",
    "1e-15",
    "1e400",
    "9",
    "123456789012345678",
    "3j",
    ".",
    "e5",
    # operators and brackets
    "+",
    "-",
    "*",
    "/",
    "**",
    "//",
    "%",
    "^",
    "(",
    ")",
    "(",
    ")",
    "[",
    "]",
    "{",
    "}",
    ",",
    ":",
    ":=",
    "=",
    "==",
    "<",
    " ",
    "lambda ",
    " if ",
    " else ",
    " for ",
    " in ",
    " and ",
    "not ",
    "*",
    # functions, allowed and not
    "sqrt(",
    "exp(",
    "log(",
    "sin(",
    "cos(",
    "tan(",
    "atan(",
    "sinh(",
    "cosh(",
    "tanh(",
    "abs(",
    "open(",
    "eval(",
    "__import__(",
    "getattr(",
    # dunders and quotes
    "__class__",
    "__globals__",
    "__subclasses__",
    ".__class__",
    "'",
    '"',
    "f'",
    "b'",
    "\\",
    "#",
]


def _warm_up() -> None:
    """Let SymPy do its one-time lazy imports (measured: up to 0.5 s on the first
    sum of roots) before any example is timed."""
    for text in (
        "abs((sqrt(2)+sqrt(3))**2-(5+2*sqrt(6)))",
        "-cos((1-q)**0.5) + sin(m)*tan(c)/atan(g) + log(l)*exp(-T)",
        "sinh(m)*cosh(c)*tanh(g) + abs(q) + pi**2",
    ):
        parse_expression(text, SYMBOLS)


_warm_up()


def _check_contract(text: str) -> None:
    # CPU time, so that a busy machine does not fail the test.
    start = time.process_time()
    try:
        result = parse_expression(text, SYMBOLS)
    except ExpressionError as error:
        message = str(error)
        assert "\n" not in message
        # A wrapped internal exception would mean a case the parser did not foresee.
        assert "could not be built" not in message, message
    else:
        assert isinstance(result, sympy.Expr)
        assert not result.has(*UNDEFINED)
        assert not result.has(sympy.I)
        assert result.free_symbols <= set(SYMBOLS.values())
    assert time.process_time() - start < TIME_LIMIT


@FUZZ
@given(st.text(max_size=400))
def test_arbitrary_text_obeys_the_contract(text):
    _check_contract(text)


@FUZZ
@given(st.lists(st.sampled_from(TOKENS), max_size=40).map("".join))
def test_token_soup_obeys_the_contract(text):
    _check_contract(text)


def _well_formed() -> st.SearchStrategy[str]:
    """Grammar-shaped expressions, most of them accepted, to reach the builder."""
    leaves = st.sampled_from(
        ["m", "c", "k1", "g", "l", "T", "q", "pi", "0", "1", "2", "0.5", "1e15", "1e-15", "7.25"]
    )

    def extend(children: st.SearchStrategy[str]) -> st.SearchStrategy[str]:
        binary = st.tuples(children, st.sampled_from(["+", "-", "*", "/"]), children).map(
            lambda parts: f"({parts[0]}{parts[1]}{parts[2]})"
        )
        unary = children.map(lambda inner: f"-{inner}")
        call = st.tuples(
            st.sampled_from(
                ["sqrt", "exp", "log", "sin", "cos", "tan", "atan", "sinh", "cosh", "tanh", "abs"]
            ),
            children,
        ).map(lambda parts: f"{parts[0]}({parts[1]})")
        power = st.tuples(
            children, st.sampled_from(["2", "3", "-1", "10", "0.5", "(1/3)", "-(3/2)", "11", "0"])
        ).map(lambda parts: f"({parts[0]})**{parts[1]}")
        return st.one_of(binary, unary, call, power)

    return st.recursive(leaves, extend, max_leaves=40)


@FUZZ
@given(_well_formed())
def test_well_formed_expressions_obey_the_contract(text):
    _check_contract(text)


@FUZZ
@given(st.text(max_size=100) | st.lists(st.sampled_from(TOKENS), max_size=10).map("".join))
def test_pole_text_gives_an_exact_number_or_an_error(text):
    start = time.process_time()
    try:
        pole = parse_pole(text)
    except ExpressionError:
        pass
    else:
        real, imaginary = pole.as_real_imag()
        assert real.is_Rational and imaginary.is_Rational
    assert time.process_time() - start < TIME_LIMIT


@FUZZ
@given(st.floats(allow_nan=True, allow_infinity=True))
def test_accepted_floats_round_trip_exactly(value):
    try:
        result = parse_number(value)
    except ExpressionError:
        # only the magnitude limits refuse a float: its repr has at most 17 digits
        assert not math.isfinite(value) or abs(value) > 1e15 or 0 < abs(value) < 1e-15
        return
    assert float(result) == value
    assert Fraction(int(result.p), int(result.q)) == Fraction(repr(value))


@FUZZ
@given(st.integers())
def test_integers_are_exact_or_refused(value):
    try:
        result = parse_number(value)
    except ExpressionError:
        assert abs(value) > 10**15
        return
    assert result == value
    assert result.is_Integer
