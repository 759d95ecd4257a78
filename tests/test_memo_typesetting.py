"""The typesetting of the memo: every worked memo compiles with no overfull line and nothing
outside the text area, and its prose carries no ASCII math.

The worked memos are the ones the test run builds once (the ``worked_memo`` fixture of
``tests/conftest.py``; ``tests/test_memo.py`` checks that they equal the committed
``worked_designs/*.tex``), compiled through the same locked-down compile as ``gainsmith memo``
(:func:`symbolic.render.pdf.compile_pdf_with_log`, which hands back the text of the TeX log).  What the checks read:

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
import sympy as sp

from symbolic.render.formats import make_environment
from symbolic.render.mathtex import equation_lines, expr_latex, printed_width
from symbolic.render.memo_design import unit_parts
from symbolic.render.memo_prose import FORMULAS, prose
from symbolic.render.pdf import compile_pdf_with_log
from symbolic.render.texsafe import escape_latex

from .conftest import ROOT, WORKED, WORKED_FILES, require_tex

#: The text area of the memo's pages (A4, geometry margin=2.2cm), in PDF points.
PAGE_LEFT = 2.2 / 2.54 * 72
PAGE_RIGHT = 595.276 - PAGE_LEFT
#: microtype lets punctuation protrude into the margin: up to 2.5 pt was measured on the
#: worked memos for the roman font, 3.7 pt for a typewriter full stop (TeX Live 2022,
#: Latin Modern at 10 pt).
SLACK = 4.0


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
def test_worked_memo_has_no_overfull_line_and_nothing_off_the_page(path, worked_memo):
    require_tex()
    memo = worked_memo(path.stem)
    log, pdf = memo.text(".log"), memo.folder / f"{path.stem}.pdf"
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
    "a sample index in text": re.compile(r"\{\[\}k(?:\+1)?\{\]\}"),
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
    assert _ASCII_MATH["a sample index in text"].search(escape_latex("x[k+1] = x[k] - y[k]"))


# --------------------------------------------------------------------------------------
# Formulas: broken to fit, products readable
# --------------------------------------------------------------------------------------
_PAGE = (
    "\\documentclass[10pt,a4paper]{article}\\usepackage[T1]{fontenc}\\usepackage{lmodern}"
    "\\usepackage{amsmath,amssymb}\\usepackage[margin=2.2cm]{geometry}\\begin{document}\n"
)


def test_a_very_long_condition_is_broken_into_lines_that_fit():
    """A Routh-like condition of 300 products of multi-letter names (once 1443 pt too wide
    on one line) is broken into lines that compile without an overfull box."""
    require_tex()
    names = sp.symbols("La Ra ke kt Jm bm Lc")
    expr = sum(
        (i + 1) * 137 * names[i % 7] * names[(i * 3 + 1) % 7] ** (1 + i % 3) * names[(i + 2) % 7]
        for i in range(300)
    )
    lines = equation_lines(r"a_{2} a_{1} - a_{0} > 0 \;\Leftrightarrow\; 0", expr, relation="<")
    assert len(lines) > 3
    body = "\\begin{align*}\n" + " \\\\\n".join(lines) + "\n\\end{align*}\n\\end{document}\n"
    log = compile_pdf_with_log(_PAGE + body, {}).log
    assert re.findall(r"^Overfull \\hbox.*$", log, re.MULTILINE) == []


def test_multi_letter_names_in_a_product_are_set_apart():
    J, R, La, ke, kt = sp.symbols("J R La ke kt")
    latex = expr_latex(J * R**2 - La * ke * kt)
    assert r"\mathit{La}\,\mathit{ke}\,\mathit{kt}" in latex
    assert r"J R^{2}" in latex  # single letters stay as they were
    assert expr_latex(ke**2 / J) == r"\frac{\mathit{ke}^{2}}{J}"  # no space where none is a product


def test_printed_width_counts_what_prints():
    assert printed_width(r"\mathit{ks}^{2}") == pytest.approx(2 + 0.7)
    assert printed_width(r"\frac{a+b}{c}") < printed_width("a+b+c")


# --------------------------------------------------------------------------------------
# Units
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "unit, parts",
    [
        ("kg m^2", [("kg", ""), ("m", "2")]),
        ("m/s^2", [("m/s", "2")]),
        ("N m s/rad", [("N", ""), ("m", ""), ("s/rad", "")]),
        ("s^-1", [("s", "\N{MINUS SIGN}1")]),
        ("kg*m^{2}", [("kg", ""), ("m", "2")]),
        ("m^x", [("m^x", "")]),  # only a whole-number exponent is typeset
        ("", []),
    ],
)
def test_units_are_factors_with_exponents(unit, parts):
    assert [(p["base"], p["power"]) for p in unit_parts(unit)] == parts


def test_a_unit_prints_with_a_superscript_and_escapes_the_rest():
    env = make_environment("tex")
    template = env.from_string('\\BLOCK{ from "memo_macros.tex.j2" import unit }\\VAR{unit(u)}')
    assert template.render(u=unit_parts("kg m^2")) == r"kg\ensuremath{\cdot}m\textsuperscript{2}"
    hostile = template.render(u=unit_parts(r"\input{x}^2"))
    assert r"\input" not in hostile and r"\textbackslash{}input" in hostile


# --------------------------------------------------------------------------------------
# Prose: formulas as math, names as code
# --------------------------------------------------------------------------------------
def test_the_formulas_of_the_source_notes_are_typeset():
    from symbolic.derivation.dominant import dominant_pair  # noqa: F401  (the notes' module)

    pieces = prose("Sec. 4.6 (2 % settling time T_s = 4/(zeta*omega_n))")
    assert {"math": r"T_s = 4/(\zeta\omega_n)"} in pieces
    assert prose("observer.speed_factor")[0] == {"code": ["observer.", "speed_", "factor"]}
    assert prose("k_i and x_hat")[0] == {"math": "k_{i}"}
    assert prose("e.g. Sec. 4.6") == [{"text": "e.g. Sec. 4.6"}]  # no code in plain words


def test_every_formula_key_is_written_by_our_own_code():
    """A key of the table that no module writes any more would never match."""
    sources = "".join(p.read_text(encoding="utf-8") for p in (ROOT / "symbolic").rglob("*.py"))
    missing = [k for k in FORMULAS if k not in sources and k.replace("-", "−") not in sources]
    # keys written after symbolic.render.memo_math.plain_text (ASCII forms of Unicode math)
    ascii_forms = {"x_hat_a = y_bar, x_hat_b = η + Ke y_bar", "u = … - K T^-1D_hat y_bar", "T^-1"}
    assert set(missing) <= ascii_forms | {k for k in FORMULAS if " - " in k}


# --------------------------------------------------------------------------------------
# The sections a board expects, on the committed memos
# --------------------------------------------------------------------------------------
def _tex(name: str) -> str:
    return (WORKED / f"{name}.tex").read_text(encoding="utf-8")


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_conclusion_follows_the_requirements_table(path):
    tex = _tex(path.stem)
    table = tex.split(r"\label{tab:requirements}")[1].split(r"\end{longtable}")[0]
    failed = re.findall(r"^(R\d+) &.*\\failmark \\\\\*?$", table, re.MULTILINE)
    conclusion = tex.split(r"\label{sec:conclusion}")[1].split(r"\section")[0]
    if failed:
        assert "do not release the design" in conclusion
        assert re.findall(r"^\\item (R\d+) ", conclusion, re.MULTILINE) == failed
    else:
        assert "release the design for review" in conclusion and "do not" not in conclusion


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_memo_has_its_board_sections(path):
    tex = _tex(path.stem)
    for needle in (
        r"\section*{Revision history}",
        r"\listoffigures",
        r"\section{Conclusion and recommendation}",
        r"\section{The design file}",
        r"the mismatched run",
    ):
        assert needle in tex
    design = path.read_text(encoding="utf-8")
    appendix = tex.split(r"\label{app:design-file}")[1]
    for line in design.splitlines():
        if line.strip():
            assert escape_latex(line.strip()) in appendix  # every line, escaped, in order


def test_initial_estimate_is_stated():
    # focus_actuator.toml gives initial_estimate = [0.0002, 0.0]
    tex = _tex("focus_actuator")
    sentence = tex.split("the mismatched run")[1].split(".}")[0]
    assert r"\begin{bmatrix} 0.0002 & 0 \end{bmatrix}" in sentence
    assert "design file's" in sentence


def test_a_gain_margin_without_a_bound_reads_unlimited():
    # belt_drive: the state-feedback loop stays stable for every k in (0, 1.391)
    tex = _tex("belt_drive")
    row = next(ln for ln in tex.splitlines() if ln.startswith("lower gain margin"))
    assert "unlimited" in row and "none" not in row


def test_observer_speed_table_is_short_and_marks_the_shipped_observer():
    tex = _tex("belt_drive")
    table = tex.split(r"\caption{Observer-speed study")[1].split(r"\end{longtable}")[0]
    rows = [ln for ln in table.splitlines() if ln.startswith("$")]
    assert len(rows) <= 7
    assert sum("(shipped)" in ln for ln in rows) == 1


def test_double_hyphen_options_print_as_two_hyphens(worked_memo):
    require_tex()
    pdf = worked_memo("hoist_winch").folder / "hoist_winch.pdf"
    text = subprocess.run(
        ["pdftotext", str(pdf), "-"], capture_output=True, check=True, timeout=120
    ).stdout.decode("utf-8")
    assert "--lang c --digital" in text


def test_prose_of_hostile_text_makes_math_only_of_safe_symbols():
    """Math pieces come from the table or are one letter with short ASCII subscripts:
    no text of any hostile string turns into LaTeX (the rest is escaped as usual)."""
    from .test_pdf import CORPUS

    safe = re.compile(
        r"^(?:\\(?:hat|bar)\{)?\\?[A-Za-z]+\}?(?:_\{[A-Za-z0-9,]+\})?(?:\^\{\\mathsf T\})?$"
    )
    formulas = set(FORMULAS.values())
    for text, _expected in CORPUS:
        for probe in (text, f"x_{text}", f"{text}_ab", f"Α_b {text}"):
            for piece in prose(probe, frozenset({"x_q"})):
                if "math" in piece:
                    assert piece["math"] in formulas or safe.match(piece["math"]), piece
