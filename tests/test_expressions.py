"""Tests of the safe expression parser, ``symbolic.input.expressions``.

External references used below (the parser's job is to read text the way the
Python language defines it, and to refuse everything else):

* [PyRef] Python Software Foundation, *The Python Language Reference*,
  release 3.11: 2.3 "Identifiers and keywords" (NFKC folding of identifiers),
  2.4.5 "Floating point literals", 2.4.7 "Imaginary literals", 6.5 "The power
  operator", 6.17 "Operator precedence".
* [Goldberg] D. Goldberg, "What Every Computer Scientist Should Know About
  Floating-Point Arithmetic", ACM Computing Surveys 23(1), 1991, section 1.1:
  0.1 has no exact binary representation.
* [C17] ISO/IEC 9899:2018, 5.2.4.2.2: DBL_DIG = 15 and DBL_DECIMAL_DIG = 17
  for IEEE 754 binary64 (a decimal of 15 digits survives a trip through a
  double; 17 digits write any double so that it reads back unchanged).
* [UTS39] Unicode Technical Standard #39 "Unicode Security Mechanisms",
  confusables data: Cyrillic U+0430 looks like Latin ``a`` (from memory).
* [Batchelder] N. Batchelder, "Eval really is dangerous", blog post, 2012: the
  ``().__class__.__bases__[0].__subclasses__()`` walk (from memory).

Parameter values used for numeric checks are invented demo values.
"""

from __future__ import annotations

import math
import time
from fractions import Fraction

import numpy as np
import pytest
import sympy

from symbolic.input import expressions as _expressions
from symbolic.input import syntax as _syntax
from symbolic.input.expressions import (
    ALLOWED_CONSTANTS,
    ALLOWED_FUNCTIONS,
    NAME_PATTERN,
    RESERVED_NAMES,
    check_name,
    parse_expression,
    parse_number,
    parse_pole,
)
from symbolic.runtime.errors import ExpressionError, GainsmithError

NAMES = ("m", "c", "k1", "k2", "g", "l", "f0", "a", "T", "R", "kf", "r", "x", "m_c", "J")
SYMBOLS = {name: sympy.Symbol(name, real=True, positive=True) for name in NAMES}
m, c, k1, k2, g, ell, f0, a, T, R, kf, r, x, m_c, J = (SYMBOLS[name] for name in NAMES)
# An operating-point angle: real, of either sign.
theta = SYMBOLS["theta"] = sympy.Symbol("theta", real=True)

# Invented demo values (a small cart on a spring with a motor), all positive.
SAMPLE = {
    m: 1.2,
    c: 0.8,
    k1: 35.0,
    k2: 12.5,
    g: 9.81,
    ell: 0.45,
    f0: 2.5,
    a: 3.0,
    T: 0.01,
    R: 4.7,
    kf: 0.35,
    r: 0.02,
    x: 0.7,
    m_c: 0.25,
    J: 0.003,
    theta: -0.2,
}
S = {str(symbol): value for symbol, value in SAMPLE.items()}

TIME_LIMIT = 0.5  # CPU seconds per hostile string (the brief's bound; common practice, no source)
WALL_LIMIT = 5.0  # wall-clock sanity bound on a busy machine (common practice, no source)


def _warm_up() -> None:
    """Let SymPy do its one-time lazy imports before anything is timed."""
    for text in (
        "abs((sqrt(2)+sqrt(3))**2-(5+2*sqrt(6)))",
        "-cos((1-theta)**0.5) + sin(m)*tan(c)/atan(g) + log(l)*exp(-T)",
        "sinh(m)*cosh(c)*tanh(g) + abs(theta) + pi**2",
    ):
        parse_expression(text, SYMBOLS)


_warm_up()


def _short_id(value: object) -> str:
    """A short test id (some parameters are 10 MB strings or 100 000-digit integers)."""
    if isinstance(value, int) and value.bit_length() > 1000:
        return f"int of {value.bit_length()} bits"
    if isinstance(value, str) and len(value) > 30:
        return f"{value[:20]!r}... ({len(value)} characters)"
    return repr(value)


def _evaluate(expr: sympy.Expr) -> float:
    return float(expr.subs(SAMPLE))


