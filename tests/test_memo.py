"""The design memo: content, PDF build, hostile text, reproducibility, atomic writes."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import symbolic
from symbolic import derive
from symbolic.cli import main
from symbolic.model.numbers import format_number, format_pole
from symbolic.render.mathtex import LONG, pole_latex, printed_width
from symbolic.render.memo import build_memo, write_memo
from symbolic.render.memo_design import memo_date

from .conftest import ROOT, WORKED, WORKED_FILES, require_tex, tex_available


def _pdf_text(pdf: Path) -> str:
    out = subprocess.run(["pdftotext", "-raw", str(pdf), "-"], capture_output=True, check=True)
    return out.stdout.decode("utf-8", "replace")


def _squash(text: str) -> str:
    return re.sub(r"\s+", "", text)


def _memo_command(design: Path, out: Path, *options: str) -> int:
    """``gainsmith memo`` in this process; the figures are drawn here (no figure server,
    which would outlive the test)."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("GAINSMITH_FIGURE_SERVER", "0")
        return main(["memo", str(design), "-o", str(out), *options])


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_worked_design_pdf_contains_the_gains(worked_memo, path):
    require_tex()
    memo = worked_memo(path.stem)
    pdf = memo.folder / f"{path.stem}.pdf"
    assert pdf.read_bytes().startswith(b"%PDF")
    text = _squash(_pdf_text(pdf))
    # the verdict on the front page agrees with the requirements table (the exit code)
    front = text[: text.index("Contents")]
    if memo.passed:
        assert "Verdict:everyrequirementbelowismet" in front
        assert "FAIL" not in front and "Openitems." not in front
    else:
        assert "Verdict:notacceptableasitstands" in front
        assert "FAIL" in front and "Openitems." in front
    # the numbers as the terminal summary prints them (6 significant figures)
    for value in np.concatenate([np.ravel(memo.gains[k]) for k in ("K", "L", "N")]):
        printed = format_number(value)
        mantissa = printed.split("e")[0]  # the memo writes 1.28142 × 10^6 for 1.28142e+06
        assert mantissa.replace("-", "") in text.replace("−", "-"), printed
    for heading in (
        "Summary",
        "Plantmodel",
        "Controllabilityandobservability",
        "Choiceofpoles",
        "Derivationofthegains",
        "Verification",
        "Simulatedresponse",
        "Robustness",
        "Stabilitymargins",
        "Assumptions,limitsandcautions",
        "References",
        "Preparedby",
        "Checkedby",
        "Approvedby",
    ):
        assert heading in text, heading
    assert symbolic.load_design(path).sha256[:16] in text


def test_memo_command_writes_files_and_figures(tmp_path):
    path = WORKED / "focus_actuator.toml"
    code = _memo_command(path, tmp_path)
    assert code == 0  # the focus actuator meets every requirement
    suffixes = (".tex", ".md", ".pdf") if tex_available() else (".tex", ".md")
    for ext in suffixes:
        assert (tmp_path / f"{path.stem}{ext}").is_file()
    for stem in ("step", "estimation-error", "control", "pole-map", "observer-study"):
        assert (
            (tmp_path / "figures" / f"{path.stem}-{stem}.png").read_bytes().startswith(b"\x89PNG")
        )
        assert (tmp_path / "figures" / f"{path.stem}-{stem}.pdf").read_bytes().startswith(b"%PDF")
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".gainsmith-staging")]


def test_memo_shows_hand_calculation_check(worked_memo):
    require_tex()
    text = _squash(_pdf_text(worked_memo("levitated_ball").folder / "levitated_ball.pdf"))
    assert "Handcalculationcheck" in text
    assert "Everyclaimholds" in text


HOSTILE = [
    r"\input{/etc/hostname}",
    r"\write18{touch CANARY}",
    r"^^5cinput{/etc/passwd}",
    "50% & $5 #1 _x {y} ~z ^w \\ back",
    r"\catcode`\@=11 \csname input\endcsname",
    "unbalanced { brace",
    "<script>alert(1)</script> [x](javascript:alert(1)) ![i](http://e.invalid/x.png)",
    "Ωmega µs ±5 % — naïve",
]


