"""Escaping of user text for the Markdown memo: a backslash only where Markdown reads syntax.

:func:`escape_markdown` is the Markdown environment's escaper (see
:mod:`symbolic.render.formats`; :mod:`symbolic.render.texsafe` exports it too).  The tests
render every rule with GitHub's renderer (tests/test_markdown_escaping.py).

Notes
-----
Before escaping, the text is normalised by one pass of ``str.translate``: newlines, tabs
and other separators become a space, runs of spaces become one and the ends are trimmed
(so no indented code block, hard line break or second line can form); control
characters, bidirectional overrides and isolates, zero-width characters, the byte-order
mark and the soft hyphen are dropped; other invisible format characters, private-use and
unassigned code points become ``[U+XXXX]``; the text is composed to NFC first and lone
surrogates become U+FFFD.  Other Unicode text (Cyrillic, CJK, emoji) is kept.

The escapes are made in one pass of a regular expression, one alternative per rule, so
each character is read once and an escape is never escaped again.
"""

from __future__ import annotations

import re
import unicodedata
from functools import lru_cache

from .textchars import SPACES, CharMap, is_dropped, prepare_text

__all__ = ["escape_markdown"]


@lru_cache(maxsize=4096)
def _markdown_for(codepoint: int) -> str:
    """The plain text kept for one code point (spaces, dropped and shown-by-number ones)."""
    if codepoint in SPACES:
        return " "
    if is_dropped(codepoint):
        return ""
    if unicodedata.category(chr(codepoint)) in ("Cf", "Co", "Cn", "Cs"):
        # Other format characters (e.g. the invisible tag characters), private-use and
        # unassigned code points are shown by number.
        return f"[U+{codepoint:04X}]"
    return chr(codepoint)


_MARKDOWN_MAP = CharMap(_markdown_for)
_SPACE_RUNS = re.compile(" {2,}")

# The characters Markdown reads as syntax, each with the context in which it is syntax
# (CommonMark 0.31.2 and GitHub's extensions, section numbers of the specs cited in
# escape_markdown).  One alternative per rule; ``\A`` and ``\Z`` are the ends of the value,
# whose neighbours in the document are unknown: the start may begin a line, and whatever
# follows the end may complete a construct.  Every match is one character to escape, except
# ``list`` (the digits of an ordered-list marker are kept, the delimiter escaped).
_MARKDOWN_SYNTAX = re.compile(
    r"""
    (?= [`|$\[\]*_~\\<&:.#>+=^)0-9-] )          # the first characters of the rules (speed)
    (?:
      [`|$]                                  # code spans and fences, table cells, math
    | (?P<bracket> [\[\]] )                  # links, images, definitions: see _inert_pair
    | (?P<flank> [*_~] )                     # emphasis and strikethrough: see _flanking
    | \\ (?= [!-/:-@\[-`{-~] | \Z )          # a backslash that would escape what follows
    | < (?! [ ] | =[ ] )                     # raw HTML, HTML blocks and <autolinks>
    | & (?= \#? [A-Za-z0-9]* (?: ; | \Z ) )  # entity and numeric character references
    | : (?= // )                             # extended autolinks http:// https:// ftp://
    | (?: (?<= [Hh][Tt][Tt][Pp] ) | (?<= [Hh][Tt][Tt][Pp][Ss] ) | (?<= [Ff][Tt][Pp] ) )
      : \Z                                   # ... whose // may follow the value
    | \A \^                                  # a footnote, after a template's [
    | \A [.)]                                # 1. or www. ended by a value written before
    | (?<= [Ww]{3} ) \.                      # extended www. autolinks
    | \A \# (?= \#{0,5} (?: [ ] | \Z ) )     # ATX heading
    | (?<= [ ] ) \# (?= \#* \Z )             # a closing sequence that would strip the #s
    | \A > | \A [-+] (?= [ ] | \Z )          # block quote, bullet list item
    | \A (?= [-: ]* - ) [-:] (?= [-: ]* \Z ) # thematic break, setext underline, table row
    | \A = (?= [= ]* \Z )                    # setext underline
    | \A (?P<list> \d{1,9} ) [.)] (?= [ ] | \Z )  # ordered list item
    )
    """,
    re.VERBOSE,
)


def _flanking(text: str, index: int) -> bool:
    """Whether the ``*``, ``_`` or ``~`` at `index` could open or close emphasis.

    A run of them opens or closes only next to text (CommonMark 6.2): one between two
    spaces cannot, nor can an ``_`` between two letters or digits (``speed_factor``).  At
    the ends of the value the neighbour is unknown, so the character counts as flanking.
    """
    if index == 0 or index == len(text) - 1:
        return True
    before, after = text[index - 1], text[index + 1]
    if before == " " and after == " ":
        return False
    return not (text[index] == "_" and before.isalnum() and after.isalnum())


