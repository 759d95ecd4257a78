"""The memo's output formats, one :class:`Format` object each, and their template environments.

A format says everything that differs between the memo's documents: its name, its
template file and file suffix, how a plain value is escaped (the ``finalize`` hook of its
Jinja2 environment), which mark our own code puts on text it built (trusted math,
:class:`~symbolic.render.mathvalues.OwnMath`, becomes that mark in :meth:`Format.mark`),
what ``None`` prints as, the template delimiters and the number filter.  The memo renders
every format of :data:`FORMATS` in turn; another document (say HTML) is one more
:class:`Format` and its template.  Asking for a format that is not registered raises
:class:`UnknownFormatError`.

Notes
-----
Template authors, please note:

* LaTeX templates use ``\\VAR{...}`` for values, ``\\BLOCK{...}`` for statements and
  ``\\#{...}`` for comments; a line starting with ``%%`` is a statement and one starting
  with ``%#`` is a comment.  Write a literal ``%%`` TeX comment as ``% %`` instead.
* A value printed with ``\\VAR{...}`` is escaped unless it is a
  :class:`~symbolic.render.texsafe.TrustedLatex`.  The result of a filter such as
  ``upper`` or of ``~`` concatenation is a plain ``str`` and is escaped again, so trust
  never leaks into derived strings.
* Text a template produces itself (the output of a macro, of ``caller()``, of a
  ``set``/``endset`` or ``filter`` block) is layout whose values were already escaped; the
  environment marks it as such, so ``\\VAR{row(x)}`` prints a macro's LaTeX as is.  The
  mark belongs to the format whose environment produced the text.
* See :mod:`symbolic.render.texsafe` for what the LaTeX escaper does and what the LaTeX
  preamble must contain, and :mod:`symbolic.render.mdsafe` for the Markdown escaper: it
  treats the start of a value as a possible line start, so a template may put a value
  anywhere, but must write neither ``(``, ``[`` nor another value right after one.
"""

from __future__ import annotations

import importlib.resources
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import jinja2

from ..runtime.errors import RenderError
from .mathvalues import OwnMath
from .memo_numbers import md_number, tex_number
from .texsafe import TrustedLatex, TrustedMarkdown, escape_latex, escape_markdown

__all__ = [
    "FORMATS",
    "LATEX",
    "MARKDOWN",
    "MISSING_VALUE",
    "Format",
    "UnknownFormatError",
    "make_environment",
    "output_format",
    "render_template",
    "templates_dir",
]

#: What the Markdown environment prints for ``None``: an em dash, so that a missing value
#: is visible to the reviewer instead of silently blank (LaTeX prints ``\textemdash{}``).
MISSING_VALUE = "\N{EM DASH}"


class UnknownFormatError(RenderError, ValueError):
    """An output format that is not one of :data:`FORMATS`."""


class _LatexLayout(str):
    """Text produced by a "tex" template itself (literal layout plus escaped values)."""

    __slots__ = ()


class _MarkdownLayout(str):
    """Text produced by a "md" template itself (literal layout plus escaped values)."""

    __slots__ = ()


@dataclass(frozen=True)
class Format:
    """One output format of the memo.

    Attributes
    ----------
    name : str
        The short name (``"tex"``, ``"md"``) by which code asks for the format.
    template : str
        The memo's template file in :func:`templates_dir`.
    suffix : str
        The suffix of the memo file written in this format.
    escape : callable
        Makes any text print literally and inertly in this format.
    trusted : type
        The ``str`` subclass that marks text our own code built as safe in this format;
        :meth:`mark` turns trusted math (:class:`~symbolic.render.mathvalues.OwnMath`)
        into it.  A trusted value of another format is escaped like any string.
    layout : type
        The mark the format's environment puts on text its templates produced.
    missing : str
        What a template prints for ``None``.
    filters : Mapping[str, callable]
        Jinja2 filters of the environment (the number filter).
    syntax : Mapping[str, str]
        Jinja2 delimiter options; empty for Jinja2's usual ``{{ }}``, ``{% %}``, ``{# #}``.
    math : callable
        How trusted math (LaTeX our own code typeset) is written in this format before it
        is marked trusted; LaTeX and Markdown (GitHub math) keep the LaTeX as it is.
    """

    name: str
    template: str
    suffix: str
    escape: Callable[[str], str]
    trusted: type[str]
    layout: type[str]
    missing: str
    filters: Mapping[str, Callable[..., Any]] = field(default_factory=dict)
    syntax: Mapping[str, str] = field(default_factory=dict)
    math: Callable[[str], str] = str

    def trust(self, text: str) -> str:
        """Mark text our own code built (never text from a design file) safe in this format."""
        return self.trusted(text)

    def finalize(self, value: object) -> str:
        """The ``finalize`` hook: trusted text and layout as they are, the rest escaped."""
        if isinstance(value, (self.trusted, self.layout)):
            return str.__str__(value)
        if value is None:
            return self.missing
        return self.escape(value if isinstance(value, str) else str(value))

    def mark(self, obj: Any) -> Any:
        """A template context with every trusted math value marked trusted in this format.

        Dicts, lists and tuples are copied (a tuple becomes a list); other values are
        returned as they are, and get escaped when printed.
        """
        if isinstance(obj, OwnMath):
            return self.trust(self.math(str(obj)))
        if isinstance(obj, dict):
            return {k: self.mark(v) for k, v in obj.items()}
        if isinstance(obj, list | tuple):
            return [self.mark(v) for v in obj]
        return obj

    def environment(self) -> jinja2.Environment:
        """A fresh Jinja2 environment for this format (see :func:`make_environment`)."""
        env = _FormatEnvironment(
            self,
            loader=jinja2.FileSystemLoader(str(templates_dir())),
            undefined=jinja2.StrictUndefined,
            autoescape=False,
            keep_trailing_newline=True,
            trim_blocks=True,
            lstrip_blocks=True,
            **self.syntax,
        )
        env.filters.update(self.filters)
        return env


