"""The typesetting of the memo: every worked memo compiles with no overfull line and nothing
outside the text area, and its prose carries no ASCII math.

The worked memos are compiled from their committed sources (``worked_designs/*.tex`` and the
figure files beside them; ``tests/test_memo.py`` checks that these are current) through the
same locked-down compile as ``gainsmith memo`` (:func:`symbolic.render.pdf.compile_pdf_with_log`,
which hands back the text of the TeX log).  What the checks read:

* ``Overfull \\hbox`` in the log: TeX could not fit a line (a formula, a table row, a word)
  into the text width; it prints it anyway, into the margin.  TeX's own diagnostic (D. E.
  Knuth, *The TeXbook*, Addison-Wesley, 1984, ch. 6, "Running TeX"; from memory).
* Every word ``pdftotext -bbox`` finds on a page lies within the text area (A4 with the
  memo's 2.2 cm margins, 1 pt of slack): a display that runs off the page, or is clipped by
  it, shows here even where TeX wrote no warning.
* In the LaTeX source, before the appendix that prints the design file and outside
  typewriter text (``\\texttt{...}``, where design-file keys and
  code names belong), no escaped underscore or caret and no ASCII formula (``sqrt(``,
  ``log10(``, ``exp(``, ``a*b``): a formula is typeset as math, a name is set as code.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from symbolic.render.pdf import compile_pdf_with_log
from symbolic.render.texsafe import escape_latex

from .conftest import WORKED, WORKED_FILES, require_tex

#: The text area of the memo's pages (A4, geometry margin=2.2cm), in PDF points.
PAGE_LEFT = 2.2 / 2.54 * 72
PAGE_RIGHT = 595.276 - PAGE_LEFT
#: microtype lets punctuation and some letters protrude into the margin: up to 2.5 pt was
#: measured on the worked memos (TeX Live 2022, Latin Modern at 10 pt).
SLACK = 3.0


def _compiled(name: str, tmp_path: Path) -> tuple[str, Path]:
    """The TeX log and the PDF of the committed worked memo `name`."""
    require_tex()
    source = (WORKED / f"{name}.tex").read_text(encoding="utf-8")
    assets = {
        f"figures/{p.name}": p.read_bytes() for p in (WORKED / "figures").glob(f"{name}-*.pdf")
    }
    compiled = compile_pdf_with_log(source, assets)
    pdf = tmp_path / f"{name}.pdf"
    pdf.write_bytes(compiled.pdf)
    return compiled.log, pdf


_WORD = re.compile(
    r'<word xMin="([\d.]+)" yMin="[\d.]+" xMax="([\d.]+)" yMax="[\d.]+">(.*?)</word>'
)


def _words_outside(pdf: Path) -> list[str]:
    if shutil.which("pdftotext") is None:
        pytest.skip("no pdftotext on PATH")
    html = subprocess.run(
        ["pdftotext", "-bbox", str(pdf), "-"], capture_output=True, check=True, timeout=120
    ).stdout.decode("utf-8", "replace")
    outside = []
    for page, body in enumerate(html.split("<page ")[1:], start=1):
        for x_min, x_max, word in _WORD.findall(body):
            if float(x_min) < PAGE_LEFT - SLACK or float(x_max) > PAGE_RIGHT + SLACK:
                outside.append(f"page {page}: {word!r} at x = {x_min}..{x_max} pt")
    return outside


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_worked_memo_has_no_overfull_line_and_nothing_off_the_page(path, tmp_path):
    log, pdf = _compiled(path.stem, tmp_path)
    overfull = re.findall(r"^Overfull \\hbox.*$", log, re.MULTILINE)
    assert overfull == [], f"{path.stem}: {len(overfull)} overfull lines: {overfull[:5]}"
    assert _words_outside(pdf) == []


def test_the_log_reaches_the_caller_and_shows_an_overfull_line():
    """The check above can fail: a line wider than the text is reported in the log."""
    require_tex()
    wide = "x" * 400  # one word, wider than the line: TeX cannot break it
    source = "\\documentclass{article}\\begin{document}\n" + wide + "\n\\end{document}\n"
    assert re.search(r"^Overfull \\hbox", compile_pdf_with_log(source, {}).log, re.MULTILINE)


_TEXTTT = re.compile(r"\\texttt\{")


def _without_typewriter(tex: str) -> str:
    """The source with every ``\\texttt{...}`` group removed (braces balanced)."""
    out, position = [], 0
    for match in _TEXTTT.finditer(tex):
        if match.start() < position:
            continue
        out.append(tex[position : match.start()])
        depth, i = 0, match.end() - 1
        while i < len(tex):
            depth += {"{": 1, "}": -1}.get(tex[i], 0) if tex[i - 1] != "\\" else 0
            if depth == 0:
                break
            i += 1
        position = i + 1
    out.append(tex[position:])
    return "".join(out)


_ASCII_MATH = {
    "an escaped underscore outside code": re.compile(r"\\_"),
    "an escaped caret": re.compile(r"\\textasciicircum"),
    "a product written with *": re.compile(r"[A-Za-z0-9)]\*[A-Za-z0-9(]"),
    "a function written in ASCII": re.compile(r"\b(?:sqrt|log10|exp)\("),
    "a word broken at an arbitrary point": re.compile(r"[a-z]\\allowbreak\{\}[a-z]"),
}


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_worked_memo_prose_has_no_ascii_math(path):
    tex = (WORKED / f"{path.stem}.tex").read_text(encoding="utf-8")
    # the design file itself, in the last appendix, is printed as it is written
    body, design_file = tex.split(r"\label{app:design-file}")
    assert "speed" in design_file or "[plant]" in design_file.replace("{[}", "[").replace(
        "{]}", "]"
    )
    prose = _without_typewriter(body)
    found = {
        what: sorted(set(m.group() for m in pattern.finditer(prose)))[:5]
        for what, pattern in _ASCII_MATH.items()
        if pattern.search(prose)
    }
    assert found == {}


def test_the_prose_check_can_fail():
    """An ASCII formula through the plain escaper is caught by the checks above."""
    prose = _without_typewriter(escape_latex("T_s = 4/(zeta*omega_n)") + r" \texttt{u\_max}")
    assert _ASCII_MATH["an escaped underscore outside code"].search(prose)
    assert _ASCII_MATH["a product written with *"].search(prose)
    assert "u\\_max" not in prose
