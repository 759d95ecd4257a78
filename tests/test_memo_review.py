"""What a review board stumbles on, page by page: round-off printed as numbers, tables that
leave a row alone on a page, cautions that say less than the memo does, headings that read
as code names, prose whose Markdown loses its spaces.

The checks read the committed worked memos (``worked_designs/*.tex`` and ``*.md``, which
``tests/test_memo.py`` keeps equal to a fresh rendering) and the templates; each one is
shown to fail on the defect it looks for.
"""

from __future__ import annotations

import math
import re

import pytest

from symbolic.render.formats import make_environment, md_prose
from symbolic.render.mathvalues import latex_number, printed_zero
from symbolic.render.memo_prose import prose
from symbolic.render.texsafe import TrustedMarkdown

from .conftest import ROOT, WORKED, WORKED_FILES

TEMPLATES = ROOT / "templates"


# --------------------------------------------------------------------------------------
# Round-off printed as 0 at the precision of its table
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("x", "scale", "digits"),
    [
        (-2.2e-16, 0.146, 3),
        (5.55e-17, 0.5, 3),
        (4.9e-4, 0.5, 3),
        (5.1e-4, 0.5, 3),
        (-0.146, 0.5, 3),
        (3e-7, 2.0, 6),
        (7e-6, 2.0, 6),
        (1e-16, 1e-15, 3),
    ],
)
def test_a_number_is_zero_exactly_when_it_rounds_to_zero_at_the_scale(x, scale, digits):
    # the independent rule: printed with as many decimals as the scale shows at `digits`
    # significant figures, x rounds to 0 (round half to even at the boundary is not used)
    decimals = digits - 1 - math.floor(math.log10(scale))
    expect_zero = abs(x) * 10**decimals < 0.5
    assert printed_zero(x, scale, digits) is expect_zero
    assert (latex_number(x, digits, scale) == "0") is expect_zero
    assert latex_number(x, digits) != "0"  # without a scale nothing is rounded away


#: Round-off on a printed number: an exponent below -12.  Residuals and deviations are
#: measured values of that size and stay.
_ROUND_OFF = re.compile(r"10\^\{-(?:1[3-9]|[2-9]\d)\}|e-(?:1[3-9]|[2-9]\d)\b")


@pytest.mark.parametrize("suffix", [".tex", ".md"])
@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_worked_memos_print_no_round_off(path, suffix):
    text = (WORKED / f"{path.stem}{suffix}").read_text(encoding="utf-8")
    found = [
        line
        for line in text.splitlines()
        if _ROUND_OFF.search(line) and not re.search(r"residual|deviation", line)
    ]
    assert found == []


def test_the_round_off_check_can_fail():
    row = r"reference gain & nominal & $-2.22\times 10^{-16}$ & $-0.146$ \\"
    assert _ROUND_OFF.search(row)
    assert _ROUND_OFF.search("| steady-state error | 0 | −1.11e-16 |")


# --------------------------------------------------------------------------------------
# Tables: no row alone at the top or bottom of a page
# --------------------------------------------------------------------------------------
def _row_ends(n: int) -> list[str]:
    env = make_environment("tex")
    template = env.from_string(
        r'\BLOCK{ from "memo_macros.tex.j2" import rowend }'
        r"\BLOCK{ for i in rows }r\VAR{i} \VAR{rowend(loop)}"
        "\n"
        r"\BLOCK{ endfor }"
    )
    return re.findall(r"r\d+ (\\\\\*?)", template.render(rows=list(range(n))))


def test_a_short_table_stays_on_one_page_and_a_long_one_keeps_its_ends():
    assert _row_ends(10) == ["\\\\*"] * 10  # no break anywhere: the table moves whole
    ends = _row_ends(14)
    breakable = [i + 1 for i, e in enumerate(ends) if e == "\\\\"]
    assert breakable == list(range(3, 12))  # not after rows 1, 2, nor before the last 3


def test_every_table_row_of_the_latex_memo_ends_with_rowend():
    """Inside every longtable, a row written in a loop ends with ``rowend(loop)``, the
    caption and the head end with ``\\\\*`` and close with ``\\endfirsthead`` or ``\\endhead`` (no break
    between the caption, the head and the first row)."""
    for path in sorted(TEMPLATES.glob("memo_*.tex.j2")):
        text = path.read_text(encoding="utf-8")
        for table in re.findall(r"\\begin\{longtable\}.*?\\end\{longtable\}", text, re.S):
            lines = table.splitlines()
            for i, line in enumerate(lines):
                if line.strip() in (r"\midrule", r"\endfirsthead") and i > 0:
                    before = lines[i - 1]
                    assert before.endswith("\\\\*") or before.strip() in (
                        r"\midrule",
                        r"\endfirsthead",
                    ), (path.name, before)
            body = table.split(r"\midrule")[-1]
            rows = [ln for ln in body.splitlines() if ln.rstrip().endswith("\\\\")]
            assert rows == [], (path.name, rows)
            assert "rowend(loop)" in body, path.name
            # the caption, the rules and the head are one box that cannot break
            assert r"\endfirsthead" in table or r"\endhead" in table, path.name


