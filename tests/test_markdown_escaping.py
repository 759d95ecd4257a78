"""Tests of escape_markdown's context rules: plain text stays plain, syntax is made inert.

Two kinds of check:

* input/expected pairs, one or more per rule of :func:`symbolic.render.texsafe.escape_markdown`;
* a round trip through cmark-gfm, GitHub's own fork of the CommonMark reference
  implementation (the ``cmarkgfm`` bindings, a test dependency only), with the GitHub
  extensions on (tables, strikethrough, autolinks, tag filter) and raw HTML let through:
  every value, placed in each context the memo templates use, must render as its own text
  and add no element, attribute, link, image or table cell.  The values are the pairs'
  inputs, the TeX/Markdown attack corpus of ``tests/test_pdf.py`` and random strings of
  Markdown punctuation (hypothesis).

External sources behind the rules and the expected values:

* J. MacFarlane, *CommonMark Spec* 0.31.2, 2024: section 2.4 (a backslash escapes any ASCII
  punctuation and is literal before anything else), 2.5 (entity and numeric character
  references), 4.1 (thematic breaks), 4.2 (ATX headings and closing sequences), 4.3 (setext
  underlines), 4.4 (indented code), 4.5 (fenced code), 4.6 (HTML blocks), 4.7 (link
  reference definitions), 5.1 (block quotes), 5.2 (list items: ``-``, ``+``, ``*``, 1 to 9
  digits and ``.`` or ``)``, followed by a space or the end of the line), 6.1 (code spans),
  6.2 (emphasis: left- and right-flanking delimiter runs; ``_`` inside a word neither opens
  nor closes), 6.3 to 6.5 (links, images, autolinks), 6.6 (raw HTML).
* GitHub, *GitHub Flavored Markdown Spec* 0.29-gfm, 2019: section 4.10 (tables; a delimiter
  row such as ``:--`` under a paragraph line makes a one-column table; ``\\|`` in a cell),
  6.5 (strikethrough with one or two ``~``), 6.9 (extended autolinks: ``www.``, ``http://``,
  ``https://``, ``ftp://``, e-mail addresses).
* GitHub Docs, "Writing mathematical expressions": ``$...$`` and ``$$...$$`` delimit math
  and ``\\$`` is a literal dollar sign (from memory).
"""

from __future__ import annotations

import re
import unicodedata
from html.parser import HTMLParser

import cmarkgfm
import pytest
from cmarkgfm.cmark import Options
from hypothesis import example, given, settings
from hypothesis import strategies as st

from symbolic.render.formats import MARKDOWN, make_environment, templates_dir
from symbolic.render.texsafe import escape_markdown

from .test_pdf import CORPUS

# --------------------------------------------------------------------------------------
# Input/expected pairs
# --------------------------------------------------------------------------------------

#: Text that Markdown reads as text: it must come out exactly as it went in.
PLAIN = [
    "2025-12-02",
    "gainsmith 0.1.0",
    "belt_drive.toml",
    "observer.speed_factor",
    "u_max = 6 A, overshoot_percent",
    "Design team C",
    "full-order observer, continuous",
    "8.741 %",
    "0 (relative 1e-6)",
    "settling time (2 % band)",
    "all Re(s) < 0",
    "slowest Re(s) = -8 1/s",
    "J2 = 0.0004, ks = 0.9: largest Re(s) = 0.7595",
    "Mass 1.5 kg (rated) @ 20 C: ok? yes! 3 * 4 = 12; a/b + c.",
    "kg m^2, N·m/A, rad/s²",
    "O'Brien's \"quoted\" 100% ≤ 5",
    "C# and F#",
    "x > 0 and y >= 1",
    "a - b + c = d",
    "R&D team, A & B",
    "1.5 mm, 2) or 3.",
    "C:\\Windows\\System32 and \\alpha",
    "{braces} (parens) !bang",
    "see section 4.2",
    "2 * 3 ~ 6",
    "a _ b",
    "Привет 中文 😀 ω",
]

