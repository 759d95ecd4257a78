"""Escaping of user text for LaTeX and Markdown, and the marks of text our own code built.

Every string a design file supplies (title, author, parameter descriptions, units, state
names) reaches the memo through a template environment of :mod:`symbolic.render.formats`,
whose ``finalize`` hook escapes every printed value with :func:`escape_latex` or
:func:`escape_markdown` unless our own code marked it as already safe with
:class:`TrustedLatex` (for the LaTeX memo) or :class:`TrustedMarkdown` (for the Markdown
memo); each mark is honoured only by its own format.

Each escaper reads its input once and writes each character once, so an escape sequence is
never escaped a second time.  The LaTeX escaper is a character map (``str.translate``), and
TeX's ``^^5c`` notation cannot be formed because ``^`` is itself escaped.  The Markdown
escaper normalises the text with a character map, then escapes in one pass of a regular
expression whose rules each name a character and the context in which Markdown reads it
as syntax (a line start, the neighbouring characters), so that plain text keeps no
needless backslash.

Notes
-----
* Escaped text is for text mode.  Inside math, wrap a value in ``\\text{...}`` (amsmath),
  or pass a :class:`TrustedLatex` built for math, such as
  :func:`symbolic.render.memo_numbers.tex_number`'s output.
* Values printed inside a Markdown code span are shown with their backslashes; keep
  values out of code spans.
* The LaTeX preamble must contain the lines of :data:`LATEX_PREAMBLE_LINES`; the escaper
  relies on the T1 font encoding, Latin Modern and the ``textcomp`` symbols.
"""

from __future__ import annotations

import re
from functools import lru_cache

from ..runtime.errors import RenderError
from .mdsafe import escape_markdown
from .textchars import SPACES, CharMap, is_dropped, prepare_text

__all__ = [
    "LATEX_COMMANDS",
    "LATEX_KEPT",
    "LATEX_PREAMBLE_LINES",
    "TrustedLatex",
    "TrustedMarkdown",
    "escape_latex",
    "escape_markdown",
]

#: Preamble lines every LaTeX memo template must contain for :func:`escape_latex` output to
#: compile and to show up literally (UTF-8 input, T1 fonts, Latin Modern, TS1 symbols).
LATEX_PREAMBLE_LINES: tuple[str, ...] = (
    r"\usepackage[utf8]{inputenc}",
    r"\usepackage[T1]{fontenc}",
    r"\usepackage{lmodern}",
    r"\usepackage{textcomp}",
)


# --------------------------------------------------------------------------------------
# Trust marks
# --------------------------------------------------------------------------------------

# Control words that never belong in LaTeX our own code generates (formulas from
# ``sympy.latex``, numbers, tables).  Finding one means unescaped user text slipped into a
# TrustedLatex; refusing it is a second line of defence behind the locked compile.
_FORBIDDEN_CONTROL_WORDS = frozenset(
    {
        "input", "include", "includeonly", "InputIfFileExists", "IfFileExists", "endinput",
        "openin", "openout", "read", "readline", "write", "immediate", "closein",
        "closeout", "catcode", "lccode", "uccode", "csname", "endcsname", "def", "edef",
        "gdef", "xdef", "let", "futurelet", "expandafter", "scantokens", "everyeof",
        "special", "directlua", "latelua", "usepackage", "RequirePackage",
        "documentclass", "newcommand", "renewcommand", "providecommand", "verb",
        "lowercase", "uppercase", "jobname", "shipout", "output", "everypar", "errhelp",
        "newread", "newwrite", "verbatiminput", "lstinputlisting",
    }
)  # fmt: skip
_CONTROL_WORD = re.compile(r"\\([A-Za-z@]+)")
_DOCUMENT_OR_VERBATIM = re.compile(r"\\(?:begin|end)\s*\{\s*(?:document|verbatim\*?)\s*\}")


