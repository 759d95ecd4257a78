"""A corpus of hostile design files: each must end in a clean, located error.

Every case builds the bytes of one design file from a valid base design (a
gantry axis of our own invention) by changing one thing.  The case names the
text the error message must contain: the dotted key of the offending entry
wherever the loader can know it.  Where it cannot (TOML syntax errors, bytes
that are not UTF-8, a file over the size cap) the expected text is the line or
the limit that the message gives instead; the case's ``note`` says so.

Payloads that try to run code would create the canary file whose path is
substituted for ``@CANARY@``; the test asserts that the file never appears.

The categories follow the hardening brief: ``code`` (code execution through
expressions and names), ``resource`` (time and memory attacks), ``type``
(type confusion) and ``structure`` (missing, misplaced or contradictory
tables, plants without the needed structure).  The limits they probe are the
loader's own (see ``symbolic/input/reader.py``, its table modules and
``symbolic/input/expressions.py``).
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass

__all__ = ["BASE", "CASES", "HostileCase", "CANARY"]

#: Placeholder replaced by the canary file's path.
CANARY = "@CANARY@"

#: A valid design: a glue-dispensing gantry axis (invented demo values).
#: Carriage mass m, rail friction c, motor force constant kf.
BASE = """\
title = "Glue gantry axis (hostile-input base)"
author = "Hardening tests"

[parameters.m]
value = 1.8
unit = "kg"

[parameters.c]
value = 4.5
unit = "N s/m"

[parameters.kf]
value = 12.0
unit = "N/A"

[plant]
A = [[0, 1], [0, "-c/m"]]
B = [[0], ["kf/m"]]
C = [[1, 0]]

