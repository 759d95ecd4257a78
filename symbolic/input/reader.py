"""Reading and validating a design file.

A design file is TOML data in gainsmith's own format (documented in the
README).  :func:`load_design` turns it into a frozen :class:`Design`; every
problem found is reported as one :class:`~symbolic.runtime.errors.DesignFileError`
naming the file, the dotted key and the problem.  Nothing in the file is
executed: expression strings go through the whitelist parser in
:mod:`symbolic.input.expressions`.

This module holds the file-level guards (size, encoding, nesting, the count of
parameters, TOML syntax) and the top-level keys; each table is validated by its
own module (:mod:`symbolic.input.parameters`, :mod:`symbolic.input.plant`,
:mod:`symbolic.input.controller`, :mod:`symbolic.input.observer`,
:mod:`symbolic.input.tracking`, :mod:`symbolic.input.discrete`,
:mod:`symbolic.input.simulation`, :mod:`symbolic.input.claimed`,
:mod:`symbolic.input.options`, :mod:`symbolic.input.revisions`, and
:mod:`symbolic.input.model_table` for a nonlinear ``[model]`` in place of ``[plant]``) through one shared
:class:`~symbolic.input.fields.FieldReader`.
"""

from __future__ import annotations

import dataclasses
import hashlib
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path

from ..model.design import Design
from ..runtime.errors import DesignFileError
from .claimed import read_claims
from .controller import read_controller
from .discrete import read_discrete
from .fields import FieldReader
from .model_table import read_model
from .observer import read_observer
from .options import read_symbolic_budget
from .parameters import MAX_PARAMETERS, read_parameters
from .plant import read_plant
from .revisions import read_revisions
from .simulation import read_simulation
from .tracking import read_tracking

__all__ = ["MAX_FILE_BYTES", "MAX_NESTING", "load_design", "parse_design"]

MAX_FILE_BYTES = 1_000_000

#: Deepest nesting of arrays, inline tables or dotted keys a design file may use.  Ours needs 3;
#: TOML parsers spend time quadratic in the depth of a dotted key.
MAX_NESTING = 32
# [ \t]* rather than \s*: \s* spans blank lines and made this scan quadratic
_KEY_LINE = re.compile(r"^[ \t]*(\[\[?[^\]\n]*\]\]?|[^=\n]+=)", re.M)
_PARAMETER_LINE = re.compile(r"^[ \t]*\[?[ \t]*parameters[ \t]*\.[ \t]*([^ \t.\]=]+)", re.M)

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
    "revisions",
    "model",
)


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
    design = _read_design(FieldReader(where, sha), data, dict(overrides or {}))
    return dataclasses.replace(design, text=text)


def _read_design(fields: FieldReader, data: dict, overrides: dict[str, str]) -> Design:
    """Validate the parsed document table by table, in the order each needs the last."""
    fields.table(data, "", _TOP_KEYS)
    title = fields.string(data.get("title"), "title", "Untitled design")
    author = fields.string(data.get("author"), "author")
    revision = fields.string(data.get("revision"), "revision")
    parameters = read_parameters(fields, data.get("parameters", {}), overrides)
    symbols = {p.name: p.symbol for p in parameters}
    budget = read_symbolic_budget(fields, data.get("options"))
    model = None
    if "model" in data:
        if "plant" in data:
            fields.fail(
                "model", "give either [plant] (A, B, C, D) or [model] (the equations), not both"
            )
        values = {p.symbol: p.value for p in parameters}
        model, plant = read_model(fields, data["model"], symbols, values, budget)
    else:
        plant = read_plant(fields, data.get("plant"), symbols)
    controller = read_controller(fields, data.get("controller"), plant)
    observer = read_observer(fields, data.get("observer"), plant)
    tracking = read_tracking(fields, data.get("tracking"), plant)
    discrete = read_discrete(fields, data.get("discrete"))
    simulation = read_simulation(fields, data.get("simulation"), plant)
    claims = read_claims(fields, data.get("claimed"), plant)
    revisions = read_revisions(fields, data.get("revisions"))
    if revisions and not revision:
        revision = revisions[-1].revision  # the history names the current revision
    elif revisions and revisions[-1].revision != revision:
        fields.fail(
            "revision",
            f"'{revision}' is not the revision of the last [[revisions]] entry"
            f" ('{revisions[-1].revision}'); list the history oldest first, ending with it",
        )
    return Design(
        path=fields.where,
        sha256=fields.sha,
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
        revisions=revisions,
        model=model,
    )


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