class TrustedLatex(str):
    """LaTeX produced by gainsmith's own code, printed by the "tex" environment as is.

    This is the only way to print LaTeX without escaping.  Wrap only text our own code
    built (``sympy.latex`` of an expression over validated identifiers, numbers formatted
    by :func:`tex_number`), never text that came from a design file.

    Parameters
    ----------
    value : str
        The LaTeX source.

    Raises
    ------
    RenderError
        If the text contains ``^^`` or a control word that reads or writes files, runs
        commands, changes category codes or defines macros (``\\input``, ``\\openin``,
        ``\\write``, ``\\catcode``, ``\\csname``, ``\\def``, ``\\usepackage``,
        ``\\directlua``, ``\\pdf...`` primitives, ...).  Such text is a bug: user text
        reached a trusted value without escaping.

    Notes
    -----
    Operations on the value (``+``, ``%``, ``upper()``, slicing) return a plain ``str``,
    which the environment escapes again: trust does not carry over to derived text.
    A ``TrustedLatex`` printed by the "md" environment is escaped like any other string.

    Examples
    --------
    >>> TrustedLatex(r"\\frac{1}{s+2}")
    '\\\\frac{1}{s+2}'
    """

    __slots__ = ()

    def __new__(cls, value: str = "") -> TrustedLatex:
        if not isinstance(value, str):
            raise TypeError(f"TrustedLatex expects a str, got {type(value).__name__}")
        problems = sorted(
            {
                word
                for word in _CONTROL_WORD.findall(value)
                if word in _FORBIDDEN_CONTROL_WORDS or word.startswith("pdf")
            }
        )
        if "^^" in value:
            problems.append("^^")
        problems.extend(_DOCUMENT_OR_VERBATIM.findall(value))
        if problems:
            raise RenderError(
                "refusing to trust LaTeX that contains "
                + ", ".join(p if p == "^^" or p.startswith("\\") else "\\" + p for p in problems)
                + "; escape user text with escape_latex instead"
            )
        return super().__new__(cls, value)


class TrustedMarkdown(str):
    """Markdown produced by gainsmith's own code, printed by the "md" environment as is.

    Parameters
    ----------
    value : str
        The Markdown source.

    Notes
    -----
    As with :class:`TrustedLatex`, derived strings are plain ``str`` and get escaped, and a
    ``TrustedMarkdown`` printed by the "tex" environment is escaped like any other string.
    No content check is made; wrap only text our own code built.
    """

    __slots__ = ()

    def __new__(cls, value: str = "") -> TrustedMarkdown:
        if not isinstance(value, str):
            raise TypeError(f"TrustedMarkdown expects a str, got {type(value).__name__}")
        return super().__new__(cls, value)


# --------------------------------------------------------------------------------------
# LaTeX
# --------------------------------------------------------------------------------------

_LATEX_SPECIALS = {
    "\\": r"\textbackslash{}",
    "{": r"\{",
    "}": r"\}",
    "$": r"\$",
    "&": r"\&",
    "#": r"\#",
    "^": r"\textasciicircum{}",
    "_": r"\_",
    "%": r"\%",
    "~": r"\textasciitilde{}",
    # OT1 prints < > | as other glyphs, and T1 forms guillemets from << and >>.
    "<": r"\textless{}",
    ">": r"\textgreater{}",
    "|": r"\textbar{}",
    # A bracket right after \item or \\ would be read as an optional argument.
    "[": "{[}",
    "]": "{]}",
    # T1 ligatures: -- and --- become dashes, ,, a low quote, '' `` curly quotes, and
    # !` ?` inverted marks.  Braces break the ligatures; the text commands give the
    # straight ASCII glyphs.
    "-": "{-}",
    ",": "{,}",
    "'": r"\textquotesingle{}",
    "`": r"\textasciigrave{}",
    '"': r"\textquotedbl{}",
}

