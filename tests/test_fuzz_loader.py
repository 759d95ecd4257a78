"""Property tests of the design-file loader with random documents and random bytes.

The property is the contract of the command line (``symbolic/cli.py``): for
any input, ``parse_design`` and ``derive`` either return or raise a
``GainsmithError`` subclass; nothing else escapes, and each call is quick.

Documents come from a grammar of gainsmith's own keys (the table modules of ``symbolic/input/``)
with values that are right most of the time and wrong some of the time: numbers
of every kind (NaN, infinities, huge integers), strings, expression-like strings
built from random tokens (names, operators, functions, pieces of Python), nested
arrays, inline tables, TOML dates.  About one document in five is a valid design,
so ``derive`` runs often.  Raw bytes and byte-level mutations of a valid file
test the layers below the grammar (UTF-8, TOML).

Time: each call must take under 1 s of CPU (this process and the forked
symbolic stages together, so that a busy machine does not fail the test) and
under 10 s of wall time (a hang guard).  Both limits are our own choice (common
practice, no source).

Example counts: ``GAINSMITH_FUZZ_EXAMPLES`` (default 300 for the ordinary run).
The copies marked ``slow`` default to 10,000 examples::

    GAINSMITH_FUZZ_EXAMPLES=10000 python -m pytest -m slow tests/test_fuzz_loader.py
"""

from __future__ import annotations

import gc
import json
import math
import os
import resource
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from symbolic import GainsmithError, derive, parse_design

from .hostile.corpus import BASE

CPU_LIMIT = 1.0  # s of CPU per loader call (common practice, no source)
#: ``derive`` of an accepted random design does real work (symbolic stages, SciPy); its limit is
#: a hang guard, not the loader's 1 s (a loaded CI machine measured 1.16-1.35 s).
DERIVE_CPU_LIMIT = 5.0
WALL_LIMIT = 10.0  # s of wall time per call: a hang guard
#: derive runs its symbolic stages in this process (budget 0): an exception there then
#: reaches the test instead of becoming a "failed" note in a forked child, and no fork
#: per call keeps the default run short.  The CPU limit stands in for the budget.
DERIVE_BUDGET = 0


def _fuzz_settings(default_examples: str) -> settings:
    return settings(
        max_examples=int(os.environ.get("GAINSMITH_FUZZ_EXAMPLES", default_examples)),
        deadline=None,
        database=None,  # write nothing into the checkout
        suppress_health_check=[
            HealthCheck.too_slow,
            HealthCheck.data_too_large,
            HealthCheck.filter_too_much,
        ],
    )


DEFAULT = _fuzz_settings("300")
FULL = _fuzz_settings("10000")


# --------------------------------------------------------------------------
# Timing
# --------------------------------------------------------------------------
def _cpu() -> float:
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    return time.process_time() + children.ru_utime + children.ru_stime


_COUNTS: dict[str, float] = {"documents": 0, "parsed": 0, "derived": 0, "slowest": 0.0}
_SLOWEST: dict[str, object] = {"input": None, "call": ""}
_CURRENT: dict[str, object] = {"input": None}


def _timed(what: str, call: Callable[[], Any]) -> Any:
    """Run `call`; only GainsmithError may escape; check the time limits.

    The cyclic garbage collector is paused during the call: after thousands of
    examples a full collection of the test process's heap can take seconds, and
    that time belongs to the test run, not to the call.
    """
    gc.disable()
    cpu0, wall0 = _cpu(), time.perf_counter()
    try:
        return call()
    finally:
        cpu, wall = _cpu() - cpu0, time.perf_counter() - wall0
        gc.enable()
        if cpu > _COUNTS["slowest"]:
            _COUNTS["slowest"] = cpu
            _SLOWEST.update(input=_CURRENT["input"], call=what)
        limit = DERIVE_CPU_LIMIT if "derive" in what else CPU_LIMIT
        assert cpu < limit, f"{what} used {cpu:.2f} s of CPU (limit {limit} s)"
        assert wall < WALL_LIMIT, f"{what} took {wall:.2f} s (hang guard {WALL_LIMIT} s)"