class _FormatEnvironment(jinja2.Environment):
    """The environment of one format: its ``finalize`` hook, its layout mark."""

    def __init__(self, output: Format, **options: Any) -> None:
        super().__init__(finalize=output.finalize, **options)
        self.layout = output.layout

    # Jinja2 joins a template's own output with ``environment.concat``: the whole render,
    # macro bodies, ``caller()``, set and filter blocks.  Every piece is template text or a
    # value that went through ``finalize``, so the joined text is marked as layout.  The
    # ``~`` operator and filters do not use it and yield plain (escaped) strings.
    def concat(self, parts: Iterable[str]) -> str:  # type: ignore[override]
        return self.layout("".join(parts))


#: The LaTeX memo (compiled to PDF by :mod:`symbolic.render.pdf`).
LATEX = Format(
    name="tex",
    template="memo.tex.j2",
    suffix=".tex",
    escape=escape_latex,
    trusted=TrustedLatex,
    layout=_LatexLayout,
    missing=r"\textemdash{}",
    filters={"tex_number": tex_number},
    syntax={
        "block_start_string": r"\BLOCK{",
        "block_end_string": "}",
        "variable_start_string": r"\VAR{",
        "variable_end_string": "}",
        "comment_start_string": r"\#{",
        "comment_end_string": "}",
        "line_statement_prefix": "%%",
        "line_comment_prefix": "%#",
    },
)


def md_prose(pieces: Iterable[Mapping[str, Any]]) -> TrustedMarkdown:
    """The pieces of one prose string (:func:`symbolic.render.memo_prose.prose`) as one
    Markdown value: text and code names escaped piece by piece, math in ``$...$``.

    The escaper trims the ends of what it escapes (a value may start a line), so a space
    that stood between two pieces is put back once, between them; the ends of the whole
    string stay trimmed.  Each piece is escaped as a value whose neighbours are unknown,
    so no construct can form across two pieces.

    Examples
    --------
    >>> md_prose([{"text": "from "}, {"code": ["sympy.", "diff"]}, {"text": " of K_1."}])
    'from sympy.diff of K_1.'
    >>> md_prose([{"text": "gain "}, {"math": TrustedMarkdown("N")}, {"text": " holds"}])
    'gain $N$ holds'
    """
    out: list[str] = []
    space = False  # whether a space is owed before the next printed piece
    after_math = False
    for p in pieces:
        if "math" in p:
            raw, text = "x", "$" + str(p["math"]) + "$"
        else:
            raw = "".join(p["code"]) if "code" in p else str(p["text"])
            text = escape_markdown(raw)
            if after_math and not raw[:1].isspace() and text[:2] in ("\\.", "\\)"):
                # a value starting with . or ) is escaped lest digits written before it
                # make an ordered-list marker (1. or 1)); right after $...$ none can
                text = text[1:]
        after_math = "math" in p
        space = space or raw[:1].isspace()
        if text:
            out.append(" " + text if space and out else text)
            space = False
        space = space or raw[-1:].isspace()
    return TrustedMarkdown("".join(out))


def md_unit(parts: Iterable[Mapping[str, str]]) -> TrustedMarkdown:
    """A unit's factors (:func:`symbolic.render.memo_design.unit_parts`) as one Markdown
    value: each base escaped, its Unicode superscript after it, ``·`` between factors.

    Examples
    --------
    >>> md_unit([{"base": "kg", "superscript": ""}, {"base": "m", "superscript": "²"}])
    'kg·m²'
    """
    return TrustedMarkdown(
        "·".join(escape_markdown(p["base"]) + p.get("superscript", "") for p in parts)
    )


