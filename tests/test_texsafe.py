"""Tests of symbolic.render.texsafe (the escapers, the trust marks) and of
symbolic.render.formats (the output formats and their template environments).

External sources behind the expected values:

* L. Lamport, *LaTeX: A Document Preparation System*, 2nd ed., Addison-Wesley, 1994,
  section 2.2.1: the ten special characters ``# $ % & ~ _ ^ \\ { }`` and the commands that
  print them (section number from memory).
* D. E. Knuth, *The TeXbook*, Addison-Wesley, 1984, chapter 8: ``^^`` followed by two hex
  digits stands for a character, so ``^^5c`` is a backslash (from memory).
* J. MacFarlane, *CommonMark Spec* 0.31.2, section 2.4: any ASCII punctuation character may
  be backslash-escaped; section 2.5: entity references such as ``&lt;``.
* Unicode Standard Annex #9, *Unicode Bidirectional Algorithm*, section 2 (explicit
  directional formatting characters U+202A..U+202E, U+2066..U+2069), and N. Boucher and
  R. Anderson, "Trojan Source: Invisible Vulnerabilities", USENIX Security 2023, on why
  they must not reach a review document (both from memory).
"""

from __future__ import annotations

import jinja2
import markupsafe
import numpy as np
import pytest

from symbolic.render.formats import (
    FORMATS,
    LATEX,
    MARKDOWN,
    MISSING_VALUE,
    UnknownFormatError,
    make_environment,
    output_format,
    render_template,
    templates_dir,
)
from symbolic.render.mathvalues import own_math
from symbolic.render.memo_numbers import md_number, tex_number
from symbolic.render.texsafe import (
    LATEX_PREAMBLE_LINES,
    TrustedLatex,
    TrustedMarkdown,
    escape_latex,
    escape_markdown,
)
from symbolic.runtime.errors import RenderError

# --------------------------------------------------------------------------------------
# escape_latex
# --------------------------------------------------------------------------------------

LATEX_PAIRS = [
    # the ten specials (Lamport, section 2.2.1)
    ("\\", r"\textbackslash{}"),
    ("{", r"\{"),
    ("}", r"\}"),
    ("$", r"\$"),
    ("&", r"\&"),
    ("#", r"\#"),
    ("^", r"\textasciicircum{}"),
    ("_", r"\_"),
    ("%", r"\%"),
    ("~", r"\textasciitilde{}"),
    # characters that OT1/T1 print as something else, or that form ligatures
    ("<", r"\textless{}"),
    (">", r"\textgreater{}"),
    ("|", r"\textbar{}"),
    ("[x]", "{[}x{]}"),
    ("a--b", "a{-}{-}b"),
    ("x,,y", "x{,}{,}y"),
    ("'q'", r"\textquotesingle{}q\textquotesingle{}"),
    ("`q`", r"\textasciigrave{}q\textasciigrave{}"),
    ('"q"', r"\textquotedbl{}q\textquotedbl{}"),
    # single pass: an escape is never escaped again
    ("\\{", r"\textbackslash{}\{"),
    ("\\textbackslash{}", r"\textbackslash{}textbackslash\{\}"),
    ("^^5cinput", r"\textasciicircum{}\textasciicircum{}5cinput"),
    (r"\input{/etc/passwd}", r"\textbackslash{}input\{/etc/passwd\}"),
    (r"\input{/etc/hostname}", r"\textbackslash{}input\{/etc/host\allowbreak{}name\}"),
    # plain text stays as it is
    ("Cart with pole", "Cart with pole"),
    ("Mass 1.5 kg (rated) @ 20 C: ok? yes! 3*4=12; a/b + c.", None),
    # whitespace and invisible characters
    ("line1\nline2\r\nline3\ttab", "line1 line2  line3 tab"),
    ("a\x00b\x07c\x1bd\x7fe", "abcde"),
    ("abc\u202edcba\u202c", "abcdcba"),
    ("x\u2066y\u2069z\u200bw\u200dv\ufeffu\u00adt", "xyzwvut"),
    # kept non-ASCII: Latin-1, Latin Extended-A, typography
    ("Müller, Straße 5 °C, µs, ±2, 3×4", "Müller{,} Straße 5 °C{,} µs{,} ±2{,} 3×4"),
    ("Dvořák – Łódź — “q” ‘q’ €", None),
    # composed to NFC: e + combining acute is é
    ("e\u0301", "é"),
    # Greek in math; the ohm sign is composed to capital omega
    ("ω = 2π f", r"\ensuremath{\omega} = 2\ensuremath{\pi} f"),
    ("10 \u2126", r"10 \ensuremath{\Omega}"),
    ("≤ ≥", r"\ensuremath{\leq} \ensuremath{\geq}"),
    ("\u2212" + "5", r"\textminus{}5"),
    # everything else by code point, followed by a break point
    ("Ж", r"\texttt{[U+0416]}\allowbreak{}"),
    ("😀", r"\texttt{[U+1F600]}\allowbreak{}"),
    ("Α", r"\texttt{[U+0391]}\allowbreak{}"),  # Greek capital alpha, a Latin A lookalike
    ("\ud800", r"\texttt{[U+FFFD]}\allowbreak{}"),  # a lone surrogate
    # a long run gets a break point every 16 characters
    ("x" * 40, "x" * 16 + r"\allowbreak{}" + "x" * 16 + r"\allowbreak{}" + "x" * 8),
    ("y" * 20, "y" * 20),
]


