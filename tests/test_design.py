"""The design-file loader: every bad input is one clear error; the accepted shorthands work.

Each rejected file must raise :class:`~symbolic.DesignFileError` (or its
subclasses :class:`~symbolic.SpecificationError`, :class:`~symbolic.StructureError`)
whose message names the file, the dotted key and the problem.  These are
properties of gainsmith's own file format, so no published source applies;
the one engineering fact used (a pole on or right of the imaginary axis gives
an unstable or undamped loop) is textbook material, e.g. N. S. Nise,
*Control Systems Engineering*, 7th ed., Wiley, 2015, Sec. 6.1 (stability
from pole locations; section from memory).

The plant below is an invented demo: a syringe-pump plunger (moving mass
``m``, viscous friction ``c``, drive force constant ``kf``).
"""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

import pytest
import sympy as sp

import symbolic
from symbolic import (
    DesignFileError,
    SpecificationError,
    StructureError,
    derive,
    load_design,
    parse_design,
)

BASE = textwrap.dedent(
    """\
    title = "Syringe pump plunger position loop"

    [parameters.m]
    value = 0.4
    unit = "kg"

    [parameters.c]
    value = 1.5
    unit = "N s/m"

    [parameters.kf]
    value = 0.8
    unit = "N/V"
    range = [0.7, 0.9]

    [plant]
    A = [[0, 1], [0, "-c/m"]]
    B = [[0], ["kf/m"]]
    C = [[1, 0]]
    outputs = ["pos"]

    [controller]
    poles = ["-4+3j", "-4-3j"]
    """
)

POLES_LINE = 'poles = ["-4+3j", "-4-3j"]'


def sub(old: str, new: str, text: str = BASE) -> str:
    """``text`` with ``old`` replaced exactly once (guards the table against typos)."""
    assert text.count(old) == 1, f"{old!r} must occur exactly once"
    return text.replace(old, new)


def add(extra: str, text: str = BASE) -> str:
    """``text`` with more TOML appended."""
    return text + textwrap.dedent(extra)


def specs(lines: str) -> str:
    """BASE with the controller poles replaced by specification lines."""
    return sub(POLES_LINE, textwrap.dedent(lines))


def case(id_, text, key, problem, cls=DesignFileError, marks=()):
    return pytest.param(text, key, problem, cls, id=id_, marks=marks)


def check_error(exc: DesignFileError, path: Path, key: str | None, problem: str, cls) -> None:
    """The error has the expected type, names the file and key, and states the problem."""
    assert type(exc) is cls, f"{type(exc).__name__}: {exc}"
    message = str(exc)
    assert exc.path == str(path)
    assert message.startswith(f"{path}: ")
    assert exc.key == key
    if key is not None:
        assert message.startswith(f"{path}: {key}: "), message
    assert re.search(problem, exc.problem), f"{problem!r} not in {exc.problem!r}"
    assert "\n" not in message


def test_the_base_design_is_valid():
    design = parse_design(BASE, "base.toml")
    assert design.plant.order == 2
    assert derive(design, budget=0).passed


# --------------------------------------------------------------------------
# Files that are not TOML at all
# --------------------------------------------------------------------------
def test_malformed_toml_names_file_and_position(write_design):
    path = write_design(sub("[plant]", "[plant"))
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    check_error(info.value, path, None, r"malformed TOML: .*line \d+", DesignFileError)