def _hostile_design(tmp_path: Path, canary: Path) -> Path:
    q = json.dumps  # a TOML basic string is a JSON string for this text
    bs = "\\"
    unit_k = q(bs + "input{" + str(canary) + "}")
    desc_k = q(bs + "openin5=" + str(canary) + " " + bs + "read5 to " + bs + "x " + bs + "x")
    unit_x = q(bs + "include{" + str(canary) + "}")
    text = f"""
title = {q(HOSTILE[0])}
author = {q(HOSTILE[1])}
revision = {q(HOSTILE[4])}

[parameters.m]
value = 2.0
unit = {q(HOSTILE[2])}
description = {q(" ".join(HOSTILE[3:]))}

[parameters.k_s]
value = 8.0
unit = {unit_k}
description = {desc_k}

[plant]
A = [[0, 1], ["-k_s/m", 0]]
B = [[0], ["1/m"]]
C = [[1, 0]]
states = [{{ name = "x_pos", unit = {unit_x} }}, {{ name = "v", unit = "m/s" }}]

[controller]
poles = ["-2+2j", "-2-2j"]
"""
    path = tmp_path / "hostile.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_hostile_text_appears_literally_and_reads_nothing(tmp_path):
    require_tex()
    canary = tmp_path / "canary.txt"
    token = "CANARYTOKEN7f3a9c"
    canary.write_text(token)
    path = _hostile_design(tmp_path, canary)
    out = tmp_path / "out"
    cwd = os.getcwd()
    os.chdir(tmp_path)  # a \write18{touch CANARY} would land here
    try:
        assert _memo_command(path, out) == 0
    finally:
        os.chdir(cwd)
    assert not (tmp_path / "CANARY").exists()
    text = _pdf_text(out / "hostile.pdf")
    assert token not in text
    assert token.encode() not in (out / "hostile.pdf").read_bytes()
    flat = _squash(text)
    for s in (
        r"\input{/etc/hostname}",
        r"\write18{touchCANARY}",
        "^^5cinput{/etc/passwd}",
        "50%&$5#1_x{y}~z^w\\back",
        "unbalanced{brace",
        "<script>alert(1)</script>",
    ):
        assert _squash(s) in flat, s
    md = (out / "hostile.md").read_text()
    # no live tag or link: each < and ] of the text is backslash-escaped
    assert re.search(r"(?<!\\)<script>", md) is None and "\\<script>" in md
    assert re.search(r"(?<!\\)\]\(javascript", md) is None