# ---------------------------------------------------------------------------
# Valid expressions give the expected SymPy object and the expected value.
# The reference value is computed independently with Python's math module.
# ---------------------------------------------------------------------------
VALID = [
    ("-c/m", -c / m, lambda: -S["c"] / S["m"]),
    ("kf/(m*r)", kf / (m * r), lambda: S["kf"] / (S["m"] * S["r"])),
    ("sqrt(g/l)", sympy.sqrt(g / ell), lambda: math.sqrt(S["g"] / S["l"])),
    ("2*pi*f0", 2 * sympy.pi * f0, lambda: 2 * math.pi * S["f0"]),
    ("-(k1+k2)/m", -(k1 + k2) / m, lambda: -(S["k1"] + S["k2"]) / S["m"]),
    ("exp(-a*T)", sympy.exp(-a * T), lambda: math.exp(-S["a"] * S["T"])),
    ("1e-3*R", sympy.Rational(1, 1000) * R, lambda: 1e-3 * S["R"]),
    ("m_c*g*l/J", m_c * g * ell / J, lambda: S["m_c"] * S["g"] * S["l"] / S["J"]),
    ("log(R)", sympy.log(R), lambda: math.log(S["R"])),
    ("sin(x) + cos(x)", sympy.sin(x) + sympy.cos(x), lambda: math.sin(0.7) + math.cos(0.7)),
    ("tan(x)", sympy.tan(x), lambda: math.tan(0.7)),
    ("atan(x)", sympy.atan(x), lambda: math.atan(0.7)),
    ("sinh(x)*cosh(x)", sympy.sinh(x) * sympy.cosh(x), lambda: math.sinh(0.7) * math.cosh(0.7)),
    ("tanh(a*x)", sympy.tanh(a * x), lambda: math.tanh(3.0 * 0.7)),
    ("abs(x - a)", sympy.Abs(x - a), lambda: abs(0.7 - 3.0)),
    ("(1 - exp(-a*T))/a", (1 - sympy.exp(-a * T)) / a, lambda: (1 - math.exp(-0.03)) / 3.0),
    ("m**2", m**2, lambda: 1.2**2),
    ("m**-2", m**-2, lambda: 1.2**-2),
    ("m**0.5", sympy.sqrt(m), lambda: 1.2**0.5),
    ("m**(3/2)", m ** sympy.Rational(3, 2), lambda: 1.2**1.5),
    ("m**(-1/3)", m ** sympy.Rational(-1, 3), lambda: 1.2 ** (-1 / 3)),
    ("+m", m, lambda: 1.2),
    ("- - m", m, lambda: 1.2),
    ("  c / m  ", c / m, lambda: 0.8 / 1.2),
    ("0", sympy.Integer(0), lambda: 0.0),
    ("0.0 * m", sympy.Integer(0), lambda: 0.0),
    ("pi", sympy.pi, lambda: math.pi),
    ("cos(theta)*g/l", sympy.cos(theta) * g / ell, lambda: math.cos(-0.2) * 9.81 / 0.45),
    (
        "cosh(T*sqrt(g/l))",
        sympy.cosh(T * sympy.sqrt(g / ell)),
        lambda: math.cosh(0.01 * (9.81 / 0.45) ** 0.5),
    ),
    (
        "sinh(T*sqrt(g/l))/sqrt(g/l)",
        sympy.sinh(T * sympy.sqrt(g / ell)) / sympy.sqrt(g / ell),
        lambda: math.sinh(0.01 * (9.81 / 0.45) ** 0.5) / (9.81 / 0.45) ** 0.5,
    ),
    (
        "exp(-a*T)*cos(T*sqrt(k1/m - a**2))",
        sympy.exp(-a * T) * sympy.cos(T * sympy.sqrt(k1 / m - a**2)),
        lambda: math.exp(-0.03) * math.cos(0.01 * math.sqrt(35.0 / 1.2 - 9.0)),
    ),
    ("abs(theta)", sympy.Abs(theta), lambda: 0.2),
    ("tanh(theta/a)", sympy.tanh(theta / a), lambda: math.tanh(-0.2 / 3.0)),
    ("(m + c)**10", (m + c) ** 10, lambda: (1.2 + 0.8) ** 10),
]


@pytest.mark.parametrize(("text", "expected", "reference"), VALID, ids=[v[0] for v in VALID])
def test_valid_expression_gives_the_expected_object_and_value(text, expected, reference):
    result = parse_expression(text, SYMBOLS)
    assert isinstance(result, sympy.Expr)
    assert result.free_symbols <= set(SYMBOLS.values())  # the caller's objects
    assert sympy.simplify(result - expected) == 0
    assert _evaluate(result) == pytest.approx(reference(), rel=1e-12, abs=1e-15)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # [PyRef] 6.5: the power operator binds more tightly than unary minus on its left.
        ("-x**2", -(x**2)),
        # [PyRef] 6.5: ... and less tightly than unary minus on its right.
        ("x**-1", 1 / x),
        # [PyRef] 6.17: * and / have equal precedence and group left to right.
        ("a/T/m", (a / T) / m),
        ("a/T*m", (a / T) * m),
        # [PyRef] 6.17: + and - group left to right.
        ("a-T-m", (a - T) - m),
        # [PyRef] 6.17: * binds more tightly than +.
        ("a+T*m", a + (T * m)),
        # [PyRef] 6.5: a chain of powers groups right to left; here the exponent is a
        # parenthesised number, the only form allowed.
        ("(x**2)**3", x**6),
    ],
)
def test_precedence_and_grouping_follow_the_python_reference(text, expected):
    assert parse_expression(text, SYMBOLS) == expected