# --------------------------------------------------------------------------------------
# Cautions that are true of the memo, headings in English
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_cautions_do_not_deny_the_noise_analysis_the_memo_makes(path):
    tex = (WORKED / f"{path.stem}.tex").read_text(encoding="utf-8")
    cautions = tex.split(r"\label{sec:cautions}")[1].split(r"\end{itemize}")[0]
    if r"\subsection{Measurement noise to the plant input}" in tex:
        assert "Measurement noise, unmodelled dynamics and delays are not included" not in cautions
        assert r"Section~\ref{sec:noise}" in cautions
    else:
        assert "Measurement noise" in cautions


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_sensitivity_table_heads_are_words_and_symbols(path):
    tex = (WORKED / f"{path.stem}.tex").read_text(encoding="utf-8")
    table = tex.split(r"\caption{Normalised sensitivities")[1].split(r"\midrule")[0]
    head = table.splitlines()[-1].rstrip("\\*").split("&")
    assert head[0].strip() == "Gain"
    assert all(re.fullmatch(r"\$[^$]+\$", h.strip()) for h in head[1:]), head
    body = tex.split(r"\caption{Normalised sensitivities")[1].split(r"\bottomrule")[0]
    # numbers in math: a minus sign, never a hyphen, and no e-notation
    assert not re.search(r"(?<![$\w])-\d|\de[+-]\d", body)


# --------------------------------------------------------------------------------------
# Markdown prose keeps the spaces between its pieces
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "shown"),
    [
        (
            "closed form: from sympy.diff of the closed-form gains",
            "closed form: from sympy.diff of the closed-form gains",
        ),
        ("set observer.speed_factor to 5 and check", "set observer.speed_factor to 5 and check"),
        ("the gain K_1 grows; T_s = 4/(zeta*omega_n) holds", "the gain M grows; M holds"),
    ],
)
def test_markdown_prose_keeps_every_space_between_pieces(text, shown):
    pieces = prose(text)
    assert len(pieces) >= 3  # text, then math or code, then text
    for p in pieces:
        if "math" in p:
            p["math"] = TrustedMarkdown(str(p["math"]))
    md = md_prose(pieces)
    assert re.sub(r"\$[^$]*\$", "M", md) == shown


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_worked_markdown_has_no_word_glued_to_a_code_name(path):
    md = (WORKED / f"{path.stem}.md").read_text(encoding="utf-8")
    assert "fromsympy" not in md and "diffof" not in md
    assert "from sympy.diff of" in md


def test_numbers_in_prose_are_typeset_as_math():
    # e-notation, a negative number and a complex pole written by the analysis in words
    # become math: 3.8 × 10⁻⁵, a true minus sign, −60 ± 45j; a plain positive decimal and
    # a range such as "10-90 %" stay text
    from symbolic.render.memo_prose import prose

    pieces = prose("within 3.8e-05 of -60±45j, -150 and 10-90 % after 1.5 s")
    math = [p["math"] for p in pieces if "math" in p]
    assert math == ["3.8 \\times 10^{-5}", "-60 \\pm 45j", "-150"]
    text = "".join(p.get("text", "") for p in pieces)
    assert "10-90 % after 1.5 s" in text


def test_no_backslash_before_a_full_stop_or_bracket_right_after_math():
    # "\A[.)]" is escaped lest digits written before it make a list marker ("1." or
    # "1)"); after $...$ no marker can form, and GitHub's renderer agrees
    import cmarkgfm

    from symbolic.render.formats import TrustedMarkdown, md_prose

    line = md_prose(
        [
            {"text": "gain "},
            {"math": TrustedMarkdown("N")},
            {"text": ". Next (x"},
            {"math": TrustedMarkdown("y")},
            {"text": ")"},
        ]
    )
    assert line == "gain $N$. Next (x$y$)"  # no space was written between "(x" and the math
    html = cmarkgfm.github_flavored_markdown_to_html(line)
    assert html.startswith("<p>") and "<ol" not in html and "\\" not in html
    # where a digit does come first, the escape stays
    assert md_prose([{"text": "1"}, {"text": ". Next"}]) == "1\\. Next"
