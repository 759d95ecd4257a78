"""The character classes both escapers share: invisible characters, separators, the map type.

:mod:`symbolic.render.texsafe` (LaTeX) and :mod:`symbolic.render.mdsafe` (Markdown) treat
the characters that hide, reorder or separate text alike: each separator becomes one space,
each invisible or control character is dropped, and the text is composed to NFC first.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Callable

__all__ = ["INVISIBLE", "SPACES", "CharMap", "is_dropped", "prepare_text"]

#: Invisible characters that can reorder or hide text: bidirectional embeddings, overrides
#: and isolates, zero-width spaces and joiners, marks, the byte-order mark, the soft hyphen.
INVISIBLE = frozenset(
    [*range(0x200B, 0x2010), *range(0x202A, 0x202F), *range(0x2060, 0x2065)]
    + [*range(0x2066, 0x206A), 0xFEFF, 0x061C, 0x180E, 0x00AD]
)
#: Characters that separate words or lines; each becomes one plain space.
SPACES = frozenset(
    [0x09, 0x0A, 0x0B, 0x0C, 0x0D, 0x1C, 0x1D, 0x1E, 0x1F, 0x85, 0x1680, 0x2028, 0x2029]
    + [*range(0x2000, 0x200B), 0x202F, 0x205F, 0x3000]
)
_SURROGATES = re.compile("[\ud800-\udfff]")


def prepare_text(text: str, function: str) -> str:
    """Replace lone surrogates by U+FFFD and compose to NFC (é as one character).

    Raises
    ------
    TypeError
        If `text` is not a ``str`` (the message names `function`).
    """
    if not isinstance(text, str):
        raise TypeError(f"{function} expects a str, got {type(text).__name__}")
    return unicodedata.normalize("NFC", _SURROGATES.sub("\ufffd", text))


def is_dropped(codepoint: int) -> bool:
    """Whether an escaper drops the code point (invisible or a control character)."""
    return codepoint in INVISIBLE or unicodedata.category(chr(codepoint)) == "Cc"


class CharMap:
    """A read-only mapping for ``str.translate`` that computes each entry on demand."""

    __slots__ = ("_function",)

    def __init__(self, function: Callable[[int], str]) -> None:
        self._function = function

    def __getitem__(self, codepoint: int) -> str:
        return self._function(codepoint)