# A bracket pair that is text: no bracket inside, not a footnote, and no ( or [ after it
# that would make it an inline link or a full reference.  At the start of a value, which
# may begin a line, the pair must also not be a task list marker and must not be followed
# by a : (a link reference definition) or by the end of the value (the : may follow).
_INERT_PAIR = re.compile(r"\[(?!\^)[^\[\]]*\](?![(\[])")
_INERT_PAIR_AT_START = re.compile(r"\[(?![ xX]\])(?!\^)[^\[\]]*\](?![(\[:]|\Z)")


def _inert_pair(text: str, index: int) -> bool:
    """Whether the ``[`` or ``]`` at `index` belongs to a pair that stays text.

    ``[x]`` alone is a link only where the document defines the label ``x`` (CommonMark
    4.7); a definition starts a line, and the memo defines none.  A pair inside the
    brackets of a template's image or link keeps that link's text whole, as brackets may
    nest in link text (CommonMark 6.3).  A pair that ends the value stays text as long as
    no template writes ``(`` or ``[`` right after a value (tests/test_markdown_escaping.py
    checks the templates).
    """
    if text[index] == "]":
        opening = text.rfind("[", 0, index)
        if opening < 0 or "]" in text[opening:index]:
            return False
        index = opening
    pattern = _INERT_PAIR if index > 0 else _INERT_PAIR_AT_START
    return pattern.match(text, index) is not None


def _markdown_escape(match: re.Match[str]) -> str:
    if match.group("list") is not None:
        return match.group("list") + "\\" + match.group()[-1]
    if match.group("flank") is not None and not _flanking(match.string, match.start()):
        return match.group()
    if match.group("bracket") is not None and _inert_pair(match.string, match.start()):
        return match.group()
    return "\\" + match.group()


def escape_markdown(text: str) -> str:
    """Escape text so that a Markdown renderer (GitHub's) shows it literally and inertly.

    Parameters
    ----------
    text : str
        Any text, e.g. a title or a parameter description from a design file.

    Returns
    -------
    str
        Markdown for a paragraph, heading, list item or table cell (not for a code span,
        where backslashes show), which reads as plain text: a backslash stands only before
        a character that Markdown would read as syntax where it stands.

    Raises
    ------
    TypeError
        If `text` is not a ``str``.

    Notes
    -----
    The text is normalised first (see the module notes), then one pass puts a backslash
    before each character that is syntax in its context [1]_ [2]_, and before nothing else:

    * anywhere: `` ` ``, ``|``, ``$`` (code, table cells, GitHub math); ``*`` and ``~``
      unless between two spaces, ``_`` unless between two spaces or two letters or digits
      (emphasis, strikethrough); ``[`` and ``]`` unless they pair up with no bracket
      between, not as ``[^``, with no ``(`` or ``[`` after the pair (links, images,
      footnotes); ``\\`` before ASCII punctuation; ``<`` unless followed by a space or by
      ``=`` and a space (HTML, autolinks); ``&`` that would start an entity; ``:`` of
      ``://`` and the ``.`` of ``www.`` (GitHub's autolinks); a trailing ``#`` run after a
      space (a heading's closing sequence);
    * at the start, which may begin a line: ``#`` of a heading, ``>``, ``-`` or ``+`` and
      a space, the ``.`` or ``)`` of ``1.`` or ``1)`` and a space, a value of only ``-``,
      ``:`` or ``=`` and spaces (thematic break, setext underline, table delimiter row),
      ``[`` of a task box or a label definition, a leading ``^``, ``.`` or ``)``;
    * at the end, whose follower is unknown: ``\\``, ``<``, ``&`` ``*`` ``_`` ``~``, and
      the ``:`` of ``http:``.

    So the text stays inert wherever a template places it, as long as the template writes
    neither ``(``, ``[`` nor another value right after it (the tests check the templates).
    Dates, versions, file names with underscores, pairs such as ``x[k]`` and
    ``( ) . - + ! : = ' " % @ { }`` in running text stay as they are.  An e-mail address
    becomes a link to itself on GitHub whatever is escaped (measured with cmark-gfm).

    References
    ----------
    .. [1] J. MacFarlane, *CommonMark Spec*, version 0.31.2, 2024, sections 2.4 (backslash
       escapes), 2.5 (entities), 4 (leaf blocks), 5 (containers), 6 (inlines; 6.2 on
       flanking delimiter runs).
    .. [2] GitHub, *GitHub Flavored Markdown Spec*, version 0.29-gfm, 2019, sections 4.10
       (tables), 5.3 (task lists), 6.5 (strikethrough), 6.9 (autolinks, extension).

    Examples
    --------
    >>> escape_markdown("gainsmith 0.1.0, 2025-12-02, belt_drive.toml")
    'gainsmith 0.1.0, 2025-12-02, belt_drive.toml'
    >>> escape_markdown("[x](javascript:alert(1))")
    '\\\\[x\\\\](javascript:alert(1))'
    >>> escape_markdown("<b>bold</b> & *it*")
    '\\\\<b>bold\\\\</b> & \\\\*it\\\\*'
    """
    text = prepare_text(text, "escape_markdown").translate(_MARKDOWN_MAP)
    text = _SPACE_RUNS.sub(" ", text).strip(" ")
    return _MARKDOWN_SYNTAX.sub(_markdown_escape, text)