@pytest.mark.parametrize(("text", "expected"), LATEX_PAIRS)
def test_escape_latex_pairs(text: str, expected: str | None) -> None:
    assert escape_latex(text) == (text if expected is None else expected)


@pytest.mark.parametrize("text", ["^^5c", "^^^^005c", "a^^b", "\\^^"])
def test_escape_latex_never_leaves_double_caret(text: str) -> None:
    # The TeXbook, ch. 8: ^^5c is read as a backslash before tokenising.
    assert "^^" not in escape_latex(text)


def test_escape_latex_leaves_no_unescaped_special() -> None:
    text = "".join(chr(c) for c in range(0x20, 0x7F)) * 2
    out = escape_latex(text)
    # Remove our own escapes; no special may remain.
    for escape in (
        r"\textbackslash{}", r"\textasciicircum{}", r"\textasciitilde{}", r"\textless{}",
        r"\textgreater{}", r"\textbar{}", r"\textquotesingle{}", r"\textasciigrave{}",
        r"\textquotedbl{}", r"\allowbreak{}", r"\{", r"\}", r"\$", r"\&", r"\#", r"\_",
        r"\%", "{[}", "{]}", "{-}", "{,}",
    ):  # fmt: skip
        out = out.replace(escape, "")
    assert not set(out) & set("\\{}$&#^_%~<>|[]")


@pytest.mark.parametrize("value", [None, 3, b"bytes", ["list"]])
def test_escape_latex_rejects_non_strings(value: object) -> None:
    with pytest.raises(TypeError):
        escape_latex(value)  # type: ignore[arg-type]


# --------------------------------------------------------------------------------------
# escape_markdown
# --------------------------------------------------------------------------------------

MARKDOWN_PAIRS = [
    # CommonMark 0.31.2, section 2.4: a backslash before syntax, and only there (the rules
    # one by one, rendered by GitHub's renderer, are in tests/test_markdown_escaping.py)
    ("*bold* _it_", r"\*bold\* \_it\_"),
    ("# heading", r"\# heading"),
    ("- item", r"\- item"),
    ("+ item", r"\+ item"),
    ("1. item", r"1\. item"),
    ("`code`", r"\`code\`"),
    ("a|b", r"a\|b"),
    ("~~gone~~", r"\~\~gone\~\~"),
    ("===", r"\==="),
    ("\\", "\\\\"),
    ("\\*", "\\\\\\*"),  # single pass: the backslash and the star each once
    ("{x}", None),
    ("[x](javascript:alert(1))", r"\[x\](javascript:alert(1))"),
    ("![](http://evil.example/x.png)", r"!\[\](http\://evil.example/x.png)"),
    ("$\\input{/etc/passwd}$", r"\$\input{/etc/passwd}\$"),
    ("@someone", None),
    # sections 2.5 and 6.6: no entity and no HTML
    ("<script>alert(1)</script>", r"\<script>alert(1)\</script>"),
    ("&amp; &#60;", r"\&amp; \&#60;"),
    ("a > b", None),
    # whitespace, invisible characters
    ("line1\nline2", "line1 line2"),
    ("    indented  code   ", "indented code"),
    ("a\x00b\x1bc", "abc"),
    ("abc\u202edcba\u2066x\u2069\u200b", "abcdcbax"),
    ("\U000e0041\U000e0042", r"\[U+E0041\][U+E0042]"),  # invisible tag characters
    ("\ue000", r"\[U+E000\]"),  # private use
    ("\udc80", "\ufffd"),
    # plain text and Unicode text are kept
    ("2025-12-02, gainsmith 0.1.0, belt_drive.toml", None),
    ("Привет 中文 😀 ω", None),
    ("Mass m", None),
]