# Non-ASCII characters kept as they are: pdfLaTeX's utf8 input with T1 + Latin Modern +
# textcomp typesets them, and pdftotext gives them back unchanged or in an equivalent
# Unicode normal form.  Measured on TeX Live 2022 with poppler's pdftotext; characters of
# Latin Extended-A that came back as a different letter (Đ came back as the lookalike Ð)
# or as a letter plus a loose accent (the cedillas) are left out.
LATEX_KEPT = frozenset(
    "".join(chr(c) for c in range(0xA0, 0x100) if c != 0xAD)
    + "ĀāĂăĄąĆćĈĉĊċČčĎďđĒēĔĕĖėĘęĚěĜĝĞğĠġĤĥĨĪĬİıĲĳĴĹĺĽľŁłŃńŇňŊŋŌōŎŏŐőŒœŔŕŘřŚśŜŝŞşŠšŢţŤť"
    + "ŨũŪūŬŭŮůŰűŴŵŶŷŸŹźŻżŽž"
    + "–—‘’‚“”„†‡•…‰‹›€™℃№←↑→↓"
)

# Characters typeset by a command, mostly Greek letters in math.  Greek capitals that look
# like Latin ones (Α, Β, Ε, ...) and omicron have no LaTeX command and fall through to the
# code point replacement, which also exposes lookalike spoofing.  ε/ϵ and φ/ϕ follow
# Unicode: U+03B5 is \varepsilon and U+03F5 is \epsilon, U+03C6 is \varphi and U+03D5 \phi.
_LATEX_MATH_NAMES = {
    "α": "alpha", "β": "beta", "γ": "gamma", "δ": "delta", "ε": "varepsilon",
    "ϵ": "epsilon", "ζ": "zeta", "η": "eta", "θ": "theta", "ϑ": "vartheta", "ι": "iota",
    "κ": "kappa", "λ": "lambda", "μ": "mu", "ν": "nu", "ξ": "xi", "π": "pi", "ϖ": "varpi",
    "ρ": "rho", "ϱ": "varrho", "σ": "sigma", "ς": "varsigma", "τ": "tau", "υ": "upsilon",
    "φ": "varphi", "ϕ": "phi", "χ": "chi", "ψ": "psi", "ω": "omega",
    "Γ": "Gamma", "Δ": "Delta", "Θ": "Theta", "Λ": "Lambda", "Ξ": "Xi", "Π": "Pi",
    "Σ": "Sigma", "Υ": "Upsilon", "Φ": "Phi", "Ψ": "Psi", "Ω": "Omega",
    "≤": "leq", "≥": "geq", "≠": "neq", "≈": "approx", "∞": "infty", "∂": "partial",
    "∓": "mp", "≪": "ll", "≫": "gg", "≡": "equiv", "∝": "propto", "∇": "nabla",
    "∈": "in", "⇒": "Rightarrow", "′": "prime", "∪": "cup", "∩": "cap",
}  # fmt: skip
LATEX_COMMANDS = {ch: rf"\ensuremath{{\{name}}}" for ch, name in _LATEX_MATH_NAMES.items()}
LATEX_COMMANDS["\N{MINUS SIGN}"] = r"\textminus{}"
LATEX_COMMANDS["″"] = r"\ensuremath{\prime\prime}"
# Superscripts of our own labels (Lᵀ, (sI − F)⁻¹): set as superscripts, not as code points.
LATEX_COMMANDS["ᵀ"] = r"\ensuremath{^{\mathsf{T}}}"
LATEX_COMMANDS["⁻"] = r"\ensuremath{^{-}}"

# A run of more than _RUN_LIMIT characters without a space gets a break point every
# _RUN_CHUNK characters, so that a long token (a path, a hash) wraps instead of running off
# the page, where a reader (and pdftotext) would not see it.
_RUN_LIMIT = 20
_RUN_CHUNK = 16
_LONG_RUN = re.compile(rf"\S{{{_RUN_LIMIT + 1},}}")
_LATEX_BREAK = r"\allowbreak{}"


def _codepoint_latex(codepoint: int) -> str:
    return rf"\texttt{{[U+{codepoint:04X}]}}\allowbreak{{}}"