def test_pdf_skipped_without_tex_engine(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr("symbolic.render.pdf.find_tex_engine", lambda: None)
    assert _memo_command(WORKED / "focus_actuator.toml", tmp_path) == 0
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "PDF skipped" in err and "apt-get install" in err
    assert (tmp_path / "focus_actuator.tex").is_file()
    assert (tmp_path / "focus_actuator.md").is_file()
    assert not (tmp_path / "focus_actuator.pdf").exists()


def test_failed_compile_keeps_the_previous_memo(tmp_path, monkeypatch):
    design = symbolic.load_design(WORKED / "focus_actuator.toml")
    (tmp_path / "focus_actuator.tex").write_text("previous memo")
    (tmp_path / "focus_actuator.md").write_text("previous markdown")

    def broken(*args, **kwargs):
        raise symbolic.RenderError("! Undefined control sequence. (memo.tex l.4)")

    monkeypatch.setattr("symbolic.render.pdf.find_tex_engine", lambda: "/usr/bin/pdflatex")
    monkeypatch.setattr("symbolic.render.pdf.compile_pdf", broken)
    with pytest.raises(symbolic.RenderError, match="l.4"):
        write_memo(symbolic.derive(design), tmp_path, pdf=True)
    assert (tmp_path / "focus_actuator.tex").read_text() == "previous memo"
    assert (tmp_path / "focus_actuator.md").read_text() == "previous markdown"
    assert not (tmp_path / "figures").exists()


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_committed_worked_memos_are_current(path, worked_memo):
    """Fails when worked_designs/*.md, *.tex or figures are stale: run
    sh worked_designs/regenerate.sh."""
    memo = worked_memo(path.stem)
    hint = "stale: run `sh worked_designs/regenerate.sh`"
    assert (WORKED / f"{path.stem}.md").read_text(encoding="utf-8") == memo.text(".md"), hint
    assert (WORKED / f"{path.stem}.tex").read_text(encoding="utf-8") == memo.text(".tex"), hint
    built = {p.name: p.read_bytes() for p in (memo.folder / "figures").iterdir()}
    committed = {p.name: p.read_bytes() for p in (WORKED / "figures").glob(f"{path.stem}-*")}
    assert sorted(built) == sorted(committed), hint
    for name, data in built.items():
        assert committed[name] == data, f"{name} {hint}"


def test_source_date_epoch_makes_sources_reproducible(monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "0")
    assert memo_date() == "1970-01-01"
    d = derive(symbolic.load_design(WORKED / "focus_actuator.toml"))
    first = build_memo(d, None, {})
    second = build_memo(d, None, {})
    assert first.tex == second.tex and first.markdown == second.markdown
    assert "1970-01-01" in first.markdown.replace("\\-", "-")


def test_memo_prints_poles_with_j_and_the_numbers_of_the_plain_text():
    # levitated_ball.toml asks for the controller poles -60+45j, -60-45j, -150
    d = derive(symbolic.load_design(WORKED / "levitated_ball.toml"))
    doc = build_memo(d, None, {})
    math = "-60 + 45j,\\; -60 - 45j,\\; -150"
    assert f"Controller poles: ${math}$" in doc.markdown
    assert f"Controller poles: ${math}$" in doc.tex
    for z in (*d.controller_poles.values, *d.observer_poles.values):
        assert pole_latex(z, 4).replace(" ", "") == format_pole(z, 4)
    assert not re.search(r"[0-9.] ?i\b|\\mathrm\{i\}", doc.tex)  # no i for the imaginary unit


def test_long_formulas_are_broken_over_lines():
    d = derive(symbolic.load_design(WORKED / "belt_drive.toml"))
    doc = build_memo(d, None, {})
    # an entry too long for one line is broken over lines in the appendix, and named in
    # the body (see tests/test_memo_typesetting.py for the compiled widths)
    body = doc.tex.split(r"\subsection{Observer gain $L$}")[1].split(r"\subsection")[0]
    assert "Appendix~\\ref{app:closed-L}" in body
    block = doc.tex.split(r"\label{app:closed-L}")[1].split(r"\end{align*}")[0]
    lines = [ln for ln in block.splitlines() if ln.startswith(("L_", "&"))]
    assert len(lines) > 1 and lines[0].startswith("L_{2} &=")
    assert max(printed_width(ln) for ln in lines) <= LONG + 4


def test_memo_command_line(tmp_path):
    out = tmp_path / "memo"
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "symbolic",
            "memo",
            str(WORKED / "focus_actuator.toml"),
            "-o",
            str(out),
            "--no-pdf",
        ],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert proc.returncode == 0, proc.stderr
    assert "memo written" in proc.stdout
    assert (out / "focus_actuator.md").is_file()