def test_declared_symbols_are_used_as_given():
    # The caller's Symbol objects (with their assumptions) appear in the result.
    assert parse_expression("m", SYMBOLS) is SYMBOLS["m"]
    # Built as written; the assumptions are there for later simplification.
    root = parse_expression("sqrt(m**2)", SYMBOLS)
    assert root.free_symbols == {m}
    assert sympy.simplify(root) == m  # needs m positive
    plain = {"y": sympy.Symbol("y", real=True)}
    assert sympy.simplify(parse_expression("sqrt(y**2)", plain)) == sympy.Abs(plain["y"])
    assert parse_expression("2*m + c", SYMBOLS).free_symbols == {m, c}
    # A root of a quantity of unknown sign is accepted as written (documented).
    assert parse_expression("sqrt(theta)", SYMBOLS) == sympy.sqrt(theta)


def test_expression_is_built_as_written():
    # Documented in parse_expression: no simplification that needs a parameter's sign,
    # functions of numbers other than rationals and rational multiples of pi kept.
    assert parse_expression("abs(m)", SYMBOLS) == sympy.Abs(m, evaluate=False)
    assert parse_expression("sqrt(g/l)", SYMBOLS) == sympy.Pow(
        g / ell, sympy.Rational(1, 2), evaluate=False
    )
    assert parse_expression("sin(pi/6)", SYMBOLS) == sympy.Rational(1, 2)
    assert parse_expression("cos(0)", SYMBOLS) == 1
    assert parse_expression("exp(1)", SYMBOLS) == sympy.E
    assert parse_expression("atan(1)", SYMBOLS) == sympy.pi / 4
    kept = parse_expression("abs(sqrt(2) - 2)", SYMBOLS)
    assert isinstance(kept, sympy.Abs)
    assert float(kept) == pytest.approx(2 - math.sqrt(2), rel=1e-15)


def test_two_declared_symbols_with_one_name_stay_distinct():
    first = sympy.Symbol("w", real=True)
    second = sympy.Symbol("w", positive=True)
    result = parse_expression("p - q", {"p": first, "q": second})
    assert result.free_symbols == {first, second}
    assert result.subs({first: 3, second: 1}) == 2


def test_non_symbol_in_the_mapping_is_a_programming_error():
    with pytest.raises(TypeError, match="must be a sympy.Symbol"):
        parse_expression("q", {"q": "not a symbol"})


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # [Goldberg] 1.1: 0.1 is not a binary float; the literal must stay exactly 1/10.
        ("0.1", sympy.Rational(1, 10)),
        ("1e-3", sympy.Rational(1, 1000)),
        ("1.5e1", sympy.Integer(15)),
        ("2.50", sympy.Rational(5, 2)),
        (".5", sympy.Rational(1, 2)),
        ("5.", sympy.Integer(5)),
        ("1E2", sympy.Integer(100)),
        ("0.000123", sympy.Rational(123, 1000000)),
        ("1e15", sympy.Integer(10) ** 15),
        ("1e-15", sympy.Rational(1, 10**15)),
        ("999999999999999", sympy.Integer(999999999999999)),
        ("0.333333333333333", sympy.Rational(333333333333333, 10**15)),
        ("0.30000000000000004", sympy.Rational(30000000000000004, 10**17)),
        ("1.2345678901234567", sympy.Rational(12345678901234567, 10**16)),
        ("99999999999999.999", sympy.Rational(99999999999999999, 1000)),
    ],
)
def test_decimal_literals_are_converted_exactly(text, expected):
    # [PyRef] 2.4.5 gives the literal syntax; the value is the decimal one, not the double.
    result = parse_expression(text, SYMBOLS)
    assert result == expected
    assert isinstance(result, sympy.Rational)
    assert Fraction(int(result.p), int(result.q)) == Fraction(text)


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("123456789012345678", "significant digits"),  # [C17] DBL_DECIMAL_DIG = 17
        ("0.123456789012345678", "significant digits"),
        ("1.00000000000000001", "significant digits"),
        ("1e16", "too large"),
        ("1.1e15", "too large"),
        ("1e-16", "too small"),
        ("1e400", "too large"),
        ("1e-400", "too small"),
        ("0x10", "plain decimal"),
        ("0o17", "plain decimal"),
        ("0b101", "plain decimal"),
        ("1_000", "plain decimal"),
        ("3j", "imaginary"),
        ("1e999999999999999999999999999999", "too large"),
    ],
)
def test_bad_literals_are_rejected(text, fragment):
    with pytest.raises(ExpressionError, match=fragment):
        parse_expression(text, SYMBOLS)