@lru_cache(maxsize=4096)
def _latex_for(codepoint: int) -> str:
    """The LaTeX for one code point; the single source of the LaTeX character map."""
    char = chr(codepoint)
    if char in _LATEX_SPECIALS:
        return _LATEX_SPECIALS[char]
    if codepoint in SPACES:
        return " "
    if is_dropped(codepoint):
        return ""
    if 0x20 <= codepoint < 0x7F or char in LATEX_KEPT:
        return char
    if char in LATEX_COMMANDS:
        return LATEX_COMMANDS[char]
    return _codepoint_latex(codepoint)


_LATEX_MAP = CharMap(_latex_for)


def escape_latex(text: str) -> str:
    """Escape text so that pdfLaTeX prints it literally and runs none of it.

    Parameters
    ----------
    text : str
        Any text, e.g. a title or a parameter description from a design file.

    Returns
    -------
    str
        LaTeX for text mode (paragraphs, table cells, ``\\section`` and ``\\title``
        arguments).  It needs the preamble lines of :data:`LATEX_PREAMBLE_LINES`.

    Raises
    ------
    TypeError
        If `text` is not a ``str``.

    Notes
    -----
    One pass of ``str.translate`` maps each character once, so an escape is never escaped
    again and ``^^5c`` (TeX's code for a backslash) cannot be formed:

    * the ten specials ``\\ { } $ & # ^ _ % ~`` become ``\\textbackslash{}``, ``\\{``,
      ``\\}``, ``\\$``, ``\\&``, ``\\#``, ``\\textasciicircum{}``, ``\\_``, ``\\%``,
      ``\\textasciitilde{}``; ``< > |`` become ``\\textless{}``, ``\\textgreater{}``,
      ``\\textbar{}``;
    * ``[ ]`` are braced so that they are never read as an optional argument, and
      ``- , ' ` "`` are braced or spelled as text commands so that T1 forms no ligature
      (``--`` stays two hyphens, quotes stay straight);
    * newlines, tabs and other separators become a space; control characters,
      bidirectional overrides and isolates, zero-width characters, the byte-order mark
      and the soft hyphen are dropped;
    * the text is composed to Unicode NFC first and lone surrogates become U+FFFD;
    * Latin-1 letters and symbols, most letters of Latin Extended-A and common
      typographic characters (dashes, curly quotes, €, ™, arrows) are kept; Greek letters
      and a few relations (≤ ≥ ≈ ≠ ∞ ...) become ``\\ensuremath{\\alpha}`` etc.;
    * every other character becomes its code point in typewriter type, ``[U+0416]``.
      This covers Cyrillic, CJK, emoji, Greek capitals that look like Latin letters, and
      characters that could not be typeset without extra fonts;
    * a run of more than 20 characters without a space gets a break point
      (``\\allowbreak{}``) every 16 characters, and each code point replacement is
      followed by one, so that long tokens wrap at the margin.

    References
    ----------
    .. [1] D. E. Knuth, *The TeXbook*, Addison-Wesley, 1984, ch. 7 (category codes) and
       ch. 8 (the ``^^`` convention).
    .. [2] LaTeX Project, *LaTeX font encodings* (fntguide/encguide), section on the T1
       encoding and its ligatures.

    Examples
    --------
    >>> escape_latex("50% of $x_1$")
    '50\\\\% of \\\\$x\\\\_1\\\\$'
    >>> escape_latex("\\\\{")
    '\\\\textbackslash{}\\\\{'
    >>> escape_latex("ω = 2π f")
    '\\\\ensuremath{\\\\omega} = 2\\\\ensuremath{\\\\pi} f'
    """
    text = prepare_text(text, "escape_latex")
    if not _LONG_RUN.search(text):
        return text.translate(_LATEX_MAP)
    pieces: list[str] = []
    position = 0
    for match in _LONG_RUN.finditer(text):
        pieces.append(text[position : match.start()].translate(_LATEX_MAP))
        run = match.group()
        chunks = (run[i : i + _RUN_CHUNK] for i in range(0, len(run), _RUN_CHUNK))
        pieces.append(_LATEX_BREAK.join(chunk.translate(_LATEX_MAP) for chunk in chunks))
        position = match.end()
    pieces.append(text[position:].translate(_LATEX_MAP))
    return "".join(pieces)