def _check_document(text: str | bytes) -> None:
    _COUNTS["documents"] += 1
    _CURRENT["input"] = text
    try:
        design = _timed("parse_design", lambda: parse_design(text, "<fuzz>"))
    except GainsmithError:
        return
    _COUNTS["parsed"] += 1
    try:
        result = _timed("derive", lambda: derive(design, budget=DERIVE_BUDGET))
    except GainsmithError:
        return
    _COUNTS["derived"] += 1
    failed = [note for note in result.notes if "failed" in note]
    assert not failed, f"a symbolic stage failed: {failed}"


# --------------------------------------------------------------------------
# A small TOML writer (inline tables; verbatim pieces for dates and junk)
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Verbatim:
    """Text written into the document as is (a TOML date, or deliberate junk)."""

    text: str


_BARE_KEY = set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")


def _key(name: str) -> str:
    return name if name and set(name) <= _BARE_KEY else json.dumps(name, ensure_ascii=False)


def _value(v: Any) -> str:
    if isinstance(v, Verbatim):
        return v.text
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def _document(top: dict[str, Any], headers: bool) -> str:
    """Top-level scalars first, then each table as a [header] or as an inline table."""
    lines = [f"{_key(k)} = {_value(v)}" for k, v in top.items() if not isinstance(v, dict)]
    for k, v in top.items():
        if not isinstance(v, dict):
            continue
        if headers:
            lines.append(f"[{_key(k)}]")
            lines.extend(f"{_key(kk)} = {_value(vv)}" for kk, vv in v.items())
        else:
            lines.insert(0, f"{_key(k)} = {_value(v)}")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------
# The grammar
# --------------------------------------------------------------------------
GOOD_NAMES = ["m", "k", "c", "kf", "J1", "tau", "g_0"]
BAD_NAMES = ["1x", "s", "e", "I", "sqrt", "pi", "lambda", "a__b", "k f", "μ", "", "x" * 70]
TOKENS = [
    *GOOD_NAMES,
    "q",
    "2",
    "0",
    "0.5",
    "1e-3",
    "1e15",
    "1e16",
    "123456789012345678",
    "+",
    "-",
    "*",
    "/",
    "**",
    "(",
    ")",
    ",",
    "sqrt(",
    "exp(",
    "log(",
    "sin(",
    "cosh(",
    "atan(",
    "abs(",
    "pi",
    "j",
    "1j",
    "__import__",
    "__class__",
    ".",
    "[",
    "]",
    "'",
    '"',
    ":=",
    "lambda:",
    "for",
    "in",
    "if",
    "else",
    "f'{",
    "}",
    "*",
    "**",
    ";",
    "\n",
    "\\",
    "#",
    "nan",
    "inf",
    "oo",
    "zoo",
    "E",
    "I",
    "𝑚",
    "\u202e",
    "\x00",
]

leaf = st.one_of(
    st.integers(),
    st.integers(min_value=-(10**30), max_value=10**30),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.text(max_size=30),
    st.sampled_from(
        [Verbatim("1979-05-27"), Verbatim("07:32:00"), Verbatim("1979-05-27T07:32:00Z")]
    ),
)
junk = st.recursive(
    leaf,
    lambda inner: st.one_of(
        st.lists(inner, max_size=4),
        st.dictionaries(
            st.sampled_from(GOOD_NAMES + BAD_NAMES + ["value", "name"]), inner, max_size=3
        ),
    ),
    max_leaves=12,
)
expression_text = st.lists(st.sampled_from(TOKENS), min_size=1, max_size=12).map("".join)
#: Short decimals: most random floats lie outside the loader's magnitude limits (1e-15 to
#: 1e15), and short ones keep the plants well conditioned often enough to be derived.
short_decimal = st.integers(min_value=-400, max_value=400).map(lambda k: k / 8)
nonzero_decimal = st.integers(min_value=1, max_value=400).map(lambda k: k / 8)
any_number = st.one_of(
    short_decimal,
    st.integers(min_value=-50, max_value=50),
    st.sampled_from(["0.25", "2.5e-3", "-1e-6"]),
    st.floats(allow_nan=True, allow_infinity=True),
)