# ---------------------------------------------------------------------------
# Every refused construct gets a message that names it.
# ---------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("m.__class__", "attribute access is not allowed"),
        ("m.real()", "attribute access is not allowed"),
        ("m[0]", "subscripts"),
        ("foo(m)", "function 'foo' is not allowed; allowed: sqrt, exp, log"),
        ("(m)(1)", "function 'm' is not allowed"),
        ("(lambda: 1)()", "only the named functions"),
        ("lambda: 1", "lambda expressions are not allowed"),
        ("[m for m in c]", "comprehensions are not allowed"),
        ("(m for m in c)", "generator expressions are not allowed"),
        ("f'{m}'", "f-strings are not allowed"),
        ("(y := 2)", r"assignment expressions \(:=\) are not allowed"),
        ("sqrt(*m)", "starred arguments are not allowed"),
        ("sqrt(x=m)", "keyword arguments are not allowed"),
        ("sqrt(m, c)", "takes exactly one argument, got 2"),
        ("sqrt()", "takes exactly one argument, got 0"),
        ("m < c", "comparisons are not allowed"),
        ("m and c", "boolean operators"),
        ("not m", "boolean operators"),
        ("m if c else 1", "conditional expressions"),
        ("'m'", "strings are not allowed"),
        ("b'm'", "bytes are not allowed"),
        ("m, c", "tuples are not allowed"),
        ("[m]", "lists are not allowed"),
        ("{m: c}", "dictionaries are not allowed"),
        ("{m}", "sets are not allowed"),
        ("m // c", "operator '//' is not allowed"),
        ("m % c", "operator '%' is not allowed"),
        ("m ^ 2", r"use \*\* for powers"),
        ("~m", "operator '~' is not allowed"),
        ("True", "the constant True is not allowed"),
        ("None", "the constant None is not allowed"),
        ("...", "the constant Ellipsis is not allowed"),
        ("mm", "undeclared name 'mm'; did you mean m"),
        ("kf2", "did you mean kf"),
        ("q", "undeclared name 'q'; declared parameters:"),
        ("sqrt", r"'sqrt' is a function; call it as sqrt\(...\)"),
        ("s*m", "the name 's' is reserved"),
        ("z", "the name 'z' is reserved"),
        ("e", "Euler's number"),
        ("I", "the name 'I' is reserved"),
        ("x**c", "an exponent must be a number"),
        ("2**1000", "too large"),
        ("m**(1/0)", "division by zero"),
        ("m**0.3333", "denominator at most 10"),
        ("m**(1.5/2)", "ratio must be of two integers"),
        ("m/0", "division by zero"),
        ("m/(c-c)", "division by zero"),
        ("0**-1", "division by zero"),
        ("log(0)", "undefined"),
        ("tan(pi/2)", "undefined"),
        ("sqrt(-m)", "not real"),
        ("log(-1)", "not real"),
        ("(-8)**(1/3)", "not real"),
        ("exp(exp(m))", "may not be applied to an argument that contains exp"),
        ("sin(cosh(m))", "may not be applied"),
        ("exp(c*log(m))", "'exp' may not be applied to an argument that contains log"),
        ("exp(1e15*log(2))", "contains log"),
        ("tanh(sin(m))", "'tanh' may not be applied to an argument that contains a function"),
        ("cosh(abs(theta))", "contains a function call"),
        ("tanh(sqrt(theta))", "the argument of 'tanh' must be evidently real"),
        ("abs(sqrt(theta))", "the argument of 'abs' must be evidently real"),
        ("cosh(log(theta))", "contains a function call"),
        ("(m+c+g+l+k1+k2)**10", "would expand to more than 300 terms"),
        ("(m+c)**10*(g+l)**10*(a+T)**2", "would expand to more than 300 terms"),
        ("(1e15*m)**3", "exceeds 1e30"),
        ("1e15*1e15*10", "exceeds 1e30"),
        ("1e-15/1e15/10", "below 1e-30"),
        ("((m**10)**10)**2", "degree exceeds 30"),
        ("((pi**10)**10)**10", "degree exceeds 30"),
        ("m**10*c**10*g**10*l", "degree exceeds 30"),
        ("", "empty"),
        ("   ", "empty"),
        ("m +", "not valid syntax"),
    ],
)
def test_refused_constructs_are_named(text, fragment):
    with pytest.raises(ExpressionError, match=fragment):
        parse_expression(text, SYMBOLS)


def test_no_parameters_declared_is_said():
    with pytest.raises(ExpressionError, match="no parameters are declared"):
        parse_expression("m", {})


def test_a_hidden_zero_divisor_is_not_detected_as_documented():
    # sin(1)**2 + cos(1)**2 - 1 is zero, but deciding that needs numerical evaluation,
    # which the parser never does; the docstring says so.
    result = parse_expression("m/(sin(1)**2 + cos(1)**2 - 1)", SYMBOLS)
    assert not result.has(sympy.zoo, sympy.nan)


# ---------------------------------------------------------------------------
# Limits: the boundary values pass, one past them fails.
# ---------------------------------------------------------------------------
def test_length_limit():
    text = "m+" * 999 + "m"  # 1999 characters, a flat chain of 1000 terms
    with pytest.raises(ExpressionError, match="more than 500 terms"):
        parse_expression(text, SYMBOLS)
    assert len(text) < _syntax.MAX_TEXT_LENGTH
    longest = " " * (_syntax.MAX_TEXT_LENGTH - 1) + "m"
    assert parse_expression(longest, SYMBOLS) == m
    with pytest.raises(ExpressionError, match="too long"):
        parse_expression(" " + longest, SYMBOLS)