[controller]
poles = ["-6+4j", "-6-4j"]
"""

# The lines of BASE above (1-based), named for the cases that quote them.
_LINE_OF_C_VALUE = 9
_B_ENTRY = '"kf/m"'


@dataclass(frozen=True)
class HostileCase:
    """One hostile design file and the error it must produce."""

    name: str
    category: str  # "code", "resource", "type" or "structure"
    build: Callable[[str], bytes]  # canary path -> file content
    key: str  # text the error message must contain
    where: str = "key"  # "key": the text is in the error's key; "message": only in the message
    cli: bool = False  # also run through `python -m symbolic derive`
    overrides: tuple[tuple[str, str], ...] = ()  # the --set option, NAME -> VALUE
    note: str = ""
    known_issue: str = ""  # non-empty: an engine change is pending (the report gives the diff)


def _text(text: str) -> Callable[[str], bytes]:
    return lambda canary: text.replace(CANARY, canary).encode("utf-8")


def _edit(old: str, new: str) -> Callable[[str], bytes]:
    if BASE.count(old) != 1:
        raise ValueError(f"the base design holds {old!r} {BASE.count(old)} times, not once")
    return _text(BASE.replace(old, new))


def _append(extra: str) -> Callable[[str], bytes]:
    return _text(BASE + extra)


def _prepend(top_level: str) -> Callable[[str], bytes]:
    """Top-level keys must come before the first table header."""
    return _text(top_level + BASE)


def _toml_string(value: str) -> str:
    """A TOML basic string (JSON string syntax is a subset; non-ASCII kept as is)."""
    return json.dumps(value, ensure_ascii=False)


def _expr(expression: str) -> Callable[[str], bytes]:
    """The base design with plant.B[1][0] replaced by an expression string."""
    return _edit(_B_ENTRY, _toml_string(expression))


def _pole(first: str) -> Callable[[str], bytes]:
    return _edit('poles = ["-6+4j", "-6-4j"]', f"poles = [{_toml_string(first)}, -7]")


def _lazy(make: Callable[[], str]) -> Callable[[str], bytes]:
    """A large file, built only when the case runs."""
    return lambda canary: make().replace(CANARY, canary).encode("utf-8")


def _raw(data: bytes) -> Callable[[str], bytes]:
    return lambda canary: data


_TOUCH = f"__import__('os').system('touch {CANARY}')"
_OPEN = f"open('{CANARY}', 'w')"
_B = "plant.B[1][0]"


def _nested_arrays(depth: int) -> str:
    return BASE.replace("C = [[1, 0]]", "C = " + "[" * depth + "1" + "]" * depth)


def _nested_inline_tables(depth: int) -> str:
    return BASE + "\n[simulation]\nhorizon = " + "{a = " * depth + "1" + "}" * depth + "\n"


def _dotted_key(depth: int) -> str:
    return BASE + "\n[simulation]\nhorizon." + "a." * depth + "b = 1\n"


def _dotted_header(depth: int) -> str:
    return BASE + "\n[simulation.horizon." + "a." * depth + "b]\nx = 1\n"


def _many_parameters(count: int) -> str:
    return BASE + "".join(f"\n[parameters.p{i}]\nvalue = 1\n" for i in range(count))


def _many_poles(count: int) -> str:
    half = ["-1+1j"] * (count // 2) + ["-1-1j"] * (count // 2)
    return BASE.replace('poles = ["-6+4j", "-6-4j"]', "poles = " + json.dumps(half))


CASES: tuple[HostileCase, ...] = (
    # ------------------------------------------------------------------ code
    HostileCase("dunder-class-walk", "code", _expr("m.__class__.__mro__[1].__subclasses__()"), _B),
    HostileCase("import-system", "code", _expr(_TOUCH), _B, cli=True),
    HostileCase("builtin-open", "code", _expr(_OPEN), _B),
    HostileCase("lambda-call", "code", _expr(f"(lambda: {_TOUCH})()"), _B),
    HostileCase("lambda-default-open", "code", _expr(f"(lambda f=open: f('{CANARY}', 'w'))()"), _B),
    HostileCase("list-comprehension", "code", _expr(f"[{_TOUCH} for _ in (1,)]"), _B),
    HostileCase("generator-expression", "code", _expr(f"sum({_OPEN} for x in [1])"), _B),
    HostileCase("dict-comprehension", "code", _expr(f"{{k: {_OPEN} for k in 'a'}}"), _B),
    HostileCase("f-string", "code", _expr(f'f"{{{_TOUCH}}}"'), _B, cli=True),
    HostileCase("walrus", "code", _expr(f"(f := open)('{CANARY}', 'w')"), _B),
    HostileCase("starred-call", "code", _expr(f"sqrt(*[{_OPEN}])"), _B),
    HostileCase("double-starred-call", "code", _expr("sqrt(**{'x': m})"), _B),
    HostileCase("keyword-argument", "code", _expr("sqrt(m, evaluate=False)"), _B),
    HostileCase(
        "function-globals",
        "code",
        _expr(f"sqrt.__globals__['__builtins__']['open']('{CANARY}', 'w')"),
        _B,
    ),
    HostileCase("tuple-bases", "code", _expr("().__class__.__bases__[0].__subclasses__()"), _B),
    HostileCase("getattr-call", "code", _expr("getattr(m, '__class__')"), _B),
    HostileCase("eval-call", "code", _expr(f'eval("{_OPEN}")'), _B),
    HostileCase("exec-call", "code", _expr(f'exec("{_OPEN}")'), _B),
    HostileCase("sympy-constructor", "code", _expr(f"Symbol('{CANARY}')"), _B),
    HostileCase("statement-after-semicolon", "code", _expr(f"m; {_TOUCH}"), _B),
    HostileCase("statement-after-newline", "code", _expr(f"m\n{_TOUCH}"), _B),
    HostileCase("conditional-expression", "code", _expr(f"m if {_OPEN} else 1"), _B),
    HostileCase("boolean-operator", "code", _expr(f"m and {_OPEN}"), _B),
    HostileCase("comparison", "code", _expr("m < kf"), _B),
    HostileCase("yield-expression", "code", _expr("(yield m)"), _B),
    HostileCase("string-literal", "code", _expr("'kf' + 'm'"), _B),
    HostileCase("subscript-slice", "code", _expr("m[0:1]"), _B),
    HostileCase(
        "lookalike-letter", "code", _expr("kf/\U0001d45a"), _B, note="mathematical italic m"
    ),
    HostileCase("lambda-in-pole", "code", _pole(f"(lambda: {_TOUCH})()"), "controller.poles[0]"),
    HostileCase(
        "payload-as-parameter-value",
        "code",
        _edit("value = 1.8", f"value = {_toml_string(_TOUCH)}"),
        "parameters.m.value",
    ),
    HostileCase(
        "payload-as-parameter-name",
        "code",
        _append(f"\n[parameters.{_toml_string(_TOUCH)}]\nvalue = 1\n"),
        "parameters.__import__",
        cli=True,
    ),
    HostileCase(
        "tex-as-parameter-name",
        "code",
        _append('\n[parameters."\\\\input{/etc/passwd}"]\nvalue = 1\n'),
        "parameters.\\input",
    ),
    HostileCase(
        "reserved-parameter-name",
        "code",
        _append("\n[parameters.sqrt]\nvalue = 1\n"),
        "parameters.sqrt",
    ),
    HostileCase(
        "payload-in-range",
        "code",
        _edit("value = 1.8", f"value = 1.8\nrange = [1, {_toml_string(_TOUCH)}]"),
        "parameters.m.range[1]",
    ),
    HostileCase(
        "payload-as-state-name",
        "code",
        _edit("C = [[1, 0]]", f"C = [[1, 0]]\nstates = [{_toml_string(_TOUCH)}, 'v']"),
        "plant.states[0].name",
    ),
    HostileCase(
        "payload-in-set-option",
        "code",
        _text(BASE),
        "parameters.m",
        overrides=(("m", _TOUCH),),
    ),
    # -------------------------------------------------------------- resource
    HostileCase("tower-of-powers", "resource", _expr("9**9**9"), _B, cli=True),
    HostileCase("huge-power", "resource", _expr("m**(10**9)"), _B),
    HostileCase("factorial", "resource", _expr("factorial(10**9)"), _B),
    HostileCase("exp-tower", "resource", _expr("exp(exp(exp(m)))"), _B),
    HostileCase("huge-literal", "resource", _expr("1e308*1e308"), _B),
    HostileCase("folded-constant", "resource", _expr("1e15*1e15*1e15*m"), _B),
    HostileCase("wide-expansion", "resource", _expr("(m + c + kf + 1)**10 * (m - c)**10"), _B),
    HostileCase(
        "parentheses-10000-deep",
        "resource",
        _expr("(" * 10_000 + "m" + ")" * 10_000),
        _B,
        note="over the 2000-character limit before any parsing",
    ),
    HostileCase("parentheses-999-deep", "resource", _expr("(" * 999 + "m" + ")" * 999), _B),
    HostileCase("unary-minus-chain", "resource", _expr("-" * 1999 + "m"), _B),
    HostileCase("power-chain", "resource", _expr("m" + "**m" * 600), _B),
    HostileCase("sum-of-1000-terms", "resource", _expr("m" + "+m" * 999), _B),
    HostileCase(
        "toml-arrays-10000-deep",
        "resource",
        _lazy(lambda: _nested_arrays(10_000)),
        "nested too deeply",
        cli=True,
        note="the TOML reader recurses; no key is known yet",
        where="message",
    ),
    HostileCase(
        "toml-inline-tables-10000-deep",
        "resource",
        _lazy(lambda: _nested_inline_tables(10_000)),
        "nested too deeply",
        note="the TOML reader recurses; no key is known yet",
        where="message",
    ),
    HostileCase(
        "toml-dotted-key-10000-deep",
        "resource",
        _lazy(lambda: _dotted_key(10_000)),
        "horizon.a.a.a",
        where="message",
        cli=True,
    ),
    HostileCase(
        "toml-table-header-10000-deep",
        "resource",
        _lazy(lambda: _dotted_header(10_000)),
        "simulation.horizon",
        where="message",
    ),
    HostileCase(
        "title-10-MB",
        "resource",
        _lazy(lambda: f"title = {_toml_string('x' * 10_000_000)}\n" + BASE.split("\n", 1)[1]),
        "design files are limited to",
        note="the 1 MB file cap fires before the file is parsed, so the message names the file",
        where="message",
    ),
    HostileCase(
        "expression-10-MB",
        "resource",
        _lazy(lambda: BASE.replace(_B_ENTRY, _toml_string("m+" * 5_000_000 + "m"))),
        "design files are limited to",
        note="the 1 MB file cap fires before the file is parsed, so the message names the file",
        where="message",
    ),
    HostileCase(
        "title-900-kB",
        "resource",
        _lazy(lambda: f"title = {_toml_string('x' * 900_000)}\n" + BASE.split("\n", 1)[1]),
        "title",
    ),
    HostileCase(
        "expression-900-kB",
        "resource",
        _lazy(lambda: BASE.replace(_B_ENTRY, _toml_string("m+" * 450_000 + "m"))),
        _B,
    ),
    HostileCase(
        "blank-lines-100000",
        "resource",
        _lazy(lambda: BASE + "\n" * 100_000 + "# the end\n[plnat]\nA = 1\n"),
        "plnat",
        note="100 kB of blank lines, a comment, then an unknown table",
    ),
    HostileCase(
        "table-name-900-kB",
        "resource",
        _lazy(lambda: BASE + "\n[" + "k" * 900_000 + "]\nA = 1\n"),
        "kkkk",
    ),
    HostileCase(
        "parameter-name-900-kB",
        "resource",
        _lazy(lambda: BASE + "\n[parameters." + "p" * 900_000 + "]\nvalue = 1\n"),
        "parameters.pppp",
    ),
    HostileCase(
        "parameters-10000",
        "resource",
        _lazy(lambda: _many_parameters(10_000)),
        "parameters",
        cli=True,
    ),
    HostileCase(
        "poles-4000",
        "resource",
        _lazy(lambda: _many_poles(4000)),
        "controller.poles",
    ),
    HostileCase(
        "state-names-100000",
        "resource",
        _lazy(
            lambda: BASE.replace(
                "C = [[1, 0]]", "C = [[1, 0]]\nstates = " + json.dumps(["x"] * 100_000)
            )
        ),
        "plant.states",
    ),
    HostileCase(
        "claimed-gain-30000",
        "resource",
        _lazy(lambda: BASE + "\n[claimed]\nK = " + json.dumps([[1] * 30_000]) + "\n"),
        "claimed.K",
    ),
    HostileCase(
        "samples-10e9",
        "resource",
        _append("\n[simulation]\nsamples = 1000000000\n"),
        "simulation.samples",
    ),
    HostileCase(
        "horizon-1e300",
        "resource",
        _append("\n[simulation]\nhorizon = 1e300\n"),
        "simulation.horizon",
    ),
    HostileCase(
        "budget-one-day",
        "resource",
        _append("\n[options]\nsymbolic_budget_seconds = 86400\n"),
        "options.symbolic_budget_seconds",
    ),
    HostileCase(
        "plant-13-states",
        "resource",
        _edit('A = [[0, 1], [0, "-c/m"]]', "A = " + json.dumps([[0] * 13] * 13)),
        "plant.A",
    ),
    # ------------------------------------------------------------------ type
    HostileCase(
        "value-array",
        "type",
        _edit("value = 1.8", "value = [1.8, 2.0]"),
        "parameters.m.value",
        cli=True,
    ),
    HostileCase(
        "value-boolean", "type", _edit("value = 1.8", "value = true"), "parameters.m.value"
    ),
    HostileCase("value-nan", "type", _edit("value = 1.8", "value = nan"), "parameters.m.value"),
    HostileCase("value-inf", "type", _edit("value = 1.8", "value = inf"), "parameters.m.value"),
    HostileCase(
        "value-overflowing-float",
        "type",
        _edit("value = 1.8", "value = 1e400"),
        "parameters.m.value",
    ),
    HostileCase(
        "value-huge-integer",
        "type",
        _edit("value = 1.8", "value = 9223372036854775807"),
        "parameters.m.value",
    ),
    HostileCase(
        "value-date", "type", _edit("value = 1.8", "value = 1979-05-27"), "parameters.m.value"
    ),
    HostileCase(
        "value-time", "type", _edit("value = 1.8", "value = 07:32:00"), "parameters.m.value"
    ),
    HostileCase(
        "value-table", "type", _edit("value = 1.8", "value = {x = 1}"), "parameters.m.value"
    ),
    HostileCase(
        "value-empty-string", "type", _edit("value = 1.8", 'value = ""'), "parameters.m.value"
    ),
    HostileCase(
        "value-hex-string", "type", _edit("value = 1.8", 'value = "0x1p3"'), "parameters.m.value"
    ),
    HostileCase(
        "value-nan-string", "type", _edit("value = 1.8", 'value = "nan"'), "parameters.m.value"
    ),
    HostileCase(
        "title-table",
        "type",
        _edit('title = "Glue gantry axis (hostile-input base)"', "title = {a = 1}"),
        "title",
    ),
    HostileCase(
        "title-number",
        "type",
        _edit('title = "Glue gantry axis (hostile-input base)"', "title = 5"),
        "title",
    ),
    HostileCase(
        "author-boolean", "type", _edit('author = "Hardening tests"', "author = true"), "author"
    ),
    HostileCase("unit-array", "type", _edit('unit = "kg"', 'unit = ["kg"]'), "parameters.m.unit"),
    HostileCase("parameter-number", "type", _append("\n[parameters]\nq = 5\n"), "parameters.q"),
    HostileCase(
        "parameters-array",
        "type",
        _text(BASE.replace("[parameters.m]", "[[parameters.m]]")),
        "parameters.m",
    ),
    HostileCase(
        "matrix-string",
        "type",
        _edit('A = [[0, 1], [0, "-c/m"]]', 'A = "[[0, 1], [0, 0]]"'),
        "plant.A",
    ),
    HostileCase("matrix-table", "type", _edit('B = [[0], ["kf/m"]]', "B = {x = 1}"), "plant.B"),
    HostileCase(
        "entry-boolean",
        "type",
        _edit('A = [[0, 1], [0, "-c/m"]]', 'A = [[true, 1], [0, "-c/m"]]'),
        "plant.A[0][0]",
    ),
    HostileCase(
        "entry-nan",
        "type",
        _edit('A = [[0, 1], [0, "-c/m"]]', 'A = [[nan, 1], [0, "-c/m"]]'),
        "plant.A[0][0]",
    ),
    HostileCase(
        "entry-inf",
        "type",
        _edit('A = [[0, 1], [0, "-c/m"]]', 'A = [[0, -inf], [0, "-c/m"]]'),
        "plant.A[0][1]",
    ),
    HostileCase(
        "entry-date",
        "type",
        _edit('A = [[0, 1], [0, "-c/m"]]', 'A = [[0, 1], [1979-05-27, "-c/m"]]'),
        "plant.A[1][0]",
    ),
    HostileCase(
        "entry-array",
        "type",
        _edit('A = [[0, 1], [0, "-c/m"]]', 'A = [[[0], 1], [0, "-c/m"]]'),
        "plant.A[0][0]",
    ),
    HostileCase(
        "entry-table",
        "type",
        _edit('A = [[0, 1], [0, "-c/m"]]', 'A = [[{v = 0}, 1], [0, "-c/m"]]'),
        "plant.A[0][0]",
    ),
    HostileCase(
        "poles-string",
        "type",
        _edit('poles = ["-6+4j", "-6-4j"]', 'poles = "-6+4j, -6-4j"'),
        "controller.poles",
    ),
    HostileCase(
        "poles-nested",
        "type",
        _edit('poles = ["-6+4j", "-6-4j"]', "poles = [[-6], [-7]]"),
        "controller.poles[0]",
    ),
    HostileCase(
        "poles-boolean",
        "type",
        _edit('poles = ["-6+4j", "-6-4j"]', "poles = [true, false]"),
        "controller.poles[0]",
    ),
    HostileCase("pole-nan", "type", _pole("nan"), "controller.poles[0]"),
    HostileCase("pole-inf", "type", _pole("-inf"), "controller.poles[0]"),
    HostileCase("pole-i-suffix", "type", _pole("-6+4i"), "controller.poles[0]"),
    HostileCase(
        "speed-factor-string",
        "type",
        _append('\n[observer]\nspeed_factor = "4"\n'),
        "observer.speed_factor",
    ),
    HostileCase(
        "speed-factor-nan",
        "type",
        _append("\n[observer]\nspeed_factor = nan\n"),
        "observer.speed_factor",
    ),
    HostileCase(
        "samples-float", "type", _append("\n[simulation]\nsamples = 2.5\n"), "simulation.samples"
    ),
    HostileCase(
        "samples-boolean", "type", _append("\n[simulation]\nsamples = true\n"), "simulation.samples"
    ),
    HostileCase(
        "initial-state-string",
        "type",
        _append('\n[simulation]\ninitial_state = "0, 0"\n'),
        "simulation.initial_state",
    ),
    HostileCase("claimed-gain-boolean", "type", _append("\n[claimed]\nK = true\n"), "claimed.K"),
    HostileCase(
        "budget-string",
        "type",
        _append('\n[options]\nsymbolic_budget_seconds = "fast"\n'),
        "options.symbolic_budget_seconds",
    ),
    HostileCase(
        "budget-negative",
        "type",
        _append("\n[options]\nsymbolic_budget_seconds = -1\n"),
        "options.symbolic_budget_seconds",
    ),
    HostileCase("tracking-array", "type", _prepend("tracking = [1, 2]\n"), "tracking"),
    HostileCase(
        "overshoot-negative",
        "type",
        _edit('poles = ["-6+4j", "-6-4j"]', "overshoot_percent = -5.0"),
        "controller.overshoot_percent",
    ),
    HostileCase(
        "settling-time-zero",
        "type",
        _edit('poles = ["-6+4j", "-6-4j"]', "settling_time = 0.0"),
        "controller.settling_time",
    ),
    HostileCase(
        "set-option-not-a-number", "type", _text(BASE), "parameters.m", overrides=(("m", "heavy"),)
    ),
    HostileCase(
        "set-option-unknown-name", "type", _text(BASE), "--set mass", overrides=(("mass", "2"),)
    ),
    # ------------------------------------------------------------- structure
    HostileCase("empty-file", "structure", _text(""), "plant", cli=True),
    HostileCase(
        "missing-plant",
        "structure",
        _text(BASE.split("[plant]")[0] + "[controller]\npoles = [-1, -2]\n"),
        "plant",
    ),
    HostileCase(
        "missing-controller", "structure", _text(BASE.split("[controller]")[0]), "controller"
    ),
    HostileCase("missing-C", "structure", _edit("C = [[1, 0]]", ""), "plant.C"),
    HostileCase(
        "plant-array-of-tables", "structure", _text(BASE.replace("[plant]", "[[plant]]")), "plant"
    ),
    HostileCase(
        "plant-string",
        "structure",
        _text(
            'plant = "A"\n'
            + BASE.split("[plant]")[0]
            + "[controller]"
            + BASE.split("[controller]")[1]
        ),
        "plant",
    ),
    HostileCase("unknown-top-key", "structure", _append("\n[plnat]\nA = 1\n"), "plnat"),
    HostileCase(
        "unknown-plant-key",
        "structure",
        _edit("C = [[1, 0]]", "C = [[1, 0]]\nE = [[1]]"),
        "plant.E",
    ),
    HostileCase(
        "duplicate-key",
        "structure",
        _edit('value = 4.5\nunit = "N s/m"', 'value = 4.5\nvalue = 5.0\nunit = "N s/m"'),
        f"line {_LINE_OF_C_VALUE + 1}",
        note="TOML rejects the file; tomllib names the line, not the key",
        where="message",
    ),
    HostileCase(
        "duplicate-table",
        "structure",
        _append("\n[parameters.m]\nvalue = 2.0\n"),
        "('parameters', 'm')",
        cli=True,
        where="message",
    ),
    HostileCase(
        "poles-and-specifications",
        "structure",
        _edit('poles = ["-6+4j", "-6-4j"]', 'poles = ["-6+4j", "-6-4j"]\nsettling_time = 1.0'),
        "controller",
    ),
    HostileCase(
        "observer-poles-and-factor",
        "structure",
        _append("\n[observer]\npoles = [-20, -21]\nspeed_factor = 4\n"),
        "observer",
    ),
    HostileCase(
        "too-few-poles",
        "structure",
        _edit('poles = ["-6+4j", "-6-4j"]', "poles = [-6]"),
        "controller.poles",
    ),
    HostileCase(
        "pole-at-origin",
        "structure",
        _edit('poles = ["-6+4j", "-6-4j"]', "poles = [0, -6]"),
        "controller.poles",
    ),
    HostileCase(
        "poles-on-imaginary-axis",
        "structure",
        _edit('poles = ["-6+4j", "-6-4j"]', 'poles = ["4j", "-4j"]'),
        "controller.poles",
    ),
    HostileCase(
        "pole-without-conjugate",
        "structure",
        _edit('poles = ["-6+4j", "-6-4j"]', 'poles = ["-6+4j", "-6+4j"]'),
        "controller.poles",
    ),
    HostileCase(
        "non-square-A",
        "structure",
        _edit('A = [[0, 1], [0, "-c/m"]]', "A = [[0, 1, 0], [0, 0, 1]]"),
        "plant.A",
    ),
    HostileCase(
        "ragged-A",
        "structure",
        _edit('A = [[0, 1], [0, "-c/m"]]', "A = [[0, 1], [0]]"),
        "plant.A[1]",
    ),
    HostileCase("empty-A", "structure", _edit('A = [[0, 1], [0, "-c/m"]]', "A = []"), "plant.A"),
    HostileCase(
        "B-wrong-rows", "structure", _edit('B = [[0], ["kf/m"]]', "B = [[0], [1], [2]]"), "plant.B"
    ),
    HostileCase(
        "C-wrong-columns", "structure", _edit("C = [[1, 0]]", "C = [[1, 0, 0]]"), "plant.C"
    ),
    HostileCase(
        "D-wrong-shape", "structure", _edit("C = [[1, 0]]", "C = [[1, 0]]\nD = [[0, 0]]"), "plant.D"
    ),
    HostileCase(
        "tracking-unknown-output",
        "structure",
        _append('\n[tracking]\noutput = "depth"\n'),
        "tracking.output",
    ),
    HostileCase("undeclared-parameter", "structure", _expr("kf/mass"), _B),
    HostileCase(
        "uncontrollable",
        "structure",
        _edit('B = [[0], ["kf/m"]]', 'B = [["kf/m"], [0]]'),
        "plant",
        cli=True,
    ),
    HostileCase("unobservable", "structure", _edit("C = [[1, 0]]", "C = [[0, 1]]"), "plant"),
    HostileCase("division-by-zero-at-values", "structure", _expr("kf/(m - 1.8)"), _B),
    HostileCase("root-of-negative-at-values", "structure", _expr("sqrt(m - 2)"), _B),
    HostileCase("log-of-zero-at-values", "structure", _expr("log(m - 1.8)"), _B),
    HostileCase(
        "not-utf8",
        "structure",
        _raw(BASE.encode() + b"\n# \xff\xfe\n"),
        "not UTF-8",
        cli=True,
        where="message",
    ),
    HostileCase(
        "random-binary", "structure", _raw(bytes(range(256)) * 4), "not UTF-8", where="message"
    ),
    HostileCase("nul-byte", "structure", _raw(BASE.encode() + b"\x00"), "line 23", where="message"),
    HostileCase(
        "byte-order-mark",
        "structure",
        _raw(b"\xef\xbb\xbf" + BASE.encode()),
        "line 1",
        where="message",
    ),
)