#: Each rule of escape_markdown with the construct it makes inert.
PAIRS = [
    # inline, anywhere: code spans, links, images, table cells, math (CommonMark 6.1, 6.3,
    # 6.4; GFM 4.10; GitHub math)
    ("`code`", r"\`code\`"),
    ("[x](javascript:alert(1))", r"\[x\](javascript:alert(1))"),
    ("![](http://evil.example/x.png)", r"!\[\](http\://evil.example/x.png)"),
    ("[x]: http://evil.example", r"\[x\]: http\://evil.example"),
    ("see [^1]", r"see \[^1\]"),
    ("a|b", r"a\|b"),
    ("$x^2$ costs $5", r"\$x^2\$ costs \$5"),
    ("$$\\input{/etc/passwd}$$", r"\$\$\input{/etc/passwd}\$\$"),
    # emphasis and strikethrough (CommonMark 6.2, GFM 6.5)
    ("*bold* _it_", r"\*bold\* \_it\_"),
    ("**x**", r"\*\*x\*\*"),
    ("a*b*c", r"a\*b\*c"),
    ("_private and trailing_", r"\_private and trailing\_"),
    ("x_1_ and (_)", r"x_1\_ and (\_)"),
    ("~~gone~~", r"\~\~gone\~\~"),
    ("about ~5 ms", r"about \~5 ms"),
    ("*", r"\*"),
    # backslash: only where it would escape the next character (CommonMark 2.4)
    ("\\", "\\\\"),
    ("\\*", "\\\\\\*"),  # one pass: the backslash and the star each escaped once
    ("a\\[b", "a\\\\\\[b"),
    ("\\alpha \\beta", None),
    # HTML and autolinks (CommonMark 6.5, 6.6; 2.5 for entities)
    ("<script>alert(1)</script>", r"\<script>alert(1)\</script>"),
    ("<!-- c --> <?php ?> <http://x.org>", r"\<!-- c --> \<?php ?> \<http\://x.org>"),
    ("x <", r"x \<"),
    ("<1a@b.example> <=x@y.example> <5 ms", r"\<1a@b.example> \<=x@y.example> \<5 ms"),
    ("&amp; &#60; &#x3C;", r"\&amp; \&#60; \&#x3C;"),
    ("P&ID", r"P\&ID"),
    # GitHub's extended autolinks (GFM 6.9)
    ("http://x.org and https://y.org", r"http\://x.org and https\://y.org"),
    ("www.example.org", r"www\.example.org"),
    ("https:", r"https\:"),
    # line starts: blocks (CommonMark 4.1-4.7, 5.1, 5.2; GFM 4.10)
    ("# heading", r"\# heading"),
    ("###### six", r"\###### six"),
    ("####### seven is text", None),
    ("#hashtag", None),
    ("Issue #", r"Issue \#"),  # an ATX closing sequence would drop it
    ("> quote", r"\> quote"),
    (">quote", r"\>quote"),
    ("- item", r"\- item"),
    ("+ item", r"\+ item"),
    ("* item", r"\* item"),
    ("-", r"\-"),
    ("-5 V", None),
    ("1. item", r"1\. item"),
    ("2) item", r"2\) item"),
    ("1.", r"1\."),
    ("1234567890. ten digits is text", None),
    ("---", r"\---"),
    ("- - -", r"\- - -"),
    ("___", r"\_\_\_"),
    ("===", r"\==="),
    ("= x", None),
    (":--", r"\:--"),
    ("--:", r"\--:"),
    (":-:", r"\:-:"),
    ("```python", r"\`\`\`python"),
    ("~~~", r"\~\~\~"),
    # whitespace: no indented code, hard break or second line (CommonMark 4.4, 6.7)
    ("    indented  code   ", "indented code"),
    ("line1\nline2\r\n# line3", "line1 line2 # line3"),
    ("trailing  \nbreak", "trailing break"),
    ("tab\there", "tab here"),
    # invisible and unassigned characters
    ("a\x00b\x1bc", "abc"),
    ("abc\u202edcba\u2066x\u2069\u200b", "abcdcbax"),
    ("\U000e0041\U000e0042", r"\[U+E0041\][U+E0042]"),  # invisible tag characters
    ("\ue000", r"\[U+E000\]"),  # private use
    ("\udc80", "\ufffd"),
    ("e\u0301", "é"),
]