def test_bracket_depth_limit():
    depth = _syntax.MAX_DEPTH
    assert parse_expression("(" * (depth - 1) + "m" + ")" * (depth - 1), SYMBOLS) == m
    with pytest.raises(ExpressionError, match="nests"):
        parse_expression("(" * (depth + 1) + "m" + ")" * (depth + 1), SYMBOLS)


def test_unary_depth_limit():
    assert parse_expression("-" * 40 + "m", SYMBOLS) == m
    with pytest.raises(ExpressionError, match="nests more than 50 deep"):
        parse_expression("-" * 60 + "m", SYMBOLS)


def test_long_flat_sums_and_products_are_one_level():
    assert parse_expression("+".join(["m"] * 200), SYMBOLS) == 200 * m
    assert parse_expression("*".join(["m"] * 30), SYMBOLS) == m**30
    assert parse_expression("/".join(["m"] * 3), SYMBOLS) == 1 / m


def test_node_limit():
    # Each "m*c" term is three expression nodes.
    ok = "+".join(["m*c"] * 160)  # 160*3 + 159 = 639 > 500
    with pytest.raises(ExpressionError, match="more than 500 terms"):
        parse_expression(ok, SYMBOLS)
    assert parse_expression("+".join(["m*c"] * 120), SYMBOLS) == 120 * m * c


def test_function_call_limit():
    assert parse_expression("+".join(["sqrt(m)"] * 20), SYMBOLS) == 20 * sympy.sqrt(m)
    with pytest.raises(ExpressionError, match="more than 20 function calls"):
        parse_expression("+".join(["sqrt(m)"] * 21), SYMBOLS)


def test_exponent_limit():
    assert parse_expression("m**10", SYMBOLS) == m**10
    assert parse_expression("m**-10", SYMBOLS) == m**-10
    with pytest.raises(ExpressionError, match="too large"):
        parse_expression("m**11", SYMBOLS)
    with pytest.raises(ExpressionError, match="too large"):
        parse_expression("m**(21/2)", SYMBOLS)


def test_typical_entries_are_fast():
    # The brief's bound: well under 0.1 s each; CPU time, after SymPy's lazy imports.
    typical = [text for text, _, _ in VALID] + [
        "-m**2*l**2*g/(J*(k1 + m) + k1*m*l**2)",
        "exp(-a*T)*cos(T*sqrt(k1/m - a**2)) + sin(theta)*g/l",
    ]
    for text in typical:
        parse_expression(text, SYMBOLS)
    for text in typical:
        start = time.process_time()
        parse_expression(text, SYMBOLS)
        assert time.process_time() - start < 0.1, text


def test_sign_questions_on_polynomials_are_not_asked():
    # With the functions evaluated, SymPy isolated the real roots of these polynomials
    # to decide their sign: 0.2-0.5 s for degree 8 and 22 s for degree 30 here.
    polynomial = "5*m**8 - 3*m**7 - 0.25*m**6 + m**5 - 3*m**4 - 0.25*m**3 + 5*m**2 + 2*m - 1.7"
    high = "(m**10)**3 + 3*m**10*m**9 - 5*m**7 + m - 0.6"
    for text in (
        f"abs({polynomial})",
        f"log({polynomial})",
        f"sin({polynomial})",
        f"sqrt(c*({polynomial}))",
        f"2*sqrt(c*({polynomial}))",
        f"abs({high}) + log({high}) + cos({high})",
    ):
        start = time.process_time()
        parse_expression(text, SYMBOLS)
        assert time.process_time() - start < TIME_LIMIT, text