class Grammar:
    """Draws the parts of a design; `strict` keeps every value well formed.

    Strict documents differ from valid designs only where the physics can still
    go wrong (an uncontrollable plant at the drawn values, a specification that
    cannot be met), so ``derive`` sees many of them.  Loose documents put junk
    anywhere, now and then.
    """

    def __init__(self, draw, strict: bool):
        self.draw = draw
        self.strict = strict

    def rare(self, one_in: int) -> bool:
        """True about once in `one_in` draws in loose documents, never in strict ones."""
        if self.strict:
            return False
        return self.draw(st.sampled_from([False] * (one_in - 1) + [True]))

    def value(self, good: st.SearchStrategy) -> Any:
        """A draw from `good`; now and then, in loose documents, junk instead."""
        return self.draw(junk) if self.rare(8) else self.draw(good)

    def entry(self, names: list[str], nonzero: bool = False) -> Any:
        if self.strict:
            choices = [nonzero_decimal if nonzero else short_decimal]
            if names:
                first = names[0]
                formulas = [f"{a}/{b}" for a in names for b in names]
                formulas += [f"-{first}", f"sqrt({first})", f"1/(1 + {first})"]
                if not nonzero:
                    formulas.append(f"{first} - {first}")
                choices.append(st.sampled_from(formulas))
            return self.draw(st.one_of(*choices))
        return self.draw(
            st.one_of(
                any_number,
                st.sampled_from(GOOD_NAMES),
                st.sampled_from(["-k/m", "1/m", "-c/m", "kf/J1", "sqrt(k/m)", "exp(-tau)", "1/3"]),
                expression_text,
                junk,
            )
        )

    def poles(self, n: int) -> list[Any]:
        out: list[Any] = []
        while len(out) < n:
            re = self.draw(st.integers(min_value=1, max_value=40)) / 2
            if n - len(out) >= 2 and self.draw(st.booleans()):
                im = self.draw(st.integers(min_value=1, max_value=30)) / 2
                out += [f"-{re}+{im}j", f"-{re}-{im}j"]
            else:
                out.append(self.draw(st.sampled_from([-re, f"-{re}"])))
        if self.rare(10):
            bad = self.draw(st.sampled_from([0, 1.5, "2j", "-1+1j", "x", "-1e400"]))
            out[self.draw(st.integers(0, n - 1))] = bad
        return out


@st.composite
def design_tables(draw, strict: bool) -> dict[str, Any]:
    g = Grammar(draw, strict)
    n = draw(st.integers(min_value=1, max_value=3))
    names = draw(st.lists(st.sampled_from(GOOD_NAMES), max_size=3, unique=True))
    if g.rare(10):
        names.append(draw(st.sampled_from(BAD_NAMES)))
    top: dict[str, Any] = {}
    if not g.rare(2):
        top["title"] = g.value(st.text(max_size=40))
    parameters: dict[str, Any] = {}
    for name in names:
        spec: dict[str, Any] = {"value": g.value(nonzero_decimal if strict else any_number)}
        if draw(st.booleans()):
            spec["unit"] = g.value(st.sampled_from(["kg", "N/m", "A"]))
        if g.rare(4):
            spec["range"] = g.value(st.lists(short_decimal, min_size=2, max_size=2))
        parameters[name] = g.value(st.just(spec))
    top["parameters"] = parameters
    # A chain of integrators with a free last row, input into the last state and the
    # first state measured: controllable and observable when b and c are not zero.
    A: list[list[Any]] = [[0] * n for _ in range(n)]
    for i in range(n - 1):
        A[i][i + 1] = 1
    A[n - 1] = [g.entry(names) for _ in range(n)]
    if g.rare(5):
        A = [[g.entry(names) for _ in range(n)] for _ in range(n)]
    B = [[0]] * (n - 1) + [[g.entry(names, nonzero=True)]]
    C = [[g.entry(names, nonzero=True)] + [0] * (n - 1)]
    plant: dict[str, Any] = {
        "A": g.value(st.just(A)),
        "B": g.value(st.just(B)),
        "C": g.value(st.just(C)),
    }
    if g.rare(6):
        plant["D"] = g.value(st.just([[0]]))
    if g.rare(5):
        plant["states"] = g.value(
            st.lists(st.sampled_from(GOOD_NAMES + BAD_NAMES), min_size=n, max_size=n)
        )
    top["plant"] = plant
    if n < 2 or draw(st.sampled_from([True, True, True, False])):
        top["controller"] = {"poles": g.value(st.just(g.poles(n)))}
    else:
        top["controller"] = {
            "overshoot_percent": g.value(st.floats(0.5, 30)),
            "settling_time": g.value(st.floats(0.05, 5)),
        }
    choice = draw(st.sampled_from(["default", "default", "factor", "poles"]))
    if choice == "factor":
        top["observer"] = {"speed_factor": g.value(st.sampled_from([2, 3.5, 5, 8]))}
    elif choice == "poles":
        top["observer"] = {"poles": g.value(st.just(g.poles(n)))}
    if g.rare(6):
        top["simulation"] = {
            "horizon": g.value(st.floats(0.1, 100)),
            "samples": g.value(st.integers(11, 3000)),
        }
    if g.rare(8):
        top["claimed"] = {"K": g.value(st.lists(short_decimal, min_size=n, max_size=n))}
    if g.rare(8):
        top["tracking"] = {"output": g.value(st.just("y1"))}
    if g.rare(10):  # an unknown or misspelt key
        top[draw(st.sampled_from(["plnat", "contoller", "options", "x"]))] = draw(junk)
    for key in ("plant", "controller"):  # a required table missing
        if g.rare(20):
            top.pop(key)
    return top