@pytest.mark.parametrize("text", PLAIN)
def test_plain_text_stays_as_it_is(text: str) -> None:
    assert escape_markdown(text) == text


@pytest.mark.parametrize(("text", "expected"), PAIRS)
def test_escape_markdown_pairs(text: str, expected: str | None) -> None:
    assert escape_markdown(text) == (text if expected is None else expected)


def test_every_math_dollar_is_escaped() -> None:
    # GitHub math is not in cmark-gfm, so the round trip cannot see it: check the text.
    out = escape_markdown("$a$ $$b$$ \\$c\\$ $")
    for i, char in enumerate(out):
        if char == "$":
            run = len(out[:i]) - len(out[:i].rstrip("\\"))
            assert run % 2 == 1, out


def test_the_environment_uses_the_new_escaper() -> None:
    env = make_environment("md")
    rendered = env.from_string("| Date | {{ d }} |").render(d="2025-12-02")
    assert rendered == "| Date | 2025-12-02 |"
    assert MARKDOWN.finalize("gainsmith 0.1.0") == "gainsmith 0.1.0"
    assert MARKDOWN.finalize(2.5) == "2.5"


# --------------------------------------------------------------------------------------
# Round trip through GitHub's renderer
# --------------------------------------------------------------------------------------

_OPTIONS = Options.CMARK_OPT_UNSAFE | Options.CMARK_OPT_FOOTNOTES
_SLOT = "VALUEHERE"

#: The places where the memo templates print a value (templates/memo*.md.j2).
CONTEXTS = [
    "{v}",
    "A paragraph line.\n{v}",  # setext underline, table delimiter row
    "{v}\n\nThe next paragraph.",
    "Method: {v}.",
    "# {v}",
    "## {v} ##",
    "- {v}",
    "3. {v}",
    "- R3 {v}: the limit",
    "| Name | Value |\n|---|---|\n| {v} | x |\n| y | {v} |",
    "| {v} | head |\n|---|---|\n| a | b |",
    "*{v}*",
    "**Verdict: {v}**",
    "{v} ({v})",
    "![{v}](figures/belt-step.png)",
]