# ---------------------------------------------------------------------------
# The hostile corpus.  Each string must raise ExpressionError, fast, and must
# not create a file.  Payloads that would create CANARY in the working folder
# (a fresh tmp_path) if they ran are marked.
# ---------------------------------------------------------------------------
HOSTILE = [
    # Object-graph walks ([Batchelder], from memory).
    "().__class__.__bases__[0].__subclasses__()",
    "().__class__.__base__.__subclasses__()",
    "m.__class__",
    "m.__class__.__mro__",
    "sqrt.__globals__",
    "sqrt.__globals__['__builtins__']",
    "exp.__init__.__globals__",
    "pi.__reduce__()",
    "m.subs",
    "x.real",
    "m._assumptions",
    "getattr(m, '__class__')",
    "type(m)",
    "vars()",
    "globals()",
    "locals()",
    "dir()",
    "help()",
    "breakpoint()",
    "input()",
    "compile('1', '', 'eval')",
    # Payloads that would create a canary if they ran.
    "__import__('os').system('touch CANARY')",
    "__import__('subprocess').call(['touch', 'CANARY'])",
    "open('CANARY', 'w')",
    "open('CANARY', 'w').write('x')",
    "exec(\"open('CANARY','w')\")",
    "eval(\"open('CANARY','w')\")",
    "sqrt(open('CANARY','w'))",
    "[open('CANARY','w') for _ in (1,)]",
    "(lambda: open('CANARY','w'))()",
    "(y := open('CANARY','w'))",
    "f\"{open('CANARY','w')}\"",
    "m if open('CANARY','w') else c",
    "sqrt(*[open('CANARY','w')])",
    "sqrt(x=open('CANARY','w'))",
    "m.__class__.__init__.__globals__['os'].system('touch CANARY')",
    "open('/etc/passwd').read()",
    # Other constructs.
    "lambda: 0",
    "[i for i in range(10)]",
    "{i for i in range(10)}",
    "{i: i for i in range(10)}",
    "(i for i in range(10))",
    "f'{m}'",
    "(q := 1)",
    "sqrt(*m)",
    "sqrt(**m)",
    "sqrt(m, base=2)",
    "m[0]",
    "m[0:1]",
    "'m'",
    "b'm'",
    "m < c",
    "m == c",
    "m and c",
    "m or c",
    "not m",
    "m if c else 1",
    "(m, c)",
    "[m]",
    "{m}",
    "{'a': m}",
    "(m)(1)",
    "1(2)",
    "await m",
    "(yield m)",
    "factorial(10**9)",
    "gamma(m)",
    "Integer(5)",
    "sympify('m')",
    "S('m')",
    # Resource exhaustion.
    "9**9**9",
    "2**2**2**2",
    "10**1000",
    "2**1000",
    "(2**10)**10",
    "m**c",
    "m**(1/1000)",
    "1e400",
    "1e-400",
    "1" * 1000,
    "9" * 16,
    "0x" + "f" * 500,
    "(" * 10_000 + "1" + ")" * 10_000,
    "-" * 1500 + "1",
    "m" + "+m" * 999,
    "x" * 10_000_000,
    "exp(exp(exp(1e15)))",
    "sin(exp(1e15))",
    "((((((m**10)**10)**10)**10)**10)**10)",
    "*".join(["1e15"] * 100),
    "1/" * 300 + "1",
    # Non-ASCII lookalikes ([PyRef] 2.3 folds identifiers to NFKC; [UTS39]).
    "\U0001d458",  # MATHEMATICAL ITALIC SMALL K, folds to "k"
    "\U0001d45a",  # MATHEMATICAL ITALIC SMALL M, folds to "m"
    "\u0430",  # CYRILLIC SMALL LETTER A
    "m\u00b2",  # SUPERSCRIPT TWO
    "\uff4d",  # FULLWIDTH LATIN SMALL LETTER M, folds to "m"
    "m\u200b",  # ZERO WIDTH SPACE
    "\u202em",  # RIGHT-TO-LEFT OVERRIDE
    "\u0661",  # ARABIC-INDIC DIGIT ONE
    # Control characters.
    "m\x00",
    "m\n+c",
    "m\t+ c",
    "m\r",
    "\x1b[2Jm",
    "m\x7f",
    # Special values and reserved names.
    "nan",
    "inf",
    "-inf",
    "oo",
    "zoo",
    "E",
    "I",
    "s",
    "z",
    "s*m",
    "1/(z-1)",
    "undeclared_parameter",
    "True",
    "None",
    "...",
    "3j",
    "m + 1j",
    "",
    "m +",
    "m)",
    "(m",
    "m c",
    "m;c",
    "import os",
    "m\\\nc",
]


@pytest.mark.parametrize("text", HOSTILE, ids=_short_id)
def test_hostile_text_is_refused_quickly_and_runs_nothing(text, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    start, wall = time.process_time(), time.perf_counter()
    with pytest.raises(ExpressionError) as caught:
        parse_expression(text, SYMBOLS)
    elapsed = time.process_time() - start
    assert elapsed < TIME_LIMIT, f"took {elapsed:.3f} s of CPU time"
    assert time.perf_counter() - wall < WALL_LIMIT
    assert not (tmp_path / "CANARY").exists()
    assert list(tmp_path.iterdir()) == []
    message = str(caught.value)
    assert "\n" not in message
    assert len(message) < 300


def test_hostile_corpus_is_large_enough():
    assert len(HOSTILE) >= 60
    assert sum("CANARY" in text for text in HOSTILE) >= 10


def test_errors_belong_to_the_package_tree():
    with pytest.raises(GainsmithError):
        parse_expression("m.__class__", SYMBOLS)
    with pytest.raises(ValueError):
        parse_expression("m.__class__", SYMBOLS)


def test_message_quotes_at_most_forty_characters():
    text = "m + " + "c" * 500 + ".x"
    with pytest.raises(ExpressionError) as caught:
        parse_expression(text, SYMBOLS)
    assert "c" * 41 not in str(caught.value)


def test_non_string_inputs():
    assert parse_expression(3, SYMBOLS) == 3
    assert parse_expression(0.25, SYMBOLS) == sympy.Rational(1, 4)
    for bad in (True, None, [1], {"a": 1}, b"m", 1 + 2j, float("nan")):
        with pytest.raises(ExpressionError):
            parse_expression(bad, SYMBOLS)


# ---------------------------------------------------------------------------
# parse_number
# ---------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (0.1, sympy.Rational(1, 10)),  # [Goldberg] 1.1, via repr(0.1) == "0.1"
        (2.5, sympy.Rational(5, 2)),
        (-9.81, sympy.Rational(-981, 100)),
        (1e-05, sympy.Rational(1, 100000)),
        (1e15, sympy.Integer(10) ** 15),
        (-0.0, sympy.Integer(0)),
        (0, sympy.Integer(0)),
        (42, sympy.Integer(42)),
        (-(10**15), -(sympy.Integer(10) ** 15)),
        (999_999_999_999_999, sympy.Integer(999_999_999_999_999)),
        ("0.1", sympy.Rational(1, 10)),
        ("  -2.5 ", sympy.Rational(-5, 2)),
        ("+3", sympy.Integer(3)),
        ("1e-3", sympy.Rational(1, 1000)),
        ("-1.5e1", sympy.Integer(-15)),
    ],
)
def test_parse_number_is_exact(value, expected):
    result = parse_number(value)
    assert result == expected
    assert isinstance(result, sympy.Rational)