@pytest.mark.parametrize(("text", "expected"), MARKDOWN_PAIRS)
def test_escape_markdown_pairs(text: str, expected: str | None) -> None:
    assert escape_markdown(text) == (text if expected is None else expected)


def test_escape_markdown_leaves_no_html_or_link_syntax() -> None:
    text = "".join(chr(c) for c in range(0x20, 0x7F))
    out = escape_markdown(text)
    # every character that starts inline syntax anywhere is preceded by a backslash
    for i, char in enumerate(out):
        if char in "*_`|$~<":
            assert out[i - 1] == "\\", (char, out)
    assert escape_markdown("&lt; &#60;") == r"\&lt; \&#60;"


# --------------------------------------------------------------------------------------
# Trust marks
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "latex",
    [
        r"\input{/etc/passwd}",
        r"x + \include{a}",
        r"\openin5=/etc/passwd",
        r"\immediate\write18{touch x}",
        r"\catcode`\@=11",
        r"\csname input\endcsname",
        r"\def\x{1}",
        r"^^5cinput",
        r"\pdffiledump offset0 length9{x}",
        r"\directlua{os.exit()}",
        r"\usepackage{x}",
        r"a\end{document}",
        r"\begin{verbatim}",
    ],
)
def test_trusted_latex_refuses_dangerous_text(latex: str) -> None:
    with pytest.raises(RenderError, match="refusing to trust"):
        TrustedLatex(latex)


@pytest.mark.parametrize(
    "latex",
    [
        r"\frac{1}{s^{2} + 2 \zeta \omega_{n} s + \omega_{n}^{2}}",
        r"\left[\begin{matrix}0 & 1\\- \frac{k}{m} & - \frac{b}{m}\end{matrix}\right]",
        r"\includegraphics[width=\linewidth]{step.pdf}",
        r"\operatorname{diag}\left(1, 2\right)",
    ],
)
def test_trusted_latex_accepts_formulas(latex: str) -> None:
    assert TrustedLatex(latex) == latex


def test_trust_does_not_survive_string_operations() -> None:
    trusted = TrustedLatex(r"\alpha")
    assert type(trusted + "x") is str
    assert type(trusted.upper()) is str
    assert type(trusted[1:]) is str


# --------------------------------------------------------------------------------------
# Environments
# --------------------------------------------------------------------------------------


def _tex(source: str, **values: object) -> str:
    return make_environment("tex").from_string(source).render(**values)


def _md(source: str, **values: object) -> str:
    return make_environment("md").from_string(source).render(**values)


def test_tex_environment_escapes_plain_strings() -> None:
    assert _tex(r"\title{\VAR{t}}", t="50% & $x$") == r"\title{50\% \& \$x\$}"


def test_tex_environment_trusts_trusted_latex_only() -> None:
    assert _tex(r"$\VAR{f}$", f=TrustedLatex(r"\frac{1}{2}")) == r"$\frac{1}{2}$"
    assert _tex(r"\VAR{f}", f=TrustedMarkdown("**b**")) == r"**b**"
    assert _tex(r"\VAR{f}", f=TrustedMarkdown(r"\x")) == r"\textbackslash{}x"
    assert _tex(r"\VAR{f}", f=markupsafe.Markup(r"\input{x}")) == r"\textbackslash{}input\{x\}"


def test_tex_environment_escapes_derived_and_constant_values() -> None:
    trusted = TrustedLatex(r"\alpha")
    assert _tex(r"\VAR{f|upper}", f=trusted) == r"\textbackslash{}ALPHA"
    assert _tex(r"\VAR{f ~ ''}", f=trusted) == r"\textbackslash{}alpha"
    assert _tex(r"\VAR{f|safe}", f=r"\input{x}") == r"\textbackslash{}input\{x\}"
    assert _tex(r'\VAR{"\\input"}') == r"\textbackslash{}input"