#: Two loose documents for each strict one: about a third of the inputs reach derive.
documents = st.one_of(
    st.builds(_document, design_tables(strict=False), st.booleans()),
    st.builds(_document, design_tables(strict=True), st.booleans()),
    st.builds(_document, design_tables(strict=False), st.booleans()),
)


@st.composite
def mutated_base(draw) -> bytes:
    """The valid base design with a few bytes replaced, inserted or deleted."""
    data = bytearray(BASE.encode())
    for _ in range(draw(st.integers(1, 6))):
        at = draw(st.integers(0, len(data) - 1))
        action = draw(st.integers(0, 2))
        if action == 0:
            data[at] = draw(st.integers(0, 255))
        elif action == 1:
            data[at:at] = draw(st.binary(min_size=1, max_size=8))
        else:
            del data[at : at + draw(st.integers(1, 8))]
    return bytes(data)


# --------------------------------------------------------------------------
# The properties (default count) and their full-count copies (slow)
# --------------------------------------------------------------------------
@DEFAULT
@given(documents)
def test_random_documents_raise_only_gainsmith_errors(text):
    _check_document(text)


@DEFAULT
@given(st.binary(max_size=3000))
def test_random_bytes_raise_only_gainsmith_errors(data):
    _check_document(data)


@DEFAULT
@given(mutated_base())
def test_mutated_files_raise_only_gainsmith_errors(data):
    _check_document(data)


@pytest.mark.slow
@FULL
@given(documents)
def test_random_documents_full_count(text):
    _check_document(text)


@pytest.mark.slow
@FULL
@given(st.binary(max_size=3000))
def test_random_bytes_full_count(data):
    _check_document(data)


@pytest.mark.slow
@FULL
@given(mutated_base())
def test_mutated_files_full_count(data):
    _check_document(data)


def test_writer_produces_the_designs_it_is_given():
    """The TOML writer above round-trips a valid design (so the grammar's valid documents are)."""
    top = {
        "title": "Writer check",
        "parameters": {"m": {"value": 2.0, "unit": "kg"}},
        "plant": {"A": [[0, 1], [0, 0]], "B": [[0], ["1/m"]], "C": [[1, 0]]},
        "controller": {"poles": ["-2+2j", "-2-2j"]},
    }
    for headers in (True, False):
        design = parse_design(_document(top, headers))
        assert design.title == "Writer check"
        assert design.plant.order == 2


@pytest.fixture(scope="module", autouse=True)
def _summary(request):
    yield
    if not _COUNTS["documents"]:
        return
    line = (
        f"loader fuzz: {_COUNTS['documents']} inputs, {_COUNTS['parsed']} parsed,"
        f" {_COUNTS['derived']} derived, slowest call {_COUNTS['slowest']:.2f} s CPU"
        f" ({_SLOWEST['call']} of {str(_SLOWEST['input'])[:300]!r})"
    )
    reporter = request.config.pluginmanager.get_plugin("terminalreporter")
    capture = request.config.pluginmanager.get_plugin("capturemanager")
    if reporter is None or capture is None:  # pragma: no cover
        print(line)
        return
    with capture.global_and_fixture_disabled():
        reporter.write_line("")
        reporter.write_line(line)