def test_parse_number_round_trips_floats_of_up_to_17_digits():
    # [C17] DBL_DIG = 15: these decimals survive the double and come back exact;
    # DBL_DECIMAL_DIG = 17: so do the 16- and 17-digit reprs (0.1 + 0.2, 1/3).
    for value in (
        9.80665,
        0.45,
        6.02214076e-1,
        1.602176634e-15,
        299792458.0,
        123456789.012345,
        0.1 + 0.2,
        1 / 3,
        2 / 3 * 1e-3,
    ):
        result = parse_number(value)
        assert float(result) == value
        assert Fraction(int(result.p), int(result.q)) == Fraction(repr(value))


def _significant_digits(text: str) -> int:
    mantissa = text.lstrip("-").partition("e")[0].replace(".", "")
    return len(mantissa.strip("0"))


def test_repr_of_random_doubles_reads_back_as_the_same_double():
    # [C17] DBL_DECIMAL_DIG = 17: repr needs up to 17 digits and every one of them is
    # accepted, as a string and as a TOML float; the value is the decimal text, exactly.
    rng = np.random.default_rng(1991)
    scaled = rng.uniform(1, 10, 2000) * 10.0 ** rng.integers(-15, 15, 2000)
    scaled *= rng.choice([-1.0, 1.0], 2000)
    bits = rng.integers(0, 2**63, 20000, dtype=np.uint64).view(np.float64)
    bits = bits[(np.abs(bits) >= 1e-15) & (np.abs(bits) <= 1e15)][:1000]  # the magnitude limits
    values = [float(x) for x in np.concatenate([scaled, bits])]
    assert len(values) >= 2500
    lengths = set()
    for value in values:
        text = repr(value)
        lengths.add(_significant_digits(text))
        for given in (text, value):
            result = parse_number(given)
            assert float(result) == value, text
            assert Fraction(int(result.p), int(result.q)) == Fraction(text)
    assert {16, 17} <= lengths  # the digits refused before are exercised


@pytest.mark.parametrize(
    ("value", "fragment"),
    [
        (True, "boolean"),
        (False, "boolean"),
        (float("nan"), "finite"),
        (float("inf"), "finite"),
        (float("-inf"), "finite"),
        (1e16, "too large"),
        (-1e16, "too large"),
        (1e-16, "too small"),
        (10**15 + 1, "too large"),
        (10**16, "too large"),
        (10**100_000, "too large"),
        (1234567890123456, "too large"),
        ("0.300000000000000044", "significant digits"),  # 18 digits, [C17] 17 suffice
        ("abc", "plain decimal"),
        ("nan", "plain decimal"),
        ("inf", "plain decimal"),
        ("1/2", "plain decimal"),
        ("0x10", "plain decimal"),
        ("1_000", "plain decimal"),
        ("--1", "plain decimal"),
        ("- 1", "plain decimal"),
        ("", "empty"),
        ("\u0661", "non-ASCII"),
        ("1\x00", "control character"),
        ("1" * 3000, "too long"),
        (None, "expected a number"),
        ([1], "expected a number"),
        (1 + 2j, "expected a number"),
        (b"1", "expected a number"),
    ],
    ids=_short_id,
)
def test_parse_number_rejects(value, fragment):
    with pytest.raises(ExpressionError, match=fragment):
        parse_number(value)