def test_tex_environment_formats_other_values() -> None:
    assert _tex(r"\VAR{x}", x=None) == r"\textemdash{}"
    assert _tex(r"\VAR{x}", x=-3) == "{-}3"
    assert _tex(r"\VAR{x}", x=2.5) == "2.5"
    assert _tex(r"\VAR{x|tex_number(3)}", x=1.23456e-5) == r"1.23\times10^{-5}"


def test_tex_environment_keeps_macro_layout_and_escapes_its_values() -> None:
    source = (
        r"\BLOCK{ macro row(a, b) }\VAR{a} & \VAR{b} \\\BLOCK{ endmacro }"
        "\n"
        r"\VAR{row(x, y)}"
    )
    assert _tex(source, x="a&b", y="$") == r"a\&b & \$ \\"


def test_tex_environment_line_statements_and_comments() -> None:
    source = "%% if flag\nshown\n%% endif\n%# a comment\n\\#{ another }end\n"
    # a line comment keeps its newline (Jinja2 documentation, "Line Statements")
    assert _tex(source, flag=True) == "shown\n\nend\n"


def test_md_environment_escapes_and_trusts_markdown_only() -> None:
    assert _md("# {{ t }}", t="*x* <b>") == r"# \*x\* \<b>"
    assert _md("{{ t }}", t=TrustedMarkdown("**b**")) == "**b**"
    assert _md("{{ t }}", t=TrustedLatex(r"x^{*}_1")) == r"x^{\*}\_1"
    assert _md("{{ t }}", t=None) == MISSING_VALUE
    assert _md("{{ x|md_number }}", x=-2.5e-9) == "−2.5×10⁻⁹"


@pytest.mark.parametrize("kind", ["tex", "md"])
def test_strict_undefined_raises_on_missing_variable(kind: str) -> None:
    source = r"\VAR{missing}" if kind == "tex" else "{{ missing }}"
    with pytest.raises(jinja2.UndefinedError):
        make_environment(kind).from_string(source).render()  # type: ignore[arg-type]


@pytest.mark.parametrize("kind", ["tex", "md"])
def test_strict_undefined_raises_on_missing_attribute(kind: str) -> None:
    source = r"\VAR{x.nope}" if kind == "tex" else "{{ x.nope }}"
    with pytest.raises(jinja2.UndefinedError):
        make_environment(kind).from_string(source).render(x="s")  # type: ignore[arg-type]


def test_make_environment_rejects_unknown_kind() -> None:
    with pytest.raises(ValueError, match="kind"):
        make_environment("html")  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "call",
    [
        lambda: output_format("html"),
        lambda: make_environment("html"),
        lambda: render_template("html", "memo.html.j2", {}),
    ],
    ids=["output_format", "make_environment", "render_template"],
)
def test_unknown_format_is_a_render_error(call) -> None:
    with pytest.raises(RenderError, match="'html'") as info:
        call()
    assert isinstance(info.value, UnknownFormatError)


def test_formats_are_registered_once_with_their_files() -> None:
    assert [f.name for f in FORMATS] == ["tex", "md"]
    assert output_format("tex") is LATEX and output_format("md") is MARKDOWN
    assert (LATEX.template, LATEX.suffix) == ("memo.tex.j2", ".tex")
    assert (MARKDOWN.template, MARKDOWN.suffix) == ("memo.md.j2", ".md")
    for fmt in FORMATS:
        assert (templates_dir() / fmt.template).is_file()


@pytest.mark.parametrize(
    ("fmt", "text", "escaped"),
    [
        (LATEX, "50% & $x_1$", r"50\% \& \$x\_1\$"),
        (LATEX, None, r"\textemdash{}"),
        (LATEX, -3, "{-}3"),
        (MARKDOWN, "*x* <b>", r"\*x\* \<b>"),
        (MARKDOWN, None, MISSING_VALUE),
        (MARKDOWN, 2.5, "2.5"),
    ],
)
def test_each_format_escapes_plain_values(fmt, text, escaped) -> None:
    assert fmt.finalize(text) == escaped
    assert fmt.escape("a_b") == (escape_latex if fmt is LATEX else escape_markdown)("a_b")


