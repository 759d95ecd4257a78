"""The shared context of one design-file read: where the file is, and the checks of single fields.

Every table module (:mod:`symbolic.input.plant`, :mod:`symbolic.input.controller`,
...) validates its table through one :class:`FieldReader`, which names the file
and the dotted key in every :class:`~symbolic.runtime.errors.DesignFileError`.
The first problem found is the one reported.
"""

from __future__ import annotations

import difflib
import math
import reprlib
from collections.abc import Sequence
from typing import Any, NoReturn

import sympy as sp

from ..runtime.errors import DesignFileError, ExpressionError
from .expressions import parse_number

__all__ = ["MAX_STRING", "FieldReader", "key_part", "short", "suggest"]

MAX_STRING = 2000


def suggest(word: str, choices: Sequence[str]) -> str:
    """The tail of an "unknown" message: the closest choice, else the list of choices."""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else f"; expected one of: {', '.join(choices)}"


_REPR = reprlib.Repr()
_REPR.maxlevel = 3
_REPR.maxstring = 40
_REPR.maxother = 40


def key_part(name: str) -> str:
    """A key from the file as quoted in a message: at most 64 characters."""
    return name if len(name) <= 64 else name[:61] + "..."


def short(value: object) -> str:
    """A bounded repr for messages: depth and length limited, never recursive blow-up."""
    text = _REPR.repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


class FieldReader:
    """Validates the fields of one parsed TOML document.

    Parameters
    ----------
    where : str
        The design file, as named in messages.
    sha : str
        The SHA-256 of the file's bytes, recorded in the :class:`~symbolic.model.design.Design`.
    """

    def __init__(self, where: str, sha: str):
        self.where = where
        self.sha = sha

    def fail(
        self, key: str, problem: str, cls: type[DesignFileError] = DesignFileError
    ) -> NoReturn:
        """Raise ``cls`` for the problem at ``key`` of this file."""
        raise cls(problem, self.where, key)

    def table(self, data: Any, key: str, allowed: Sequence[str], required: bool = True) -> dict:
        """Check that ``data`` is a table of ``allowed`` keys (absent only if not ``required``)."""
        if data is None:
            if required:
                self.fail(key, "this table is required")
            return {}
        if not isinstance(data, dict):
            self.fail(key, f"expected a table, got {type(data).__name__}")
        for name in data:
            if name not in allowed:
                part = key_part(name)
                self.fail(f"{key}.{part}" if key else part, "unknown key" + suggest(name, allowed))
        return data

    def string(self, value: Any, key: str, default: str = "") -> str:
        """A string of at most :data:`MAX_STRING` characters, or ``default`` when absent."""
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
        """A finite TOML number as a float, within the bounds given."""
        if isinstance(value, bool) or not isinstance(value, int | float):
            self.fail(key, f"expected a number, got {type(value).__name__} {short(value)}")
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
        """The exact value of a TOML number (:func:`~symbolic.input.expressions.parse_number`)."""
        try:
            return parse_number(value)
        except ExpressionError as exc:
            self.fail(key, str(exc))

    def number_list(self, value: Any, key: str, length: int | None = None) -> tuple[float, ...]:
        """A list of numbers, of ``length`` entries when given."""
        if not isinstance(value, list):
            self.fail(key, f"expected a list of numbers, got {type(value).__name__}")
        if length is not None and len(value) != length:
            self.fail(key, f"expected {length} numbers, got {len(value)}")
        return tuple(self.number(v, f"{key}[{i}]") for i, v in enumerate(value))

    def choice(self, value: Any, key: str, allowed: Sequence[str], default: str) -> str:
        """One of the ``allowed`` words, or ``default`` when absent."""
        if value is None:
            return default
        text = self.string(value, key)
        if text not in allowed:
            self.fail(key, f"unknown value '{text}'" + suggest(text, allowed))
        return text
