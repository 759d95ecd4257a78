"""Reading and validating a design file.

A design file is TOML data in gainsmith's own format (documented in the
README).  :func:`load_design` turns it into a frozen :class:`Design`; every
problem found is reported as one :class:`~symbolic.runtime.errors.DesignFileError`
naming the file, the dotted key and the problem.  Nothing in the file is
executed: expression strings go through the whitelist parser in
:mod:`symbolic.input.expressions`.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import re
import reprlib
import tomllib
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, NoReturn

import sympy as sp
from sympy.polys.matrices import DomainMatrix

from ..model.design import (
    DEFAULT_REMAINING_POLE_FACTOR,
    OBSERVER_KINDS,
    TRACKING_METHODS,
    Claims,
    ControllerRequest,
    Design,
    DiscreteRequest,
    ObserverRequest,
    Parameter,
    Plant,
    Signal,
    SimulationRequest,
    TrackingRequest,
)
from ..model.numbers import format_pole
from ..model.specifications import Specifications
from ..runtime.errors import DesignFileError, ExpressionError, SpecificationError, StructureError
from .expressions import check_name, parse_expression, parse_number, parse_pole

__all__ = ["load_design", "parse_design"]

MAX_FILE_BYTES = 1_000_000
MAX_PARAMETERS = 64
MAX_ORDER = 12
MAX_STRING = 2000

_TOP_KEYS = (
    "title",
    "author",
    "revision",
    "parameters",
    "plant",
    "controller",
    "observer",
    "tracking",
    "simulation",
    "claimed",
    "options",
    "discrete",
)
_PARAMETER_KEYS = ("value", "unit", "description", "range")
_PLANT_KEYS = ("A", "B", "C", "D", "states", "inputs", "outputs")
_SIGNAL_KEYS = ("name", "unit", "description")
_CONTROLLER_KEYS = (
    "poles",
    "overshoot_percent",
    "settling_time",
    "settling_band",
    "rise_time",
    "peak_time",
    "remaining_pole_factor",
    "remaining_poles",
    "refine",
)
_OBSERVER_KEYS = ("poles", "speed_factor", "kind")
_TRACKING_KEYS = ("output", "method", "integral_pole")
_DISCRETE_KEYS = ("sample_time",)

_SIMULATION_KEYS = (
    "initial_state",
    "initial_estimate",
    "horizon",
    "samples",
    "u_max",
    "reference",
)
_CLAIMED_KEYS = ("K", "L", "reference_gain", "tolerance")
_OPTIONS_KEYS = ("symbolic_budget_seconds",)


# --------------------------------------------------------------------------
# Result objects
# --------------------------------------------------------------------------
# --------------------------------------------------------------------------
# Loading
# --------------------------------------------------------------------------
def load_design(path: str | Path, overrides: Mapping[str, str] | None = None) -> Design:
    """Read, parse and validate a design file.

    Parameters
    ----------
    path : str or Path
        The TOML design file.
    overrides : mapping, optional
        ``{parameter_name: value_text}`` replacing the file's nominal values
        (the ``--set`` option of the command line).

    Raises
    ------
    DesignFileError
        For any problem, naming the file and key.
    """
    path = Path(path)
    where = str(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise DesignFileError(f"cannot read the file ({exc.strerror or exc})", where) from exc
    if len(raw) > MAX_FILE_BYTES:
        raise DesignFileError(
            f"file is {len(raw)} bytes; design files are limited to {MAX_FILE_BYTES}", where
        )
    return parse_design(raw, where, overrides)


def parse_design(
    raw: bytes | str, where: str = "<design>", overrides: Mapping[str, str] | None = None
) -> Design:
    """Validate design-file text (see :func:`load_design`)."""
    if isinstance(raw, str):
        raw = raw.encode("utf-8", "surrogatepass")
    sha = hashlib.sha256(raw).hexdigest()
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise DesignFileError(f"not UTF-8 text (byte {exc.start})", where) from exc
    deep = _too_deep(text)
    if deep:
        raise DesignFileError(deep, where)
    declared = len(set(_PARAMETER_LINE.findall(text)))
    if declared > MAX_PARAMETERS:  # counted before parsing: a huge table costs seconds to parse
        raise DesignFileError(
            f"{declared} parameters; the limit is {MAX_PARAMETERS}", where, "parameters"
        )
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DesignFileError(f"malformed TOML: {exc}", where) from exc
    except RecursionError as exc:
        raise DesignFileError("malformed TOML: nested too deeply", where) from exc
    return _Reader(where, sha).read(data, dict(overrides or {}))


#: Deepest nesting of arrays, inline tables or dotted keys a design file may use.  Ours needs 3;
#: TOML parsers spend time quadratic in the depth of a dotted key.
MAX_NESTING = 32
# [ \t]* rather than \s*: \s* spans blank lines and made this scan quadratic
_KEY_LINE = re.compile(r"^[ \t]*(\[\[?[^\]\n]*\]\]?|[^=\n]+=)", re.M)


_PARAMETER_LINE = re.compile(r"^[ \t]*\[?[ \t]*parameters[ \t]*\.[ \t]*([^ \t.\]=]+)", re.M)


def _too_deep(text: str) -> str | None:
    """A one-line reason when the text nests deeper than :data:`MAX_NESTING`, else None."""
    depth = worst = 0
    quote = None
    for ch in text:  # brackets outside strings (approximate, conservative for our format)
        if quote:
            if ch == quote:
                quote = None
            continue
        if ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
            worst = max(worst, depth)
        elif ch in "]}":
            depth = max(0, depth - 1)
        elif ch == "\n":
            quote = None
    if worst > MAX_NESTING:
        return f"nested too deeply: arrays or tables {worst} deep; design files nest at most {MAX_NESTING}"
    for match in _KEY_LINE.finditer(text):
        dots = match.group(1).count(".")
        if dots > MAX_NESTING:
            parts = [p.strip() for p in match.group(1).strip("[]= \t").split(".")]
            return (
                f"{'.'.join(parts[:4])}...: nested too deeply: a key with {dots + 1} parts;"
                f" design files use at most {MAX_NESTING}"
            )
    return None


def _suggest(word: str, choices: Sequence[str]) -> str:
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else f"; expected one of: {', '.join(choices)}"


_REPR = reprlib.Repr()
_REPR.maxlevel = 3
_REPR.maxstring = 40
_REPR.maxother = 40


def _key_part(name: str) -> str:
    """A key from the file as quoted in a message: at most 64 characters."""
    return name if len(name) <= 64 else name[:61] + "..."


def _short(value: object) -> str:
    """A bounded repr for messages: depth and length limited, never recursive blow-up."""
    text = _REPR.repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


class _Reader:
    """Validates one parsed TOML document; each method handles one table."""

    def __init__(self, where: str, sha: str):
        self.where = where
        self.sha = sha

    def fail(
        self, key: str, problem: str, cls: type[DesignFileError] = DesignFileError
    ) -> NoReturn:
        raise cls(problem, self.where, key)

    # -- generic helpers ---------------------------------------------------
    def table(self, data: Any, key: str, allowed: Sequence[str], required: bool = True) -> dict:
        if data is None:
            if required:
                self.fail(key, "this table is required")
            return {}
        if not isinstance(data, dict):
            self.fail(key, f"expected a table, got {type(data).__name__}")
        for name in data:
            if name not in allowed:
                part = _key_part(name)
                self.fail(f"{key}.{part}" if key else part, "unknown key" + _suggest(name, allowed))
        return data

    def string(self, value: Any, key: str, default: str = "") -> str:
        if value is None:
            return default
        if not isinstance(value, str):
            self.fail(key, f"expected a string, got {type(value).__name__}")
        if len(value) > MAX_STRING:
            self.fail(key, f"string of {len(value)} characters; the limit is {MAX_STRING}")
        return value

    def number(
        self,
        value: Any,
        key: str,
        *,
        positive: bool = False,
        minimum: float | None = None,
        maximum: float | None = None,
    ) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            self.fail(key, f"expected a number, got {type(value).__name__} {_short(value)}")
        if isinstance(value, int) and abs(value) > 10**15:
            self.fail(key, "number too large (more than 15 digits)")
        x = float(value)
        if not math.isfinite(x):
            self.fail(key, f"expected a finite number, got {value}")
        if positive and x <= 0:
            self.fail(key, f"must be positive, got {value}")
        if minimum is not None and x < minimum:
            self.fail(key, f"must be at least {minimum}, got {value}")
        if maximum is not None and x > maximum:
            self.fail(key, f"must be at most {maximum}, got {value}")
        return x

    def exact(self, value: Any, key: str) -> sp.Rational:
        try:
            return parse_number(value)
        except ExpressionError as exc:
            self.fail(key, str(exc))

    def number_list(self, value: Any, key: str, length: int | None = None) -> tuple[float, ...]:
        if not isinstance(value, list):
            self.fail(key, f"expected a list of numbers, got {type(value).__name__}")
        if length is not None and len(value) != length:
            self.fail(key, f"expected {length} numbers, got {len(value)}")
        return tuple(self.number(v, f"{key}[{i}]") for i, v in enumerate(value))

    # -- top level ---------------------------------------------------------
    def read(self, data: dict, overrides: dict[str, str]) -> Design:
        self.table(data, "", _TOP_KEYS)
        title = self.string(data.get("title"), "title", "Untitled design")
        author = self.string(data.get("author"), "author")
        revision = self.string(data.get("revision"), "revision")
        parameters = self.parameters(data.get("parameters", {}), overrides)
        symbols = {p.name: p.symbol for p in parameters}
        plant = self.plant(data.get("plant"), symbols)
        controller = self.controller(data.get("controller"), plant)
        observer = self.observer(data.get("observer"), plant)
        tracking = self.tracking(data.get("tracking"), plant)
        discrete = self.discrete(data.get("discrete"))
        simulation = self.simulation(data.get("simulation"), plant)
        claims = self.claims(data.get("claimed"), plant)
        options = self.table(data.get("options"), "options", _OPTIONS_KEYS, required=False)
        budget = 10.0
        if "symbolic_budget_seconds" in options:
            budget = self.number(
                options["symbolic_budget_seconds"],
                "options.symbolic_budget_seconds",
                positive=True,
                maximum=3600,
            )
        return Design(
            path=self.where,
            sha256=self.sha,
            title=title,
            author=author,
            revision=revision,
            parameters=parameters,
            plant=plant,
            controller=controller,
            observer=observer,
            tracking=tracking,
            simulation=simulation,
            claims=claims,
            symbolic_budget_seconds=budget,
            discrete=discrete,
            overrides=tuple(f"{k}={v}" for k, v in overrides.items()),
        )

    # -- [parameters] ------------------------------------------------------
    def parameters(self, data: Any, overrides: dict[str, str]) -> tuple[Parameter, ...]:
        if not isinstance(data, dict):
            self.fail(
                "parameters", f"expected a table of parameter tables, got {type(data).__name__}"
            )
        if len(data) > MAX_PARAMETERS:
            self.fail("parameters", f"{len(data)} parameters; the limit is {MAX_PARAMETERS}")
        out = []
        for name, spec in data.items():
            key = f"parameters.{_key_part(name)}"
            try:
                check_name(name)
            except ExpressionError as exc:
                self.fail(key, f"invalid parameter name: {exc}")
            if not isinstance(spec, dict):
                self.fail(key, "expected a table with at least 'value'")
            self.table(spec, key, _PARAMETER_KEYS)
            if "value" not in spec:
                self.fail(f"{key}.value", "missing: every parameter needs a value")
            value = self.exact(spec["value"], f"{key}.value")
            value_key = f"{key}.value"
            value_text = f"nominal {_short(spec['value'])}"
            if name in overrides:
                text = overrides[name]
                try:
                    value = parse_number(text)
                except ExpressionError as exc:
                    raise DesignFileError(f"--set {name}={text}: {exc}", self.where, key) from exc
                value_key = f"--set {_key_part(name)}"
                value_text = f"value {_key_part(text)}"
            rng = None
            if "range" in spec:
                r = spec["range"]
                if not isinstance(r, list) or len(r) != 2:
                    self.fail(f"{key}.range", "expected [low, high]")
                lo = self.exact(r[0], f"{key}.range[0]")
                hi = self.exact(r[1], f"{key}.range[1]")
                if lo > hi:
                    self.fail(f"{key}.range", f"low {r[0]} is greater than high {r[1]}")
                if not lo <= value <= hi:
                    where = "" if value_key.endswith(".value") else f" declared at {key}.range"
                    self.fail(
                        value_key,
                        f"{value_text} lies outside its range "
                        f"[{_short(r[0])}, {_short(r[1])}]{where}",
                    )
                rng = (lo, hi)
            out.append(
                Parameter(
                    name=name,
                    symbol=sp.Symbol(name, real=True),
                    value=value,
                    unit=self.string(spec.get("unit"), f"{key}.unit"),
                    description=self.string(spec.get("description"), f"{key}.description"),
                    range=rng,
                )
            )
        unknown = set(overrides) - {p.name for p in out}
        if unknown:
            name = sorted(unknown)[0]
            self.fail(
                f"--set {name}",
                "not a declared parameter" + _suggest(name, [p.name for p in out] or ["(none)"]),
            )
        return tuple(out)

    # -- [plant] -----------------------------------------------------------
    def matrix(
        self, value: Any, key: str, symbols: Mapping[str, sp.Symbol], flat_as: str
    ) -> sp.ImmutableMatrix:
        if isinstance(value, int | float | str) and not isinstance(value, bool):
            value = [[value]]
        if not isinstance(value, list) or not value:
            self.fail(key, "expected a matrix written as a list of rows")
        if all(not isinstance(row, list) for row in value):
            # a flat list: a column for B, a row for C
            value = [[v] for v in value] if flat_as == "column" else [value]
        rows = []
        width = None
        if len(value) > MAX_ORDER:
            self.fail(key, f"{len(value)} rows; gainsmith handles at most {MAX_ORDER}")
        for i, row in enumerate(value):
            if not isinstance(row, list):
                self.fail(f"{key}[{i}]", "expected a row (a list); mix of rows and numbers")
            if width is None:
                width = len(row)
            if len(row) != width or width == 0:
                self.fail(f"{key}[{i}]", f"row has {len(row)} entries, expected {width}")
            if width > MAX_ORDER:
                self.fail(key, f"{width} columns; gainsmith handles at most {MAX_ORDER}")
            entries = []
            for j, entry in enumerate(row):
                entries.append(self.entry(entry, f"{key}[{i}][{j}]", symbols))
            rows.append(entries)
        return sp.ImmutableMatrix(rows)

    def entry(self, entry: Any, key: str, symbols: Mapping[str, sp.Symbol]) -> sp.Expr:
        if isinstance(entry, bool) or not isinstance(entry, int | float | str):
            self.fail(key, f"expected a number or an expression string, got {type(entry).__name__}")
        try:
            if isinstance(entry, str):
                return parse_expression(entry, symbols)
            return parse_number(entry)
        except ExpressionError as exc:
            self.fail(key, str(exc))

    def signals(self, value: Any, key: str, count: int, prefix: str) -> tuple[Signal, ...]:
        if value is None:
            return tuple(Signal(f"{prefix}{i + 1}") for i in range(count))
        if not isinstance(value, list):
            self.fail(key, "expected a list of names or of {name, unit} tables")
        if len(value) != count:
            self.fail(key, f"expected {count} entries (one per {prefix}), got {len(value)}")
        out = []
        seen = set()
        for i, item in enumerate(value):
            k = f"{key}[{i}]"
            if isinstance(item, str):
                item = {"name": item}
            if not isinstance(item, dict):
                self.fail(k, "expected a name or a table with 'name' and 'unit'")
            self.table(item, k, _SIGNAL_KEYS)
            name = self.string(item.get("name"), f"{k}.name")
            try:
                check_name(name)
            except ExpressionError as exc:
                self.fail(f"{k}.name", f"invalid name: {exc}")
            if name in seen:
                self.fail(f"{k}.name", f"duplicate name '{name}'")
            seen.add(name)
            out.append(
                Signal(
                    name,
                    self.string(item.get("unit"), f"{k}.unit"),
                    self.string(item.get("description"), f"{k}.description"),
                )
            )
        return tuple(out)

    def plant(self, data: Any, symbols: Mapping[str, sp.Symbol]) -> Plant:
        data = self.table(data, "plant", _PLANT_KEYS)
        for name in ("A", "B", "C"):
            if name not in data:
                self.fail(f"plant.{name}", "missing: the plant needs A, B and C")
        A = self.matrix(data["A"], "plant.A", symbols, "row")
        n = A.shape[0]
        if A.shape != (n, n):
            self.fail("plant.A", f"must be square, got {A.shape[0]}x{A.shape[1]}")
        if n < 1:
            self.fail("plant.A", "empty")
        B = self.matrix(data["B"], "plant.B", symbols, "column")
        if B.shape[0] != n:
            self.fail("plant.B", f"has {B.shape[0]} rows; A is {n}x{n} so B needs {n}")
        C = self.matrix(data["C"], "plant.C", symbols, "row")
        if C.shape[1] != n:
            self.fail("plant.C", f"has {C.shape[1]} columns; A is {n}x{n} so C needs {n}")
        m, p = B.shape[1], C.shape[0]
        if m > n:
            self.fail("plant.B", f"{m} inputs for {n} states; at most {n}")
        if p > n:
            self.fail("plant.C", f"{p} outputs for {n} states; at most {n}")
        if "D" in data:
            D = self.matrix(data["D"], "plant.D", symbols, "row")
            if D.shape != (p, m):
                self.fail(
                    "plant.D", f"is {D.shape[0]}x{D.shape[1]}; expected {p}x{m} (outputs x inputs)"
                )
        else:
            D = sp.ImmutableMatrix.zeros(p, m)
        return Plant(
            A=A,
            B=B,
            C=C,
            D=D,
            states=self.signals(data.get("states"), "plant.states", n, "x"),
            inputs=self.signals(data.get("inputs"), "plant.inputs", m, "u"),
            outputs=self.signals(data.get("outputs"), "plant.outputs", p, "y"),
        )

    # -- poles -------------------------------------------------------------
    def poles(self, value: Any, key: str, *, allow_empty: bool = False) -> tuple[sp.Expr, ...]:
        if not isinstance(value, list):
            self.fail(key, 'expected a list of poles such as ["-4+3j", "-4-3j"]')
        if not value and not allow_empty:
            self.fail(key, "empty list of poles")
        if len(value) > MAX_ORDER:
            self.fail(
                key, f"{len(value)} poles; gainsmith handles plants of order {MAX_ORDER} at most"
            )
        out = []
        for i, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, int | float | str):
                self.fail(
                    f"{key}[{i}]", f'expected a number or a string like "-4+3j", got {_short(v)}'
                )
            try:
                out.append(parse_pole(v))
            except ExpressionError as exc:
                self.fail(f"{key}[{i}]", str(exc))
        # conjugate pairs must be present with equal multiplicity
        remaining = list(out)
        for p in out:
            im = sp.im(p)
            if im != 0 and remaining.count(p) != remaining.count(sp.conjugate(p)):
                self.fail(
                    key,
                    f"pole {format_pole(p, None)} has no matching conjugate"
                    f" {format_pole(sp.conjugate(p), None)}",
                )
        for p in out:
            if sp.re(p) >= 0:
                self.fail(
                    key,
                    f"pole {format_pole(p, None)} is not in the open left half-plane: the loop"
                    " would not be stable",
                )
        return tuple(out)

    # -- [controller] --------------------------------------------------------
    def controller(self, data: Any, plant: Plant) -> ControllerRequest:
        data = self.table(data, "controller", _CONTROLLER_KEYS)
        n = plant.order
        spec_keys = [
            k for k in ("overshoot_percent", "settling_time", "rise_time", "peak_time") if k in data
        ]
        factor = DEFAULT_REMAINING_POLE_FACTOR
        if "remaining_pole_factor" in data:
            factor = self.number(
                data["remaining_pole_factor"],
                "controller.remaining_pole_factor",
                minimum=1.0,
                maximum=100.0,
            )
        if "poles" in data:
            if spec_keys:
                self.fail(
                    "controller",
                    f"give either poles or specifications, not both (found poles and {spec_keys[0]})",
                    SpecificationError,
                )
            for k in ("settling_band", "remaining_pole_factor", "remaining_poles", "refine"):
                if k in data:
                    self.fail(
                        f"controller.{k}",
                        "only meaningful with specifications, not with explicit poles",
                    )
            poles = self.poles(data["poles"], "controller.poles")
            if len(poles) != n:
                self.fail(
                    "controller.poles",
                    f"{len(poles)} pole(s) for a plant of order {n}: give exactly {n}",
                )
            return ControllerRequest(poles=poles)
        if not spec_keys:
            self.fail(
                "controller",
                "give poles = [...] or at least one specification (overshoot_percent, settling_time, rise_time, peak_time)",
            )
        if n < 2:
            self.fail(
                "controller",
                "specifications need a plant of order 2 or more; give poles for a first-order plant",
            )
        kwargs: dict[str, float] = {}
        for k in spec_keys:
            kwargs[k] = self.number(data[k], f"controller.{k}")
        if "settling_band" in data:
            if "settling_time" not in data:
                self.fail("controller.settling_band", "given without settling_time")
            kwargs["settling_band"] = self.number(data["settling_band"], "controller.settling_band")
        try:
            spec = Specifications(**kwargs)
        except SpecificationError as exc:
            # Specifications names a single key ("rise_time") or, for several
            # problems at once, "controller" itself; do not double the prefix.
            key = f"controller.{exc.key}" if exc.key and exc.key != "controller" else "controller"
            raise SpecificationError(exc.problem, self.where, key) from exc
        remaining = None
        if "remaining_poles" in data:
            remaining = self.poles(
                data["remaining_poles"], "controller.remaining_poles", allow_empty=True
            )
            if len(remaining) != n - 2:
                self.fail(
                    "controller.remaining_poles",
                    f"{len(remaining)} poles given; the dominant pair takes 2 of {n}, so give {n - 2}",
                )
        refine = data.get("refine", True)
        if not isinstance(refine, bool):
            self.fail("controller.refine", f"expected true or false, got {_short(refine)}")
        return ControllerRequest(
            specifications=spec,
            remaining_pole_factor=factor,
            remaining_poles=remaining,
            refine=refine,
        )

    # -- [observer] ----------------------------------------------------------
    def observer(self, data: Any, plant: Plant) -> ObserverRequest:
        data = self.table(data, "observer", _OBSERVER_KEYS, required=False)
        kind = self.choice(data.get("kind"), "observer.kind", OBSERVER_KINDS, "full")
        if kind == "reduced":
            # exact rank over the field of rational functions: outputs that depend on each
            # other for every parameter value (a repeated or combined row)
            rank = DomainMatrix.from_Matrix(sp.Matrix(plant.C)).to_field().rank()
            if rank < plant.n_outputs:
                self.fail(
                    "plant.C",
                    f"has rank {rank} of {plant.n_outputs} for every parameter value: a"
                    " reduced-order observer needs independent outputs (remove the dependent"
                    ' row, or use observer.kind = "full")',
                    StructureError,
                )
        if "poles" in data and "speed_factor" in data:
            self.fail("observer", "give either poles or speed_factor, not both")
        if "poles" in data:
            n, rest = plant.order, plant.order - plant.n_outputs
            reduced = kind == "reduced"
            poles = self.poles(data["poles"], "observer.poles", allow_empty=reduced and rest == 0)
            if reduced and len(poles) == rest:
                # only the reduced-order observer's poles: the full-order observer (derived
                # for comparison) keeps the default speed-factor rule
                return ObserverRequest(kind=kind, reduced_poles=poles)
            if len(poles) != n:
                expected = (
                    f"give {n} (full-order observer; the reduced-order one takes {rest} of them)"
                    f" or {rest} (reduced-order observer only)"
                    if reduced
                    else f"give exactly {n}"
                )
                self.fail(
                    "observer.poles",
                    f"{len(poles)} pole(s) for a plant of order {n}: {expected}",
                )
            return ObserverRequest(poles=poles, speed_factor_is_default=False, kind=kind)
        if "speed_factor" in data:
            f = self.number(
                data["speed_factor"], "observer.speed_factor", minimum=0.1, maximum=100.0
            )
            return ObserverRequest(speed_factor=f, speed_factor_is_default=False, kind=kind)
        return ObserverRequest(kind=kind)

    def choice(self, value: Any, key: str, allowed: Sequence[str], default: str) -> str:
        if value is None:
            return default
        text = self.string(value, key)
        if text not in allowed:
            self.fail(key, f"unknown value '{text}'" + _suggest(text, allowed))
        return text

    # -- [tracking] ----------------------------------------------------------
    def tracking(self, data: Any, plant: Plant) -> TrackingRequest:
        data = self.table(data, "tracking", _TRACKING_KEYS, required=False)
        output = 0
        if "output" in data:
            name = self.string(data["output"], "tracking.output")
            names = [s.name for s in plant.outputs]
            if name not in names:
                self.fail("tracking.output", f"'{name}' is not an output" + _suggest(name, names))
            output = names.index(name)
        method = self.choice(
            data.get("method"), "tracking.method", TRACKING_METHODS, "reference_gain"
        )
        pole = None
        if "integral_pole" in data:
            key = "tracking.integral_pole"
            if method != "integral":
                self.fail(key, 'only meaningful with method = "integral"')
            value = data["integral_pole"]
            if isinstance(value, bool) or not isinstance(value, int | float | str):
                self.fail(key, f'expected a number or a string like "-12", got {_short(value)}')
            try:
                pole = parse_pole(value)
            except ExpressionError as exc:
                self.fail(key, str(exc))
            if sp.im(pole) != 0:
                self.fail(
                    key,
                    "must be real (integral action adds one real pole),"
                    f" got {format_pole(pole, None)}",
                )
            if pole >= 0:
                self.fail(key, f"must be negative for a stable loop, got {format_pole(pole, None)}")
        return TrackingRequest(output=output, method=method, integral_pole=pole)

    # -- [discrete] ----------------------------------------------------------
    def discrete(self, data: Any) -> DiscreteRequest | None:
        if data is None:
            return None
        data = self.table(data, "discrete", _DISCRETE_KEYS)
        key = "discrete.sample_time"
        if "sample_time" not in data:
            self.fail(key, "missing: the [discrete] table needs sample_time (seconds)")
        self.number(data["sample_time"], key, positive=True, maximum=1e6)
        return DiscreteRequest(self.exact(data["sample_time"], key))

    # -- [simulation] --------------------------------------------------------
    def simulation(self, data: Any, plant: Plant) -> SimulationRequest:
        data = self.table(data, "simulation", _SIMULATION_KEYS, required=False)
        n = plant.order
        x0 = xh0 = None
        if "initial_state" in data:
            x0 = self.number_list(data["initial_state"], "simulation.initial_state", n)
        if "initial_estimate" in data:
            xh0 = self.number_list(data["initial_estimate"], "simulation.initial_estimate", n)
        horizon = None
        if "horizon" in data:
            horizon = self.number(data["horizon"], "simulation.horizon", positive=True, maximum=1e6)
        samples = 2001
        if "samples" in data:
            s = data["samples"]
            if isinstance(s, bool) or not isinstance(s, int):
                self.fail("simulation.samples", f"expected a whole number, got {_short(s)}")
            if not 11 <= s <= 200_001:
                self.fail("simulation.samples", f"must be between 11 and 200001, got {s}")
            samples = s
        u_max = None
        if "u_max" in data:
            u_max = self.number(data["u_max"], "simulation.u_max", positive=True)
        reference = 1.0
        if "reference" in data:
            reference = self.number(data["reference"], "simulation.reference")
            if reference == 0:
                self.fail("simulation.reference", "the reference step must not be zero")
        return SimulationRequest(x0, xh0, horizon, samples, u_max, reference)

    # -- [claimed] -----------------------------------------------------------
    def gain_claim(
        self, value: Any, key: str, rows: int, cols: int
    ) -> tuple[tuple[float, ...], ...]:
        """Accept a flat list or a matrix; return rows x cols."""
        if isinstance(value, bool) or not isinstance(value, list) or not value:
            self.fail(key, f"expected a list of {rows * cols} numbers or a {rows}x{cols} matrix")
        if all(isinstance(v, list) for v in value):
            flat = [x for row in value for x in row]
            shape = (len(value), len(value[0]) if value else 0)
            if any(len(r) != shape[1] for r in value):
                self.fail(key, "rows of different lengths")
            vector_ok = 1 in (rows, cols) and 1 in shape and len(flat) == rows * cols
            if shape != (rows, cols) and not vector_ok:
                self.fail(key, f"is {shape[0]}x{shape[1]}; expected {rows}x{cols}")
        elif any(isinstance(v, list) for v in value):
            self.fail(key, "mix of numbers and rows")
        else:
            flat = value
            if len(flat) != rows * cols:
                self.fail(key, f"{len(flat)} numbers; expected {rows * cols} ({rows}x{cols})")
        nums = [self.number(v, f"{key}[{i}]") for i, v in enumerate(flat)]
        return tuple(tuple(nums[r * cols : (r + 1) * cols]) for r in range(rows))

    def claims(self, data: Any, plant: Plant) -> Claims | None:
        if data is None:
            return None
        data = self.table(data, "claimed", _CLAIMED_KEYS)
        n, m, p = plant.order, plant.n_inputs, plant.n_outputs
        K = self.gain_claim(data["K"], "claimed.K", m, n) if "K" in data else None
        L = self.gain_claim(data["L"], "claimed.L", n, p) if "L" in data else None
        N = None
        if "reference_gain" in data:
            v = data["reference_gain"]
            if isinstance(v, list):
                flat = [x for row in v for x in (row if isinstance(row, list) else [row])]
                if len(flat) != 1:
                    self.fail("claimed.reference_gain", f"expected one number, got {len(flat)}")
                v = flat[0]
            N = self.number(v, "claimed.reference_gain")
        tol = 1e-3
        if "tolerance" in data:
            tol = self.number(data["tolerance"], "claimed.tolerance", positive=True, maximum=1.0)
        if K is None and L is None and N is None:
            self.fail("claimed", "give at least one of K, L, reference_gain")
        return Claims(K, L, N, tol)