@pytest.mark.parametrize("fmt", [LATEX, MARKDOWN], ids=lambda f: f.name)
def test_each_format_marks_our_own_math_and_only_that(fmt) -> None:
    other = MARKDOWN if fmt is LATEX else LATEX
    context = {"f": own_math(r"\frac{1}{2}"), "rows": [(own_math("x_1"), "a_b")], "t": "a_b"}
    marked = fmt.mark(context)
    assert type(marked["f"]) is fmt.trusted and marked["f"] == r"\frac{1}{2}"
    assert type(marked["rows"][0][0]) is fmt.trusted
    assert marked["t"] == "a_b" and type(marked["t"]) is str
    assert fmt.finalize(marked["f"]) == r"\frac{1}{2}"
    assert fmt.finalize(marked["rows"][0][1]) == fmt.escape("a_b")
    # the other format's trust mark is escaped like any string
    assert other.finalize(marked["f"]) == other.escape(r"\frac{1}{2}")
    assert type(fmt.trust("a_b")) is fmt.trusted and fmt.finalize(fmt.trust("a_b")) == "a_b"


def test_environment_options() -> None:
    env = make_environment("tex")
    assert env.undefined is jinja2.StrictUndefined
    assert env.autoescape is False
    assert env.keep_trailing_newline and env.trim_blocks and env.lstrip_blocks


def test_templates_dir_holds_the_selftest_template() -> None:
    assert (templates_dir() / "_selftest.tex.j2").is_file()


def test_selftest_template_has_the_required_preamble() -> None:
    text = (templates_dir() / "_selftest.tex.j2").read_text(encoding="utf-8")
    for line in LATEX_PREAMBLE_LINES:
        assert line in text


def test_render_template_wraps_errors() -> None:
    with pytest.raises(RenderError, match="not found"):
        render_template("tex", "no-such-template.tex.j2", {})
    with pytest.raises(RenderError, match="undefined"):
        render_template("tex", "_selftest.tex.j2", {})


# --------------------------------------------------------------------------------------
# Numbers
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("value", "digits", "expected"),
    [
        (1.23e-05, 6, r"1.23\times10^{-5}"),
        (-1.23e-05, 6, r"-1.23\times10^{-5}"),
        (12345678.0, 3, r"1.23\times10^{7}"),
        (0.5, 6, "0.5"),
        (-0.0, 6, "0"),
        (7, 6, "7"),
        (float("inf"), 6, r"\infty"),
        (float("-inf"), 6, r"-\infty"),
        (float("nan"), 6, r"\mathrm{NaN}"),
        (-2 + 3j, 6, r"-2 + 3\,\mathrm{j}"),
        (-2 - 3j, 6, r"-2 - 3\,\mathrm{j}"),
        (-4j, 6, r"-4\,\mathrm{j}"),
        (complex(5, 0), 6, "5"),
        (complex(-4, 1e-17), 6, "-4"),  # round-off on a real pole is not shown
        (complex(-1.5e-7, -2e6), 6, r"-2\times10^{6}\,\mathrm{j}"),
        (-1.5e-7 + 2e-7j, 3, r"-1.5\times10^{-7} + 2\times10^{-7}\,\mathrm{j}"),
        (-1.5e-7 + 2j, 3, r"2\,\mathrm{j}"),  # the real part is below the 3rd figure of |z|
        (np.float32(2.5), 6, "2.5"),
        (np.int64(-12), 6, "-12"),
    ],
)
def test_tex_number(value: object, digits: int, expected: str) -> None:
    result = tex_number(value, digits)
    assert isinstance(result, TrustedLatex)
    assert result == expected


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (1.23e-05, "1.23×10⁻⁵"),
        (-4.0, "−4"),
        (2e10, "2×10¹⁰"),
        # complex numbers are poles, written as a design file writes them
        (1 - 2j, "1-2j"),
        (-2 + 3j, "-2+3j"),
        (complex(-4, 1e-17), "-4"),
    ],
)
def test_md_number(value: object, expected: str) -> None:
    result = md_number(value)
    assert isinstance(result, TrustedMarkdown)
    assert result == expected


@pytest.mark.parametrize(("value", "digits"), [("1.5", 6), (True, 6), (None, 6), (1.5, 0)])
def test_number_filters_reject_bad_input(value: object, digits: int) -> None:
    with pytest.raises(RenderError):
        tex_number(value, digits)
    with pytest.raises(RenderError):
        md_number(value, digits)