def _markdown_math(latex: str) -> str:
    """Our LaTeX math for GitHub's renderer: the line-break hints of narrow LaTeX table
    cells (``\\allowbreak``) mean nothing there and are left out.

    >>> _markdown_math(r"{-2},\\allowbreak\\; {-3}")
    '{-2},\\\\; {-3}'
    """
    return latex.replace("\\allowbreak", "")


#: The Markdown memo (GitHub-flavoured, math in ``$...$``).
MARKDOWN = Format(
    name="md",
    template="memo.md.j2",
    suffix=".md",
    escape=escape_markdown,
    trusted=TrustedMarkdown,
    layout=_MarkdownLayout,
    missing=MISSING_VALUE,
    filters={"md_number": md_number, "md_prose": md_prose, "md_unit": md_unit},
    math=_markdown_math,
)

#: Every output format of the memo, in the order the memo renders and writes them.
FORMATS: tuple[Format, ...] = (LATEX, MARKDOWN)


def output_format(name: str) -> Format:
    """The registered format called `name`.

    Raises
    ------
    UnknownFormatError
        If no format of :data:`FORMATS` has that name (a :class:`RenderError` and a
        ``ValueError``).
    """
    for candidate in FORMATS:
        if candidate.name == name:
            return candidate
    names = ", ".join(f'"{f.name}"' for f in FORMATS)
    raise UnknownFormatError(f"kind must be one of {names} (the memo's formats), got {name!r}")


def templates_dir() -> Path:
    """The folder holding the memo templates.

    Returns
    -------
    pathlib.Path
        ``symbolic/templates`` inside an installed package (found with
        ``importlib.resources``), else ``templates/`` beside the ``symbolic`` folder of a
        source checkout.

    Raises
    ------
    RenderError
        If neither folder exists.
    """
    try:
        resource = importlib.resources.files("symbolic.templates")
    except (ModuleNotFoundError, TypeError, ValueError):
        resource = None
    if resource is not None:
        candidate = Path(str(resource))
        if candidate.is_dir():
            return candidate
    checkout = Path(__file__).resolve().parents[2] / "templates"
    if checkout.is_dir():
        return checkout
    raise RenderError(f"cannot find the templates folder (looked for {checkout})")


def make_environment(kind: str) -> jinja2.Environment:
    """Build the Jinja2 environment of a format: LaTeX ("tex") or Markdown ("md").

    Parameters
    ----------
    kind : str
        The name of a format of :data:`FORMATS`.

    Returns
    -------
    jinja2.Environment
        Loading templates from :func:`templates_dir`, with ``StrictUndefined`` (a missing
        variable raises), ``autoescape=False``, ``keep_trailing_newline``, ``trim_blocks``
        and ``lstrip_blocks``.  A ``finalize`` hook escapes every printed value with the
        format's escaper (:func:`~symbolic.render.texsafe.escape_latex` /
        :func:`~symbolic.render.mdsafe.escape_markdown`) unless it carries the format's
        trust mark (:class:`~symbolic.render.texsafe.TrustedLatex` /
        :class:`~symbolic.render.texsafe.TrustedMarkdown`); other values are converted with
        ``str()`` first, and ``None`` prints as an em dash.  "tex" uses the delimiters
        ``\\VAR{ }``, ``\\BLOCK{ }``, ``\\#{ }`` with line statements ``%%`` and line
        comments ``%#``; "md" uses Jinja2's usual ``{{ }}``, ``{% %}``, ``{# #}``.
        Filters: ``tex_number`` ("tex") and ``md_number`` ("md").

    Raises
    ------
    UnknownFormatError
        If `kind` is not a registered format (also a ``ValueError``).
    RenderError
        If the templates folder cannot be found.

    Examples
    --------
    >>> env = make_environment("tex")
    >>> env.from_string(r"\\textbf{\\VAR{title}}").render(title="P&ID #3")
    '\\\\textbf{P\\\\&ID \\\\#3}'
    """
    return output_format(kind).environment()


def render_template(kind: str, name: str, context: Mapping[str, object]) -> str:
    """Render one template of the templates folder.

    Parameters
    ----------
    kind : str
        The format whose environment renders it (see :func:`make_environment`).
    name : str
        Template file name inside the templates folder, e.g. ``"memo.tex.j2"``.
    context : Mapping[str, object]
        The template variables.

    Returns
    -------
    str
        The rendered document.

    Raises
    ------
    RenderError
        If the format is unknown, the template is missing, has a syntax error, or uses a
        variable or attribute that the context does not supply.
    """
    env = make_environment(kind)
    try:
        return str.__str__(env.get_template(name).render(**context))
    except jinja2.TemplateNotFound as error:
        raise RenderError(f"template not found: {name}") from error
    except jinja2.TemplateSyntaxError as error:
        raise RenderError(f"template {name}, line {error.lineno}: {error.message}") from error
    except jinja2.UndefinedError as error:
        raise RenderError(f"template {name}: {error.message}") from error