def test_memo_bad_input_is_one_line(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(
        textwrap.dedent("""
        [plant]
        A = [[0, 1], [0, 0]]
        B = [[0], [1]]
        C = [[1, 0]]
        [controler]
        poles = ["-1", "-2"]
    """)
    )
    proc = subprocess.run(
        [sys.executable, "-m", "symbolic", "memo", str(bad), "-o", str(tmp_path / "o")],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert proc.returncode == 2
    assert (
        proc.stderr.count("\n") == 1 and "controler" in proc.stderr and "controller" in proc.stderr
    )
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "o").exists()


def _corpus_design(tmp_path: Path, items: list[str], index: int) -> Path:
    def q(text: str) -> str:  # a TOML basic string; non-ASCII written as UTF-8, not \u escapes
        return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007f")

    params = []
    for i, text in enumerate(items):
        params.append(
            f"[parameters.p{i}]\nvalue = {i + 1}\ndescription = {q(text)}\nunit = {q('u' + str(i))}\n"
        )
    text = (
        f"title = {q('Corpus ' + str(index))}\n"
        + "\n".join(params)
        + "\n[plant]\nA = [[0, 1], [-2, -3]]\nB = [[0], [1]]\nC = [[1, 0]]\n"
        + '[controller]\npoles = ["-4", "-5"]\n'
    )
    path = tmp_path / f"corpus{index}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_memo_shows_the_tex_attack_corpus_literally(tmp_path):
    """Every string of the TeX/Markdown attack corpus (tests/test_pdf.py), as a parameter
    description in a real memo: shown literally (or as its documented replacement), no file read,
    nothing run."""
    require_tex()
    from .test_pdf import _comparable, _corpus

    canary = tmp_path / "canary.tex"
    token = "CANARYTOKEN" + os.urandom(6).hex().upper()
    canary.write_text(token + "\n")
    touch = tmp_path / "TOUCHED"
    # a lone surrogate cannot be written in a TOML file (the loader's UTF-8 check refuses it)
    items = [
        (t, e) for t, e in _corpus(canary, touch) if not any(0xD800 <= ord(c) <= 0xDFFF for c in t)
    ]
    assert len(items) >= 60
    halves = [items[: len(items) // 2], items[len(items) // 2 :]]
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        for index, half in enumerate(halves):
            path = _corpus_design(tmp_path, [t for t, _ in half], index)
            out = tmp_path / f"out{index}"
            assert _memo_command(path, out) == 0
            pdf = out / f"corpus{index}.pdf"
            text = subprocess.run(
                ["pdftotext", "-raw", "-enc", "UTF-8", str(pdf), "-"],
                capture_output=True,
                check=True,
            ).stdout.decode("utf-8")
            assert token not in text and token.encode() not in pdf.read_bytes()
            flat = _comparable(text)
            for raw, expected in half:
                assert _comparable(expected) in flat, raw
            md = (out / f"corpus{index}.md").read_text()
            assert re.search(r"(?<!\\)<script>", md) is None
    finally:
        os.chdir(cwd)
    assert not touch.exists()


def test_memo_sections_for_integral_reduced_and_digital(tmp_path):
    """Integral action, the reduced-order observer and the digital controller reach the memo."""
    text = (WORKED / "belt_drive.toml").read_text()
    text = text.replace(
        "[observer]\nspeed_factor = 5", '[observer]\nspeed_factor = 5\nkind = "reduced"'
    )
    text += '\n[tracking]\nmethod = "integral"\n\n[discrete]\nsample_time = 0.01\n'
    path = tmp_path / "extended.toml"
    path.write_text(text)
    d = symbolic.derive(symbolic.load_design(path))
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("GAINSMITH_FIGURE_SERVER", "0")
        result = write_memo(d, tmp_path / "out", pdf=tex_available())
    markdown = (tmp_path / "out" / "extended.md").read_text(encoding="utf-8")
    tex = (tmp_path / "out" / "extended.tex").read_text(encoding="utf-8")
    for heading in ("## Integral action", "## Reduced-order observer", "## Digital implementation"):
        assert heading in markdown
    assert r"\section{Integral action}" in tex and r"\section{Digital implementation}" in tex
    assert d.integral is not None and d.reduced_observer is not None and d.discrete is not None
    # the gains printed are the derived ones
    assert format_number(d.integral.integral_gain.ravel()[0]) in markdown.replace("\\-", "-")
    if tex_available():
        assert result.pdf
        assert (tmp_path / "out" / "extended.pdf").read_bytes().startswith(b"%PDF")