class _Events(HTMLParser):
    """The rendered HTML as a list of events: tags with their attributes, and text."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.events: list[tuple] = []

    def handle_starttag(self, tag, attrs):
        self.events.append(("start", tag, tuple(attrs)))

    def handle_startendtag(self, tag, attrs):
        self.events.append(("start", tag, tuple(attrs)))
        self.events.append(("end", tag))

    def handle_endtag(self, tag):
        self.events.append(("end", tag))

    def handle_data(self, data):
        if self.events and self.events[-1][0] == "text":
            self.events[-1] = ("text", self.events[-1][1] + data)
        else:
            self.events.append(("text", data))

    def handle_comment(self, data):
        self.events.append(("comment", data))

    def handle_decl(self, decl):
        self.events.append(("decl", decl))

    def handle_pi(self, data):
        self.events.append(("pi", data))

    def unknown_decl(self, data):
        self.events.append(("decl", data))


def _events(markdown: str) -> list[tuple]:
    parser = _Events()
    parser.feed(cmarkgfm.github_flavored_markdown_to_html(markdown, options=_OPTIONS))
    parser.close()
    return _drop_self_links(_merge_text(parser.events))


def _merge_text(events: list[tuple]) -> list[tuple]:
    merged: list[tuple] = []
    for event in events:
        if event[0] == "text" and merged and merged[-1][0] == "text":
            merged[-1] = ("text", merged[-1][1] + event[1])
        else:
            merged.append(event)
    return merged


def _drop_self_links(events: list[tuple]) -> list[tuple]:
    """Unwrap GitHub's e-mail autolinks, which link an address to itself.

    cmark-gfm finds e-mail addresses in the text after backslash escapes are resolved, so
    no escape can stop them (see escape_markdown); the link shows exactly its target.
    Any other link, or a mailto link whose text differs from its target, stays and fails.
    """
    out: list[tuple] = []
    i = 0
    while i < len(events):
        event = events[i]
        if (
            event[0] == "start"
            and event[1] == "a"
            and i + 2 < len(events)
            and events[i + 1][0] == "text"
            and events[i + 2] == ("end", "a")
        ):
            href, text = dict(event[2]).get("href", ""), events[i + 1][1]
            self_link = href == "mailto:" + text or (
                href == text and text.startswith(("mailto:", "xmpp:"))
            )
            if "@" in text and self_link:
                out.append(events[i + 1])
                i += 3
                continue
        out.append(event)
        i += 1
    return _merge_text(out)


def _shown(text: str) -> str:
    """What the reader must see of a value: the documented normalisation, no escapes.

    Written from escape_markdown's documentation, independently of its code.
    """
    text = unicodedata.normalize(
        "NFC", "".join("\ufffd" if 0xD800 <= ord(c) <= 0xDFFF else c for c in text)
    )
    out = []
    for char in text:
        code = ord(char)
        category = unicodedata.category(char)
        if char in "\t\n\v\f\r\x1c\x1d\x1e\x1f\x85\u1680\u2028\u2029\u202f\u205f\u3000" or (
            0x2000 <= code <= 0x200A
        ):
            out.append(" ")
        elif (
            category == "Cc"
            or code == 0xAD
            or char in "\ufeff\u061c\u180e"
            or (0x200B <= code <= 0x200F or 0x202A <= code <= 0x202E or 0x2060 <= code <= 0x2069)
        ):
            continue
        elif category in ("Cf", "Co", "Cn", "Cs"):
            out.append(f"[U+{code:04X}]")
        else:
            out.append(char)
    return _collapse("".join(out)).strip(" ")


def _collapse(text: str) -> str:
    while "  " in text:
        text = text.replace("  ", " ")
    return text


def _check_round_trip(text: str, context: str) -> None:
    shown = _collapse(_shown(text))
    if not shown:
        return
    escaped = escape_markdown(text)
    got = _events(context.format(v=escaped))
    template = _events(context.format(v=_SLOT))

    def fill(event: tuple) -> tuple:
        if event[0] == "text":
            return ("text", event[1].replace(_SLOT, shown))
        if event[0] == "start":
            return (
                "start",
                event[1],
                tuple((k, (v or "").replace(_SLOT, shown)) for k, v in event[2]),
            )
        return event

    want = _merge_text([fill(e) for e in template])
    assert got == want, f"\nvalue   {text!r}\nescaped {escaped!r}\ncontext {context!r}"


_CORPUS_TEXTS = [text for text, _ in CORPUS if "{" not in text or "canary" not in text]
_VALUES = (
    PLAIN
    + [text for text, _ in PAIRS]
    + _CORPUS_TEXTS
    + [
        "O'Brien <ob@example.org> \\\\ \u202eevil",
        "Plant \\input{x} & $x^2$ 100% #1 ~ _ {",
        "[click](https://evil.example) ![img](x.png) <img src=x onerror=alert(1)>",
        "| a | b |\n|---|---|",
        "javascript:alert(1)",
        "[a]\n\n[a]: https://evil.example",
    ]
)


@pytest.mark.parametrize("context", CONTEXTS)
def test_values_render_as_their_own_text(context: str) -> None:
    for text in _VALUES:
        _check_round_trip(text, context)


_MARKDOWN_ALPHABET = list("\\`*_{}[]()#+-.!|$~=:@<>&;/^ \nax1w") + [
    "www.",
    "http",
    "://",
    "&amp;",
    "<a",
    "@b.c>",
]


@settings(max_examples=300, deadline=None)
@given(
    st.lists(st.sampled_from(_MARKDOWN_ALPHABET), max_size=14).map("".join),
    st.sampled_from(CONTEXTS),
)
@example("1", "{v}")
@example("a\n:--", "{v}")
def test_random_punctuation_renders_as_its_own_text(text: str, context: str) -> None:
    _check_round_trip(text, context)


# --------------------------------------------------------------------------------------
# What the escaper assumes of the templates
# --------------------------------------------------------------------------------------

_MD_TEMPLATES = sorted(templates_dir().glob("*.md.j2"))


@pytest.mark.parametrize("path", _MD_TEMPLATES, ids=lambda p: p.name)
def test_templates_define_no_link_labels(path) -> None:
    # A [label] in a value stays text because no document defines a label (CommonMark 4.7).
    for line in path.read_text(encoding="utf-8").splitlines():
        assert not re.match(r" {0,3}\[[^\]]*\]:", line), line


@pytest.mark.parametrize("path", _MD_TEMPLATES, ids=lambda p: p.name)
def test_templates_write_no_bracket_or_value_right_after_a_value(path) -> None:
    # A value ending in "[x]" stays text unless "(" or "[" follows it directly; two values
    # written next to each other could form "1" + ". x" at a line start.  The macros of
    # memo_macros.md.j2 write each prose string and each unit as one value (the md_prose
    # and md_unit filters join the pieces), so they pass the same check.
    text = re.sub(r"\{#.*?#\}", "", path.read_text(encoding="utf-8"), flags=re.S)
    for loop in re.finditer(r"\{%-?\s*for\b.*?%\}(.*?)\{%-?\s*endfor\s*-?%\}", text, flags=re.S):
        body = re.sub(r"\{%.*?%\}", "", loop.group(1), flags=re.S)
        assert not (body.startswith("{{") and body.endswith("}}")), loop.group()
    text = re.sub(r"\{%.*?%\}", "", text, flags=re.S)
    assert not re.search(r"\}\}(?:\(|\[|\{\{)", text), path.name


# --------------------------------------------------------------------------------------
# The attack corpus through a whole memo
# --------------------------------------------------------------------------------------


def test_corpus_in_a_whole_memo_adds_no_markup(tmp_path) -> None:
    """Each corpus string as a parameter description of a real memo: GitHub's renderer
    gives the same elements as for a memo whose descriptions are plain words, and shows
    every string as its own text."""
    import symbolic
    from symbolic.render.memo import assemble_memo

    from .test_memo import HOSTILE, _corpus_design

    items = [t for t in _VALUES + HOSTILE if not any(0xD800 <= ord(c) <= 0xDFFF for c in t)]
    # a few parameters (each adds to the derivation), many strings per description
    groups = [" ".join(items[i : i + 25]) for i in range(0, len(items), 25)]
    memos = []
    for folder, texts in (
        ("hostile", groups),
        ("twin", [f"PLAINWORD{i}Z" for i in range(len(groups))]),
    ):
        (tmp_path / folder).mkdir()
        path = _corpus_design(tmp_path / folder, texts, 0)
        memos.append(assemble_memo(symbolic.derive(symbolic.load_design(path))).markdown)
    hostile, twin = (_events(m) for m in memos)
    assert [e for e in hostile if e[0] != "text"] == [e for e in twin if e[0] != "text"]
    shown = "".join(e[1] for e in hostile if e[0] == "text")
    for text in items:
        assert _collapse(_shown(text)) in shown, text