def test_non_utf8_bytes_are_rejected(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes(BASE.encode() + b'author = "J\xfcrgen"\n')
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    check_error(info.value, path, None, r"not UTF-8 text \(byte \d+\)", DesignFileError)


def test_missing_file(tmp_path):
    path = tmp_path / "absent.toml"
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    check_error(info.value, path, None, r"cannot read the file", DesignFileError)


def test_oversized_file(tmp_path):
    path = tmp_path / "huge.toml"
    path.write_bytes(BASE.encode() + b"#" * 1_000_001 + b"\n")
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    check_error(info.value, path, None, r"design files are limited to", DesignFileError)


# --------------------------------------------------------------------------
# One row per bad input: (text, dotted key, problem regex, error class)
# --------------------------------------------------------------------------
UNKNOWN_KEYS = [
    case("top-table-plantt", add("[plantt]\nA = 1\n"), "plantt", r"did you mean 'plant'\?"),
    case("top-key-titel", 'titel = "x"\n' + BASE, "titel", r"did you mean 'title'\?"),
    case(
        "parameter-unti",
        sub('unit = "kg"', 'unti = "kg"'),
        "parameters.m.unti",
        r"unknown key; did you mean 'unit'\?",
    ),
    case(
        "plant-state",
        sub('outputs = ["pos"]', 'outputs = ["pos"]\nstate = ["x", "v"]'),
        "plant.state",
        r"did you mean 'states'\?",
    ),
    case(
        "state-table-unti",
        sub('outputs = ["pos"]', 'states = [{ name = "x", unti = "m" }, "v"]'),
        "plant.states[0].unti",
        r"did you mean 'unit'\?",
    ),
    case(
        "controller-overshot",
        specs("overshot_percent = 5\nsettling_time = 1.0\n"),
        "controller.overshot_percent",
        r"unknown key; did you mean 'overshoot_percent'\?",
    ),
    case(
        "observer-speed-factr",
        add("[observer]\nspeed_factr = 3\n"),
        "observer.speed_factr",
        r"did you mean 'speed_factor'\?",
    ),
    case(
        "tracking-outptu",
        add('[tracking]\noutptu = "pos"\n'),
        "tracking.outptu",
        r"did you mean 'output'\?",
    ),
    case(
        "simulation-horizn",
        add("[simulation]\nhorizn = 3.0\n"),
        "simulation.horizn",
        r"did you mean 'horizon'\?",
    ),
    case(
        "claimed-tolerence",
        add("[claimed]\nK = [1, 2]\ntolerence = 0.01\n"),
        "claimed.tolerence",
        r"did you mean 'tolerance'\?",
    ),
    case(
        "options-budget",
        add("[options]\nsymbolic_budget = 5\n"),
        "options.symbolic_budget",
        r"did you mean 'symbolic_budget_seconds'\?",
    ),
    case(
        "no-close-match-lists-choices",
        add("[observer]\nqqqq = 3\n"),
        "observer.qqqq",
        r"expected one of: poles, speed_factor",
    ),
]

PARAMETERS = [
    case(
        "undeclared-name-in-expression",
        sub('"-c/m"', '"-cc/m"'),
        "plant.A[1][1]",
        r"undeclared name 'cc'; did you mean c\?",
    ),
    case(
        "undeclared-name-in-B",
        sub('"kf/m"', '"kff/m"'),
        "plant.B[1][0]",
        r"undeclared name 'kff'; did you mean kf\?",
    ),
    case(
        "undeclared-name-lists-the-declared",
        sub('"kf/m"', '"gain/m"'),
        "plant.B[1][0]",
        r"undeclared name 'gain'; declared parameters: c, kf, m",
    ),
    case(
        "parameter-without-value",
        sub("value = 0.4", 'description = "moving mass"'),
        "parameters.m.value",
        r"missing: every parameter needs a value",
    ),
    case(
        "parameter-not-a-table",
        "[parameters]\nm = 0.4\nc = 1.5\nkf = 0.8\n" + BASE[BASE.index("[plant]") :],
        "parameters.m",
        r"expected a table with at least 'value'",
    ),
    case(
        "name-lambda",
        add("[parameters.lambda]\nvalue = 1\n"),
        "parameters.lambda",
        r"'lambda' is reserved: it is a Python keyword",
    ),
    case(
        "name-s",
        add("[parameters.s]\nvalue = 1\n"),
        "parameters.s",
        r"'s' is reserved: it is the Laplace variable",
    ),
    case(
        "name-pi",
        add("[parameters.pi]\nvalue = 3\n"),
        "parameters.pi",
        r"'pi' is reserved: it is a constant",
    ),
    case(
        "name-e",
        add("[parameters.e]\nvalue = 3\n"),
        "parameters.e",
        r"'e' is reserved",
    ),
    case(
        "name-with-dash",
        add("[parameters.m-c]\nvalue = 1\n"),
        "parameters.m-c",
        r"'m-c' is not a plain identifier",
    ),
    case(
        "name-non-ascii-lookalike",
        add('[parameters."\U0001d458"]\nvalue = 1\n'),
        "parameters.\U0001d458",
        r"is not a plain identifier",
    ),
    case(
        "name-leading-digit",
        add('[parameters."2k"]\nvalue = 1\n'),
        "parameters.2k",
        r"'2k' is not a plain identifier",
    ),
    case(
        "name-double-underscore",
        add("[parameters.k__2]\nvalue = 1\n"),
        "parameters.k__2",
        r"double underscore",
    ),
    case(
        "range-low-above-high",
        sub("range = [0.7, 0.9]", "range = [0.9, 0.7]"),
        "parameters.kf.range",
        r"low 0\.9 is greater than high 0\.7",
    ),
    case(
        "range-not-a-pair",
        sub("range = [0.7, 0.9]", "range = [0.7]"),
        "parameters.kf.range",
        r"expected \[low, high\]",
    ),
    case(
        "range-bound-not-a-number",
        sub("range = [0.7, 0.9]", 'range = [0.7, "high"]'),
        "parameters.kf.range[1]",
        r"plain decimal",
    ),
    # A nominal value outside its own declared range contradicts the file.
    case(
        "nominal-above-range",
        sub("value = 0.8", "value = 1.2"),
        "parameters.kf.value",
        r"^nominal 1\.2 lies outside its range \[0\.7, 0\.9\]$",
    ),
    case(
        "nominal-below-range",
        sub("value = 0.8", "value = 0.69"),
        "parameters.kf.value",
        r"^nominal 0\.69 lies outside its range \[0\.7, 0\.9\]$",
    ),
]

# Booleans, arrays, NaN/inf (TOML nan, inf) and huge integers where numbers belong.
NUMBERS = [
    case(
        "value-bool",
        sub("value = 0.4", "value = true"),
        "parameters.m.value",
        r"expected a number, got a boolean",
    ),
    case(
        "value-array",
        sub("value = 0.4", "value = [0.4]"),
        "parameters.m.value",
        r"expected a number, got list",
    ),
    case(
        "value-nan",
        sub("value = 0.4", "value = nan"),
        "parameters.m.value",
        r"expected a finite number, got nan",
    ),
    case(
        "value-inf",
        sub("value = 0.4", "value = -inf"),
        "parameters.m.value",
        r"expected a finite number, got -inf",
    ),
    case(
        "value-huge-integer",
        sub("value = 0.4", "value = 100000000000000000000"),
        "parameters.m.value",
        r"too large",
    ),
    case(
        "value-text",
        sub("value = 0.4", 'value = "heavy"'),
        "parameters.m.value",
        r"plain decimal",
    ),
    case(
        "A-entry-bool",
        sub('"-c/m"', "false"),
        "plant.A[1][1]",
        r"expected a number or an expression string, got bool",
    ),
    case(
        "A-entry-array",
        sub('"-c/m"', "[1]"),
        "plant.A[1][1]",
        r"expected a number or an expression string, got list",
    ),
    case(
        "A-entry-table",
        sub('"-c/m"', "{ value = 1 }"),
        "plant.A[1][1]",
        r"expected a number or an expression string, got dict",
    ),
    case("A-entry-nan", sub('"-c/m"', "nan"), "plant.A[1][1]", r"finite number, got nan"),
    case("A-entry-inf", sub('"-c/m"', "inf"), "plant.A[1][1]", r"finite number, got inf"),
    case(
        "A-entry-huge-integer",
        sub('"-c/m"', "99999999999999999"),
        "plant.A[1][1]",
        r"too large",
    ),
    case(
        "A-entry-code",
        sub('"-c/m"', "\"__import__('os').getcwd()\""),
        "plant.A[1][1]",
        r"attribute access is not allowed",
    ),
    case(
        "settling-time-bool",
        specs("settling_time = true\n"),
        "controller.settling_time",
        r"expected a number, got bool",
    ),
    case(
        "settling-time-array",
        specs("settling_time = [1.0]\n"),
        "controller.settling_time",
        r"expected a number, got list",
    ),
    case(
        "overshoot-nan",
        specs("overshoot_percent = nan\n"),
        "controller.overshoot_percent",
        r"expected a finite number, got nan",
    ),
    case(
        "rise-time-huge-integer",
        specs("rise_time = 10000000000000000\n"),
        "controller.rise_time",
        r"too large",
    ),
    case(
        "horizon-inf",
        add("[simulation]\nhorizon = inf\n"),
        "simulation.horizon",
        r"expected a finite number, got inf",
    ),
    case(
        "speed-factor-nan",
        add("[observer]\nspeed_factor = nan\n"),
        "observer.speed_factor",
        r"expected a finite number",
    ),
    case(
        "u-max-bool",
        add("[simulation]\nu_max = true\n"),
        "simulation.u_max",
        r"expected a number, got bool",
    ),
    case(
        "pole-bool",
        sub(POLES_LINE, "poles = [true, -2]"),
        "controller.poles[0]",
        r"expected a number or a string",
    ),
    case(
        "pole-nan",
        sub(POLES_LINE, "poles = [-2, nan]"),
        "controller.poles[1]",
        r"expected a finite number, got nan",
    ),
    case(
        "pole-not-a-number",
        sub(POLES_LINE, 'poles = ["-2", "-3*2"]'),
        "controller.poles[1]",
        r"a pole must be a real or complex number",
    ),
    case(
        "claimed-reference-gain-bool",
        add("[claimed]\nreference_gain = true\n"),
        "claimed.reference_gain",
        r"expected a number, got bool",
    ),
]

DIMENSIONS = [
    case(
        "A-not-square",
        sub('A = [[0, 1], [0, "-c/m"]]', 'A = [[0, 1, 0], [0, "-c/m", 0]]'),
        "plant.A",
        r"must be square, got 2x3",
    ),
    case(
        "A-ragged-row",
        sub('A = [[0, 1], [0, "-c/m"]]', "A = [[0, 1], [0]]"),
        "plant.A[1]",
        r"row has 1 entries, expected 2",
    ),
    case("A-empty", sub('A = [[0, 1], [0, "-c/m"]]', "A = []"), "plant.A", r"list of rows"),
    case(
        "A-missing",
        sub('A = [[0, 1], [0, "-c/m"]]\n', ""),
        "plant.A",
        r"missing: the plant needs A, B and C",
    ),
    case(
        "B-rows-not-n",
        sub('B = [[0], ["kf/m"]]', 'B = [[0], ["kf/m"], [1]]'),
        "plant.B",
        r"has 3 rows; A is 2x2 so B needs 2",
    ),
    case(
        "B-flat-too-long",
        sub('B = [[0], ["kf/m"]]', 'B = [0, "kf/m", 1]'),
        "plant.B",
        r"has 3 rows",
    ),
    case(
        "C-columns-not-n",
        sub("C = [[1, 0]]", "C = [[1, 0, 0]]"),
        "plant.C",
        r"has 3 columns; A is 2x2 so C needs 2",
    ),
    case("C-flat-too-short", sub("C = [[1, 0]]", "C = [1]"), "plant.C", r"has 1 columns"),
    case(
        "D-wrong-shape",
        sub("C = [[1, 0]]", "C = [[1, 0]]\nD = [[0, 0]]"),
        "plant.D",
        r"is 1x2; expected 1x1 \(outputs x inputs\)",
    ),
    case(
        "more-inputs-than-states",
        sub('B = [[0], ["kf/m"]]', 'B = [[0, 1, 0], ["kf/m", 0, 1]]'),
        "plant.B",
        r"3 inputs for 2 states",
    ),
    case(
        "states-wrong-count",
        sub('outputs = ["pos"]', 'states = ["x"]'),
        "plant.states",
        r"expected 2 entries",
    ),
    case(
        "states-duplicate",
        sub('outputs = ["pos"]', 'states = ["x", "x"]'),
        "plant.states[1].name",
        r"duplicate name 'x'",
    ),
    case(
        "state-name-reserved",
        sub('outputs = ["pos"]', 'states = ["x", "lambda"]'),
        "plant.states[1].name",
        r"'lambda' is reserved",
    ),
    case(
        "state-not-name-or-table",
        sub('outputs = ["pos"]', 'states = ["x", 3]'),
        "plant.states[1]",
        r"expected a name or a table",
    ),
]

POLES = [
    case(
        "complex-without-conjugate",
        sub(POLES_LINE, 'poles = ["-4+3j", "-5"]'),
        "controller.poles",
        r"pole -4\+3j has no matching conjugate -4-3j",  # as written in the file
    ),
    case(
        "conjugate-multiplicity-differs",
        sub(POLES_LINE, 'poles = ["-4+3j", "-4+3j"]'),
        "controller.poles",
        r"no matching conjugate",
    ),
    case(
        "more-poles-than-states",
        sub(POLES_LINE, 'poles = ["-4+3j", "-4-3j", "-9"]'),
        "controller.poles",
        r"3 pole\(s\) for a plant of order 2: give exactly 2",
    ),
    case(
        "fewer-poles-than-states",
        sub(POLES_LINE, 'poles = ["-4"]'),
        "controller.poles",
        r"1 pole\(s\) for a plant of order 2",
    ),
    case("no-poles", sub(POLES_LINE, "poles = []"), "controller.poles", r"empty list of poles"),
    case(
        "poles-not-a-list",
        sub(POLES_LINE, 'poles = "-4+3j"'),
        "controller.poles",
        r"expected a list of poles",
    ),
    case(
        "right-half-plane",
        sub(POLES_LINE, 'poles = ["2", "-3"]'),
        "controller.poles",
        r"pole 2 is not in the open left half-plane",
    ),
    case(
        "right-half-plane-complex",
        sub(POLES_LINE, 'poles = ["0.5+3j", "0.5-3j"]'),
        "controller.poles",
        r"pole 0\.5\+3j is not in the open left half-plane",
    ),
    case(
        "on-the-imaginary-axis",
        sub(POLES_LINE, 'poles = ["3j", "-3j"]'),
        "controller.poles",
        r"pole 3j is not in the open left half-plane",
    ),
    case(
        "at-the-origin",
        sub(POLES_LINE, "poles = [0, -3]"),
        "controller.poles",
        r"pole 0 is not in the open left half-plane",
    ),
    case(
        "observer-right-half-plane",
        add('[observer]\npoles = ["-20", "1"]\n'),
        "observer.poles",
        r"pole 1 is not in the open left half-plane",
    ),
    case(
        "observer-pole-count",
        add('[observer]\npoles = ["-20", "-21", "-22"]\n'),
        "observer.poles",
        r"3 pole\(s\) for a plant of order 2",
    ),
]

CONTROLLER = [
    case(
        "poles-and-specifications",
        sub(POLES_LINE, POLES_LINE + "\nsettling_time = 1.0"),
        "controller",
        r"either poles or specifications, not both \(found poles and settling_time\)",
        SpecificationError,
    ),
    case(
        "no-controller-table",
        sub("[controller]\n" + POLES_LINE + "\n", ""),
        "controller",
        r"this table is required",
    ),
    case(
        "empty-controller-table",
        sub(POLES_LINE + "\n", ""),
        "controller",
        r"give poles = \[\.\.\.\] or at least one specification",
    ),
    case(
        "negative-settling-time",
        specs("settling_time = -1.0\n"),
        "controller.settling_time",
        r"expected a positive time in seconds, got -1\.0",
        SpecificationError,
    ),
    case(
        "zero-rise-time",
        specs("rise_time = 0\n"),
        "controller.rise_time",
        r"expected a positive time in seconds, got 0",
        SpecificationError,
    ),
    case(
        "negative-peak-time",
        specs("peak_time = -0.2\n"),
        "controller.peak_time",
        r"expected a positive time",
        SpecificationError,
    ),
    case(
        "overshoot-zero",
        specs("overshoot_percent = 0\n"),
        "controller.overshoot_percent",
        r"0 < OS < 100, got 0",
        SpecificationError,
    ),
    case(
        "overshoot-150",
        specs("overshoot_percent = 150\n"),
        "controller.overshoot_percent",
        r"0 < OS < 100, got 150",
        SpecificationError,
    ),
    case(
        "settling-band-0.05",
        specs("settling_time = 1.0\nsettling_band = 0.05\n"),
        "controller.settling_band",
        r"expected 0\.02 or 0\.01, got 0\.05",
        SpecificationError,
    ),
    case(
        "settling-band-as-percent",
        specs("settling_time = 1.0\nsettling_band = 2\n"),
        "controller.settling_band",
        r"a fraction, not a percentage",
        SpecificationError,
    ),
    case(
        "settling-band-without-settling-time",
        specs("overshoot_percent = 5\nsettling_band = 0.02\n"),
        "controller.settling_band",
        r"given without settling_time",
    ),
    case(
        "two-bad-specifications-at-once",
        specs("overshoot_percent = 0\nrise_time = -1\n"),
        "controller",
        r"overshoot_percent: .*; rise_time: ",
        SpecificationError,
    ),
    case(
        "remaining-poles-with-explicit-poles",
        sub(POLES_LINE, POLES_LINE + "\nremaining_pole_factor = 4"),
        "controller.remaining_pole_factor",
        r"only meaningful with specifications",
    ),
    case(
        "remaining-poles-wrong-count",
        specs('overshoot_percent = 5\nremaining_poles = ["-30"]\n'),
        "controller.remaining_poles",
        r"1 poles given; the dominant pair takes 2 of 2, so give 0",
    ),
    case(
        "specifications-for-first-order-plant",
        textwrap.dedent(
            """\
            [plant]
            A = -2
            B = 1
            C = 1
            [controller]
            settling_time = 0.5
            """
        ),
        "controller",
        r"specifications need a plant of order 2 or more",
    ),
]

OTHER_TABLES = [
    case(
        "observer-poles-and-speed-factor",
        add('[observer]\npoles = ["-20", "-21"]\nspeed_factor = 4\n'),
        "observer",
        r"either poles or speed_factor, not both",
    ),
    case(
        "observer-speed-factor-out-of-range",
        add("[observer]\nspeed_factor = 1000\n"),
        "observer.speed_factor",
        r"must be at most 100",
    ),
    case(
        "tracking-output-not-an-output",
        add('[tracking]\noutput = "poss"\n'),
        "tracking.output",
        r"'poss' is not an output; did you mean 'pos'\?",
    ),
    case(
        "tracking-output-a-state-name",
        sub('outputs = ["pos"]', 'states = ["x", "v"]') + '[tracking]\noutput = "v"\n',
        "tracking.output",
        r"'v' is not an output",
    ),
    case(
        "initial-state-wrong-length",
        add("[simulation]\ninitial_state = [0.01, 0, 0]\n"),
        "simulation.initial_state",
        r"expected 2 numbers, got 3",
    ),
    case(
        "initial-estimate-wrong-length",
        add("[simulation]\ninitial_estimate = [0.01]\n"),
        "simulation.initial_estimate",
        r"expected 2 numbers, got 1",
    ),
    case(
        "initial-state-not-numbers",
        add('[simulation]\ninitial_state = [0.01, "fast"]\n'),
        "simulation.initial_state[1]",
        r"expected a number, got str",
    ),
    case(
        "samples-not-an-integer",
        add("[simulation]\nsamples = 500.5\n"),
        "simulation.samples",
        r"expected a whole number, got 500\.5",
    ),
    case(
        "samples-a-string",
        add('[simulation]\nsamples = "500"\n'),
        "simulation.samples",
        r"expected a whole number",
    ),
    case(
        "samples-too-few",
        add("[simulation]\nsamples = 5\n"),
        "simulation.samples",
        r"between 11 and 200001, got 5",
    ),
    case(
        "claimed-K-too-many-numbers",
        add("[claimed]\nK = [1, 2, 3]\n"),
        "claimed.K",
        r"3 numbers; expected 2 \(1x2\)",
    ),
    case(
        "claimed-K-matrix-wrong-shape",
        add("[claimed]\nK = [[1, 2], [3, 4]]\n"),
        "claimed.K",
        r"is 2x2; expected 1x2",
    ),
    case(
        "claimed-L-wrong-shape",
        add("[claimed]\nL = [1, 2, 3]\n"),
        "claimed.L",
        r"3 numbers; expected 2 \(2x1\)",
    ),
    case(
        "claimed-empty",
        add("[claimed]\ntolerance = 0.01\n"),
        "claimed",
        r"give at least one of K, L, reference_gain",
    ),
    case(
        "options-budget-negative",
        add("[options]\nsymbolic_budget_seconds = -1\n"),
        "options.symbolic_budget_seconds",
        r"must be positive",
    ),
    case(
        "table-given-as-value",
        "observer = 4\n" + BASE,
        "observer",
        r"expected a table, got int",
    ),
]


@pytest.mark.parametrize(
    "text, key, problem, cls",
    UNKNOWN_KEYS + PARAMETERS + NUMBERS + DIMENSIONS + POLES + CONTROLLER + OTHER_TABLES,
)
def test_bad_design_file(write_design, text, key, problem, cls):
    path = write_design(text)
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    check_error(info.value, path, key, problem, cls)


def test_errors_are_also_value_errors(write_design):
    # The exception tree lets callers catch the matching built-in (STYLE.md, item 4).
    path = write_design(specs("overshoot_percent = 150\n"))
    with pytest.raises(ValueError):
        load_design(path)


# --------------------------------------------------------------------------
# --set overrides (the command line's NAME=VALUE pairs)
# --------------------------------------------------------------------------
@pytest.mark.parametrize(
    "overrides, key, problem",
    [
        pytest.param(
            {"mm": "0.5"},
            "--set mm",
            r"not a declared parameter; did you mean 'm'\?",
            id="undeclared",
        ),
        pytest.param(
            {"mass": "0.5"}, "--set mass", r"not a declared parameter", id="undeclared-no-hint"
        ),
        pytest.param({"m": "heavy"}, "parameters.m", r"--set m=heavy: .*plain decimal", id="word"),
        pytest.param({"m": "nan"}, "parameters.m", r"--set m=nan: ", id="nan"),
        pytest.param({"m": "inf"}, "parameters.m", r"--set m=inf: ", id="inf"),
        pytest.param({"m": "1e99"}, "parameters.m", r"--set m=1e99: .*too large", id="huge"),
        pytest.param({"m": "0.4*2"}, "parameters.m", r"--set m=0.4\*2: ", id="expression"),
        pytest.param(
            {"kf": "0.95"},
            "--set kf",
            r"^value 0\.95 lies outside its range \[0\.7, 0\.9\] declared at parameters\.kf\.range$",
            id="outside-range",
        ),
    ],
)
def test_bad_set_override(write_design, overrides, key, problem):
    path = write_design(BASE)
    with pytest.raises(DesignFileError) as info:
        load_design(path, overrides)
    check_error(info.value, path, key, problem, DesignFileError)


def test_set_override_replaces_the_value(write_design):
    design = load_design(write_design(BASE), {"m": "0.55"})
    assert {p.name: p.value for p in design.parameters}["m"] == sp.Rational(55, 100)
    assert design.overrides == ("m=0.55",)


# --------------------------------------------------------------------------
# Problems found only at the evaluated values (raised by derive)
# --------------------------------------------------------------------------
DERIVE_ERRORS = [
    case(
        "division-by-zero-at-the-values",
        add("[parameters.h]\nvalue = 2\n").replace('"-c/m"', '"1/(h-2)"'),
        "plant.A[1][1]",
        r"'1/\(h - 2\)' is not a finite real number at the evaluated parameter values .*h = 2",
    ),
    case(
        "function-making-B-vanish",
        add("[parameters.h]\nvalue = 1\n").replace('"kf/m"', '"log(h)"'),
        "plant",
        r"uncontrollable at the evaluated parameter values .*h = 1",
        StructureError,
    ),
    case(
        "uncontrollable-at-the-values",
        sub("range = [0.7, 0.9]", "range = [0, 0.9]", sub("value = 0.8", "value = 0")),
        "plant",
        r"uncontrollable at the evaluated parameter values .*kf = 0.*\(the plant is "
        r"uncontrollable where kf = 0\)",
        StructureError,
    ),
    case(
        "unobservable-at-the-values",
        add("[parameters.h]\nvalue = 0\n").replace("C = [[1, 0]]", 'C = [["h", 0]]'),
        "plant",
        r"unobservable at the evaluated parameter values .*h = 0",
        StructureError,
    ),
    case(
        "several-inputs-pole-repeated-too-often",
        textwrap.dedent(
            """\
            [plant]
            A = [[-1, 0, 0], [0, -2, 0], [0, 0, -3]]
            B = [[1, 0], [0, 1], [1, 1]]
            C = [[1, 1, 1]]
            [controller]
            poles = [-4, -4, -4]
            """
        ),
        "controller.poles",
        r"cannot place the controller poles",
        StructureError,
    ),
]


@pytest.mark.parametrize("text, key, problem, cls", DERIVE_ERRORS)
def test_bad_at_the_evaluated_values(write_design, text, key, problem, cls):
    path = write_design(text)
    design = load_design(path)  # the file itself is well formed
    with pytest.raises(DesignFileError) as info:
        derive(design, budget=0)
    check_error(info.value, path, key, problem, cls)


def test_division_by_zero_only_at_an_overridden_value(write_design):
    text = add("[parameters.h]\nvalue = 3\n").replace('"-c/m"', '"1/(h-2)"')
    path = write_design(text)
    assert derive(load_design(path), budget=0).passed
    with pytest.raises(DesignFileError) as info:
        derive(load_design(path, {"h": "2"}), budget=0)
    check_error(info.value, path, "plant.A[1][1]", r"not a finite real number", DesignFileError)


# --------------------------------------------------------------------------
# The accepted shorthands
# --------------------------------------------------------------------------
def test_flat_B_is_a_column_and_flat_C_a_row():
    nested = parse_design(BASE, "nested.toml")
    flat = parse_design(
        sub("C = [[1, 0]]", "C = [1, 0]", sub('B = [[0], ["kf/m"]]', 'B = [0, "kf/m"]')),
        "flat.toml",
    )
    assert flat.plant.B.shape == (2, 1) and flat.plant.C.shape == (1, 2)
    assert flat.plant.B == nested.plant.B
    assert flat.plant.C == nested.plant.C
    m, kf = nested.symbols["m"], nested.symbols["kf"]
    assert flat.plant.B == sp.Matrix([[0], [kf / m]])


def test_scalars_for_a_first_order_plant():
    design = parse_design("[plant]\nA = -2\nB = 3\nC = 1\n[controller]\npoles = [-5]\n", "f.toml")
    assert design.plant.A == sp.Matrix([[-2]])
    assert design.plant.B == sp.Matrix([[3]])
    assert design.plant.D == sp.Matrix([[0]])


def test_states_as_plain_names():
    design = parse_design(sub('outputs = ["pos"]', 'states = ["x", "v"]'), "n.toml")
    assert [(s.name, s.unit) for s in design.plant.states] == [("x", ""), ("v", "")]
    assert [s.name for s in design.plant.outputs] == ["y1"]  # default names


def test_states_as_name_unit_tables_and_mixed():
    text = sub(
        'outputs = ["pos"]',
        'states = [{ name = "x", unit = "m", description = "plunger" }, "v"]\n'
        'outputs = [{ name = "pos", unit = "m" }]',
    )
    design = parse_design(text, "t.toml")
    x, v = design.plant.states
    assert (x.name, x.unit, x.description) == ("x", "m", "plunger")
    assert (v.name, v.unit) == ("v", "")
    assert (design.plant.outputs[0].name, design.plant.outputs[0].unit) == ("pos", "m")


def test_nominal_on_the_range_ends_is_accepted(write_design):
    # The range is closed: both ends are admissible values, from the file or from --set.
    design = parse_design(sub("value = 0.8", "value = 0.9"), "r.toml")
    assert {p.name: p.value for p in design.parameters}["kf"] == sp.Rational(9, 10)
    design = load_design(write_design(BASE), {"kf": "0.7"})
    assert {p.name: p.value for p in design.parameters}["kf"] == sp.Rational(7, 10)


def test_range_low_equal_high_is_accepted():
    design = parse_design(sub("range = [0.7, 0.9]", "range = [0.8, 0.8]"), "r.toml")
    kf = {p.name: p for p in design.parameters}["kf"]
    assert kf.range == (sp.Rational(4, 5), sp.Rational(4, 5))


def test_numbers_are_exact_from_their_decimal_text():
    # 0.4 must be 2/5, not the nearest binary fraction (D. Goldberg, "What Every
    # Computer Scientist Should Know About Floating-Point Arithmetic", ACM Computing
    # Surveys 23(1), 1991, Sec. 1.1: 0.1 has no exact binary representation).
    design = parse_design(BASE, "x.toml")
    values = {p.name: p.value for p in design.parameters}
    assert values["m"] == sp.Rational(2, 5)
    assert values["c"] == sp.Rational(3, 2)


#: Numbers as a program prints doubles: ``repr(0.1 + 0.2)`` and a 17-digit value.
SEVENTEEN_DIGITS = sub(
    "value = 1.5\n",
    "value = 0.30000000000000004\n",
    sub(
        'A = [[0, 1], [0, "-c/m"]]',
        'A = [[0, "1.2345678901234567"], [0, "-c/m"]]',
        sub("value = 0.4\n", 'value = "1"\n'),
    ),
)


def test_numbers_of_17_significant_digits_evaluate_to_the_same_double(write_design):
    # 17 significant digits write any IEEE 754 double so that it reads back unchanged
    # (ISO/IEC 9899:2018, 5.2.4.2.2, DBL_DECIMAL_DIG = 17); the loader keeps the decimal
    # value exactly and rounds once, at evaluation, to the double float(text) gives.
    path = write_design(SEVENTEEN_DIGITS)
    design = load_design(path, overrides={"kf": "0.89999999999999991"})
    values = {p.name: p.value for p in design.parameters}
    assert values["c"] == sp.Rational(30000000000000004, 10**17)
    assert values["kf"] == sp.Rational(89999999999999991, 10**17)
    assert design.plant.A[0, 1] == sp.Rational(12345678901234567, 10**16)
    plant = derive(design, budget=0).plant
    assert plant.A[0, 1] == float("1.2345678901234567")
    assert plant.A[1, 1] == -float("0.30000000000000004") == -(0.1 + 0.2)
    assert plant.B[1, 0] == float("0.89999999999999991")


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ("value = 0.30000000000000004\n", 'value = "0.300000000000000044"\n', "parameters.c.value"),
        ('"1.2345678901234567"', '"1.23456789012345678"', "plant.A"),
        ('"-4+3j"', '"-4+3.00000000000000001j"', "controller.poles[0]"),
    ],
    ids=["parameter", "matrix-entry", "pole"],
)
def test_eighteen_significant_digits_are_refused(write_design, old, new, key):
    path = write_design(sub(old, new, SEVENTEEN_DIGITS))
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    assert "has 18 significant digits; at most 17" in info.value.problem
    assert info.value.key.startswith(key)
    assert "\n" not in str(info.value)


def test_tracking_output_by_name_and_claims_as_matrix_or_flat():
    text = add(
        """
        [tracking]
        output = "pos"
        [claimed]
        K = [[1.5, 0.25]]
        L = [30, 200]
        reference_gain = 1.5
        """
    )
    design = parse_design(text, "c.toml")
    assert design.tracking.output == 0
    assert design.claims.K == ((1.5, 0.25),)
    assert design.claims.L == ((30.0,), (200.0,))
    assert design.claims.reference_gain == 1.5


def test_package_exports_the_loader():
    assert symbolic.load_design is load_design
    assert symbolic.parse_design is parse_design