# ---------------------------------------------------------------------------
# parse_pole
# ---------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("-4+3j", -4 + 3 * sympy.I),
        ("-4-3j", -4 - 3 * sympy.I),
        ("-2", sympy.Integer(-2)),
        ("-1.5e1 - 2.5j", -15 - sympy.Rational(5, 2) * sympy.I),
        ("-3j", -3 * sympy.I),
        ("+2j", 2 * sympy.I),
        ("-0.1+0.2j", sympy.Rational(-1, 10) + sympy.Rational(1, 5) * sympy.I),
        ("  -4 + 3J ", -4 + 3 * sympy.I),  # [PyRef] 2.4.7: j or J
        ("5", sympy.Integer(5)),  # stability is the caller's check
        (-2, sympy.Integer(-2)),
        (-0.5, sympy.Rational(-1, 2)),
    ],
)
def test_parse_pole_is_exact(text, expected):
    result = parse_pole(text)
    assert result == expected
    real, imaginary = result.as_real_imag()
    assert real.is_Rational and imaginary.is_Rational


@pytest.mark.parametrize(
    "text",
    [
        "abc",
        "-4+3k",
        "1j*2j",
        "3j+4",
        "-4+3i",
        "j",
        "-4 + -3j",
        "-4+3j+1",
        "--4",
        "(-4+3j)*2",
        "-(4+3j)",
        "-4+3*j",
        "1e400j",
        "-4+1e-16j",
        "12345678901234567j",
        "0x10",
        "nan",
        "inf",
        "",
        "-4+3j\x00",
        "\u2212" + "4",  # MINUS SIGN
        "sqrt(2)",
        "__import__('os').system('touch CANARY')",
        "(" * 10_000 + "1" + ")" * 10_000,
        "1" * 10_000_000,
        True,
        None,
        [1, 2],
        1 + 2j,
        float("inf"),
    ],
    ids=_short_id,
)
def test_parse_pole_rejects(text, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    start, wall = time.process_time(), time.perf_counter()
    with pytest.raises(ExpressionError):
        parse_pole(text)
    assert time.process_time() - start < TIME_LIMIT
    assert time.perf_counter() - wall < WALL_LIMIT
    assert list(tmp_path.iterdir()) == []


# ---------------------------------------------------------------------------
# check_name and the published tables
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("name", ["m", "m_c", "k1", "J", "omega_n", "Kt", "R_a", "x" * 64, "i"])
def test_check_name_accepts(name):
    check_name(name)
    assert NAME_PATTERN.match(name)


@pytest.mark.parametrize(
    ("name", "fragment"),
    [
        ("_x", "plain identifier"),
        ("1a", "plain identifier"),
        ("a-b", "plain identifier"),
        ("a b", "plain identifier"),
        ("", "plain identifier"),
        ("x\n", "plain identifier"),
        ("\U0001d458", "plain identifier"),  # [PyRef] 2.3: would fold to "k"
        ("\u0430", "plain identifier"),  # [UTS39]: looks like "a"
        ("\\input", "plain identifier"),
        ("k__2", "double underscore"),
        ("x" * 65, "too long"),
        ("lambda", "Python keyword"),
        ("None", "Python keyword"),
        ("sqrt", "function"),
        ("abs", "function"),
        ("pi", "constant"),
        ("s", "Laplace"),
        ("z", "z-transform"),
        ("I", "imaginary unit"),
        ("E", "Euler"),
        ("e", "Euler"),
        ("nan", "not-a-number"),
        ("inf", "infinity"),
        ("oo", "infinity"),
        (3, "must be a string"),
        (None, "must be a string"),
    ],
)
def test_check_name_rejects(name, fragment):
    with pytest.raises(ExpressionError, match=fragment):
        check_name(name)


def test_name_pattern_is_fully_anchored():
    assert NAME_PATTERN.match("abc\n") is None
    assert NAME_PATTERN.search("1abc") is None


def test_allowed_tables_are_the_documented_ones_and_read_only():
    assert set(ALLOWED_FUNCTIONS) == {
        "sqrt",
        "exp",
        "log",
        "sin",
        "cos",
        "tan",
        "atan",
        "sinh",
        "cosh",
        "tanh",
        "abs",
    }
    assert ALLOWED_FUNCTIONS["abs"] is sympy.Abs
    assert dict(ALLOWED_CONSTANTS) == {"pi": sympy.pi}
    with pytest.raises(TypeError):
        ALLOWED_FUNCTIONS["open"] = open  # type: ignore[index]
    with pytest.raises(TypeError):
        ALLOWED_CONSTANTS["e"] = sympy.E  # type: ignore[index]
    assert {"s", "z", "I", "E", "pi", "sqrt", "lambda"} <= RESERVED_NAMES


def test_every_reserved_name_is_refused_by_check_name_and_in_expressions():
    for name in sorted(RESERVED_NAMES):
        with pytest.raises(ExpressionError):
            check_name(name)
        if name not in ALLOWED_CONSTANTS:
            # Even if a careless caller declared it, it cannot resolve to a parameter.
            with pytest.raises(ExpressionError):
                parse_expression(name, {name: sympy.Symbol("q")})


def test_public_names():
    assert set(_expressions.__all__) == {
        "ALLOWED_CONSTANTS",
        "ALLOWED_FUNCTIONS",
        "NAME_PATTERN",
        "RESERVED_NAMES",
        "check_name",
        "parse_expression",
        "parse_number",
        "parse_pole",
    }
