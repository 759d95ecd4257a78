"""Tests of symbolic.render.pdf: hostile text compiles and shows literally, and the compile is locked.

The corpus is rendered through ``templates/_selftest.tex.j2`` into one document, compiled
once, and read back with pdftotext.  Expected text follows the escaping rules documented in
:func:`symbolic.render.texsafe.escape_latex` (characters it replaces are compared in their
replaced form).  The lock checks do not rely on escaping: they compile hostile TeX directly.

Sources for what the lock must block: the kpathsea manual (K. Berry, O. Weber, *Kpathsea
library*, section "Path searching / Security", variables ``openin_any``, ``openout_any``;
from memory) and the pdfTeX manual (H. Th. Thanh et al., *The pdfTeX user manual*,
primitives ``\\pdfshellescape``, ``\\pdffiledump``, ``\\pdfmdfivesum``, ``\\pdffilesize``;
from memory).  The attack list follows /work/shared/TECH-NOTES.md, measured on TeX Live 2022.
"""

from __future__ import annotations

import os
import secrets
import shutil
import subprocess
import tempfile
import time
import unicodedata
from pathlib import Path

import pytest

from symbolic.render.formats import make_environment
from symbolic.render.pdf import compile_pdf, find_tex_engine
from symbolic.render.texsafe import LATEX_COMMANDS, LATEX_KEPT
from symbolic.runtime.errors import RenderError


def _require_tex() -> None:
    """Skip when there is no engine or no pdftotext, unless CI demands TeX."""
    missing = [
        what
        for what, present in (
            ("a pdfLaTeX engine (find_tex_engine() found none)", find_tex_engine()),
            ("pdftotext (poppler-utils)", shutil.which("pdftotext")),
        )
        if not present
    ]
    if not missing:
        return
    if os.environ.get("GAINSMITH_REQUIRE_TEX"):
        pytest.fail("GAINSMITH_REQUIRE_TEX is set but there is no " + " or ".join(missing))
    pytest.skip("no " + " or ".join(missing) + " on PATH")


@pytest.fixture
def tex() -> None:
    """Every test that runs TeX asks for this fixture."""
    _require_tex()


@pytest.fixture
def compile_parent(tex: None, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """Make the compile folders children of a fresh folder (where canaries are put)."""
    parent = tmp_path / "parent"
    parent.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(parent))
    return parent


def _pdf_text(pdf: bytes, folder: Path) -> str:
    path = folder / "out.pdf"
    path.write_bytes(pdf)
    result = subprocess.run(
        ["pdftotext", "-enc", "UTF-8", str(path), "-"],
        capture_output=True,
        check=True,
        timeout=60,
    )
    path.unlink()
    return result.stdout.decode("utf-8")


# pdftotext writes the increment sign for \Delta and a combining long solidus before "=" for
# \neq (measured with poppler 22); fold them before comparing.
_PDFTOTEXT_QUIRKS = {"\u2206": "\u0394"}


def _comparable(text: str) -> str:
    """Every whitespace character removed, quirks folded (≠ comes back as "=" and a combining
    long solidus, in either order, possibly across a line break), and NFKC."""
    text = "".join(text.split())
    text = text.replace("\u0338=", "\u2260").replace("=\u0338", "\u2260")
    text = text.translate(str.maketrans(_PDFTOTEXT_QUIRKS))
    return "".join(unicodedata.normalize("NFKC", text).split())


def _hex(text: str) -> str:
    return "".join(f"[U+{ord(ch):04X}]" for ch in text)


# --------------------------------------------------------------------------------------
# The corpus: (text, what must show in the PDF; None means the text itself)
# "{canary}" and "{touch}" are replaced by absolute paths at run time.
# --------------------------------------------------------------------------------------

CORPUS: list[tuple[str, str | None]] = [
    (r"\input{/etc/hostname}", None),
    (r"\input{{canary}}", None),
    (r"\input{../canary.tex}", None),
    (r"\input /etc/passwd \relax", None),
    (r"\include{x}", None),
    (r"\InputIfFileExists{{canary}}{}{}", None),
    (r"\newread\r \openin\r={canary} \read\r to\x \x", None),
    (r"\openin15=/etc/passwd", None),
    (r"\read16 to \x", None),
    (r"\write18{touch {touch}}", None),
    (r"\immediate\write18{touch {touch}}", None),
    (r"\immediate\openout5={touch}", None),
    (r"\catcode`\@=11", None),
    (r"\catcode92=12 \input /etc/passwd", None),
    (r"^^5cinput{/etc/passwd}", None),
    (r"^^5c^^69nput{canary}", None),
    (r"\csname input\endcsname{/etc/passwd}", None),
    (r"\def\x{\input{/etc/passwd}}\x", None),
    (r"\let\a=\input \a{/etc/passwd}", None),
    (r"\expandafter\input\string/etc/passwd", None),
    (r"\scantokens{\input /etc/passwd}", None),
    (r"\uppercase{\input{/etc/passwd}}", None),
    (r"\makeatletter\@@input /etc/passwd", None),
    (r"\pdffiledump offset 0 length 100 {/etc/passwd}", None),
    (r"\pdfobj file {/etc/passwd}", None),
    (r"\directlua{io.open('/etc/passwd'):read('*a')}", None),
    (r"\special{shell:touch x}", None),
    (r"\usepackage{shellesc}", None),
    (r"\documentclass{article}", None),
    (r"\end{document}", None),
    (r"\begin{document}", None),
    (r"\verb|x|", None),
    (r"\begin{verbatim}\input{/etc/passwd}\end{verbatim}", None),
    (r"\loop\iftrue\repeat", None),
    (r"\errmessage{boom} \batchmode \showlists", None),
    (r"\endinput", None),
    (r"\jobname \input\jobname", None),
    ("{", None),
    ("}", None),
    ("}}}{{{", None),
    ("$", None),
    ("$$x^2$$ \\(y\\) \\[z\\]", None),
    ("% the rest is a comment", None),
    ("#1 ## ###", None),
    ("& & &", None),
    ("_ __ a_b", None),
    ("~ ~~", None),
    ("^ ^^ ^^^", None),
    ("\\\\ \\\\[2pt] \\newline", None),
    ("\\", None),
    ("[optional] ]opt[", None),
    ("a--b---c ``x'' ,,y <<z>> !`?`", None),
    ("100% & $5 #1 _a ~b ^c {d} \\e |f| <g> [h]", None),
    ("C:\\Windows\\System32\\", None),
    ("<script>alert(1)</script>", None),
    ("&amp; &#92;input", None),
    ("bell\x07 tab\t nul\x00 esc\x1b del\x7f", "bell tab nul esc del"),
    ("a\x00b", "ab"),
    ("line1\nline2\r\nline3", "line1 line2 line3"),
    ("admin\u202e\u2066txt.exe\u2069\u202c", "admintxt.exe"),
    ("pa\u200bss\u200cwo\u200drd\ufeff\u2060", "password"),
    ("x\ud800y", "x[U+FFFD]y"),
    ("\u0440\u0430\u0443pal", _hex("\u0440\u0430\u0443") + "pal"),  # Cyrillic lookalikes
    ("\u0391\u0392\u0393", "[U+0391][U+0392]\u0393"),  # Greek capitals: lookalikes by number
    ("\u03b1 \u03b2 \u03b3 \u03c9 \u03b6", None),
    ("ok \U0001f44d \U0001f680", "ok [U+1F44D] [U+1F680]"),
    ("\u63a7\u5236\u5668", _hex("\u63a7\u5236\u5668")),  # CJK
    ("\u05e9\u05dc\u05d5\u05dd", _hex("\u05e9\u05dc\u05d5\u05dd")),  # Hebrew, right to left
    ("e\u0301 n\u0303", "\u00e9 \u00f1"),
    ("\uff21\uff22", "[U+FF21][U+FF22]"),  # full-width lookalikes
    ("\U0001d458", "[U+1D458]"),  # mathematical italic k
    ("\U000e0041\U000e0042", "[U+E0041][U+E0042]"),  # invisible tag characters
    ("\ue000", "[U+E000]"),  # private use
    ("\ufb01", "[U+FB01]"),  # the fi ligature character
    ("x " * 3 + "x" * 300, None),
    ("/very/long/path" * 20, None),
    ("\\" * 80, None),
    ("Müller Straße 25 °C ±0.5 µm ×2 ½ Dvořák Łódź", None),
    ("\u201cquoted\u201d \u2018x\u2019 \u2013 \u2014 \u2026 \u20ac \u2122 \u2022", None),
    ("x \u2264 5, y \u2265 2, \u2248, \u221e, \u2260, \u2212 3", None),
    ("10 \u2126 and 1 \u212b", "10 \u03a9 and 1 \u00c5"),
]


def _corpus(canary: Path, touch: Path) -> list[tuple[str, str]]:
    items = []
    for text, expected in CORPUS:
        text = text.replace("{canary}", str(canary)).replace("{touch}", str(touch))
        expected = text if expected is None else expected
        items.append((text, expected))
    return items


def _table_items() -> list[tuple[str, str]]:
    """Every kept character and every command-mapped character of the escaper's tables."""
    kept = sorted(LATEX_KEPT - {"\u00a0"})
    mapped = sorted(LATEX_COMMANDS)
    chunks = [kept[i : i + 30] for i in range(0, len(kept), 30)] + [mapped]
    return [(" ".join(chunk), " ".join(chunk)) for chunk in chunks]


def _between(text: str, index: int) -> str:
    start, end = f"ITEMSTART{index}Z", f"ITEMEND{index}Z"
    assert text.count(start) == 1 and text.count(end) == 1, f"markers of item {index}"
    return text[text.index(start) + len(start) : text.index(end)]


def test_hostile_corpus_compiles_and_shows_literally(
    compile_parent: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    token = "CANARY" + secrets.token_hex(8).upper()
    canary = compile_parent / "canary.tex"
    canary.write_text(token + "\n", encoding="utf-8")
    touch = compile_parent / "TOUCHED"
    items = _corpus(canary, touch) + _table_items()
    assert len(CORPUS) >= 60
    title = r"Plant \input{" + str(canary) + r"} & $x^2$ 100% #1 ~ _ {"
    author = "O'Brien <ob@example.org> \\\\ \u202eevil"

    source = (
        make_environment("tex")
        .get_template("_selftest.tex.j2")
        .render(
            title=title,
            author=author,
            items=[text for text, _ in items],
            table_rows=[(CORPUS[0][0], "a & b"), ("{[}x{]}", "\\\\ \\hline")],
            typewriter="--x ``y''",
            footnote="^^5cinput{" + str(canary) + "}",
        )
    )
    start = time.perf_counter()
    pdf = compile_pdf(source, {}, timeout=120)
    elapsed = time.perf_counter() - start
    with capsys.disabled():
        print(f"\n[test_pdf] corpus of {len(items)} items compiled in {elapsed:.2f} s")

    text = _pdf_text(pdf, tmp_path)
    assert token not in text and token.encode() not in pdf
    assert token.encode().hex().upper() not in text.upper()
    assert not touch.exists()
    mismatches = []
    for index, (raw, expected) in enumerate(items, start=1):
        shown = _between(text, index)
        if _comparable(shown) != _comparable(expected):
            mismatches.append((index, raw, expected, shown))
    assert not mismatches, "\n".join(map(repr, mismatches))
    body = _comparable(text)
    assert _comparable(title) in body
    assert _comparable("O'Brien <ob@example.org> \\\\ evil") in body
    assert _comparable("--x ``y''") in body
    assert _comparable("a & b") in body and _comparable("{[}x{]}") in body


# --------------------------------------------------------------------------------------
# The lock, tested without the escaper
# --------------------------------------------------------------------------------------

_PROBES = r"""\documentclass{article}
\begin{document}
SHELL=\the\pdfshellescape.
\immediate\write18{touch TOUCH}
\newread\r
\openin\r=CANARY \ifeof\r OPENIN-BLOCKED\else \read\r to\x OPENIN-READ:\x\fi
\openin\r=../canary.tex \ifeof\r RELATIVE-BLOCKED\else \read\r to\x RELATIVE-READ:\x\fi
DUMP[\pdffiledump offset 0 length 22 {CANARY}]
MD5[\pdfmdfivesum file {CANARY}]
SIZE[\pdffilesize{CANARY}]
\IfFileExists{CANARY}{ABSOLUTE-EXISTS}{ABSOLUTE-NOTFOUND}
\IfFileExists{../canary.tex}{PARENT-EXISTS}{PARENT-NOTFOUND}
\immediate\pdfobj file {CANARY}
\end{document}
"""


def _probes(canary: Path, touch: Path) -> str:
    return _PROBES.replace("CANARY", str(canary)).replace("TOUCH", str(touch))


@pytest.fixture
def canary(compile_parent: Path) -> tuple[Path, str]:
    token = "CANARY" + secrets.token_hex(8).upper()
    path = compile_parent / "canary.tex"
    path.write_text(token + "\n", encoding="utf-8")
    return path, token


def test_probes_read_the_canary_when_unlocked(tmp_path: Path, canary: tuple[Path, str]) -> None:
    """Control: the probes do read files on an unlocked pdfLaTeX (openin_any=a, the TeX Live
    default), so the locked test below is not vacuous."""
    path, token = canary
    folder = path.parent / "unlocked"
    folder.mkdir()
    (folder / "probe.tex").write_text(
        _probes(path, tmp_path / "unused").replace(r"\immediate\write18{touch", "%"),
        encoding="utf-8",
    )
    env = {**os.environ, "openin_any": "a", "HOME": str(folder)}
    subprocess.run(
        ["pdflatex", "-no-shell-escape", "-interaction=nonstopmode", "probe.tex"],
        cwd=folder,
        env=env,
        stdin=subprocess.DEVNULL,
        capture_output=True,
        timeout=60,
    )
    text = _pdf_text((folder / "probe.pdf").read_bytes(), tmp_path)
    assert f"OPENIN-READ:{token}" in text
    assert "ABSOLUTE-EXISTS" in text


def test_locked_compile_reads_no_file_and_runs_no_command(
    tmp_path: Path, canary: tuple[Path, str]
) -> None:
    path, token = canary
    touch = path.parent / "TOUCHED"
    log = tmp_path / "probe.log"
    pdf = compile_pdf(_probes(path, touch), {}, log_path=log)
    text = _pdf_text(pdf, tmp_path)
    assert "SHELL=0." in text  # \pdfshellescape: 0 disabled, 1 enabled, 2 restricted
    for word in (
        "OPENIN-BLOCKED",
        "RELATIVE-BLOCKED",
        "ABSOLUTE-NOTFOUND",
        "PARENT-NOTFOUND",
        "DUMP[]",
        "MD5[]",
        "SIZE[]",
    ):
        assert word in text, word
    assert token not in text and token.encode() not in pdf
    assert token.encode().hex().upper() not in text.upper()
    assert not touch.exists()
    log_text = log.read_text(encoding="utf-8")
    # pdfTeX announces " \write18 enabled." or " restricted \write18 enabled." in the log
    # header when shell escape is on; with -no-shell-escape it says nothing there and logs
    # each attempt as "runsystem(<command>)...disabled."
    assert "write18 enabled" not in log_text
    assert f"runsystem(touch {touch})...disabled." in log_text


@pytest.mark.parametrize(
    "writer",
    [
        r"\immediate\openout\w=TARGET",
        r"\immediate\openout\w=../TARGETNAME",
    ],
)
def test_locked_compile_writes_no_file_outside_its_folder(
    compile_parent: Path, writer: str
) -> None:
    target = compile_parent / "written.tex"
    line = writer.replace("TARGETNAME", target.name).replace("TARGET", str(target))
    source = (
        "\\documentclass{article}\n\\begin{document}\n\\newwrite\\w\n"
        + line
        + " \\immediate\\write\\w{x}\\immediate\\closeout\\w\nx\n\\end{document}\n"
    )
    with pytest.raises(RenderError, match=r"^! I can't write on file"):
        compile_pdf(source, {})
    assert not target.exists()


def test_direct_input_of_an_absolute_path_fails(canary: tuple[Path, str]) -> None:
    path, token = canary
    source = (
        f"\\documentclass{{article}}\n\\begin{{document}}\n\\input{{{path}}}\n\\end{{document}}\n"
    )
    with pytest.raises(RenderError) as caught:
        compile_pdf(source, {})
    assert token not in str(caught.value)
    assert "l.3" in str(caught.value)


# --------------------------------------------------------------------------------------
# Errors, timeout, clean-up, assets, reruns
# --------------------------------------------------------------------------------------

_BROKEN = "\\documentclass{article}\n\\begin{document}\nfine\n\\nosuchmacro\n\\end{document}\n"


def test_broken_document_raises_one_line_with_error_and_line(
    tmp_path: Path, compile_parent: Path
) -> None:
    log = tmp_path / "broken.log"
    with pytest.raises(RenderError) as caught:
        compile_pdf(_BROKEN, {}, log_path=log)
    message = str(caught.value)
    assert message == "! Undefined control sequence. (memo.tex l.4)"
    assert "\n" not in message
    assert "! Undefined control sequence." in log.read_text(encoding="utf-8")
    assert list(compile_parent.iterdir()) == []  # the temporary folder is gone


def test_success_leaves_no_temporary_folder(compile_parent: Path) -> None:
    pdf = compile_pdf("\\documentclass{article}\\begin{document}x\\end{document}", {})
    assert pdf.startswith(b"%PDF-")
    assert list(compile_parent.iterdir()) == []


def test_timeout_kills_tex_and_cleans_up(compile_parent: Path) -> None:
    source = "\\documentclass{article}\\begin{document}\\loop\\iftrue\\repeat\\end{document}"
    start = time.monotonic()
    with pytest.raises(RenderError, match=r"^TeX did not finish within 1 s$"):
        compile_pdf(source, {}, timeout=1)
    assert time.monotonic() - start < 15
    assert list(compile_parent.iterdir()) == []


def test_assets_are_available_to_the_document(tex: None, tmp_path: Path) -> None:
    source = (
        "\\documentclass{article}\\begin{document}"
        "\\input{figures/part.tex} \\input{table.tex}\\end{document}"
    )
    assets = {"figures/part.tex": b"ASSETONE", "table.tex": b"ASSETTWO"}
    text = _pdf_text(compile_pdf(source, assets), tmp_path)
    assert "ASSETONE" in text and "ASSETTWO" in text


@pytest.mark.parametrize(
    "name", ["../x.tex", "/etc/x.tex", "a/b/c.tex", ".hidden", "memo.tex", "memo.aux", ""]
)
def test_bad_asset_names_are_refused(name: str) -> None:
    # checked before looking for an engine, so this runs without TeX too
    with pytest.raises(RenderError, match="cannot compile"):
        compile_pdf("\\documentclass{article}\\begin{document}x\\end{document}", {name: b"x"})


def test_pdflatex_alone_reruns_for_references(
    tex: None, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    pdflatex = shutil.which("pdflatex")
    assert pdflatex is not None
    monkeypatch.setattr("symbolic.render.pdf.find_tex_engine", lambda: pdflatex)
    source = (
        "\\documentclass{article}\\begin{document}"
        "\\section{Gains}\\label{s:gains} See section REF\\ref{s:gains}FER.\\end{document}"
    )
    text = _pdf_text(compile_pdf(source, {}), tmp_path)
    assert "REF1FER" in text


# --------------------------------------------------------------------------------------
# Engine choice (no TeX needed)
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("installed", "expected"),
    [
        ({"latexmk", "pdflatex", "lualatex"}, "/bin/latexmk"),
        ({"pdflatex"}, "/bin/pdflatex"),
        ({"latexmk", "lualatex"}, None),
        ({"lualatex", "xelatex"}, None),
        (set(), None),
    ],
)
def test_find_tex_engine_prefers_latexmk_and_never_lualatex(
    monkeypatch: pytest.MonkeyPatch, installed: set[str], expected: str | None
) -> None:
    monkeypatch.setattr(
        "symbolic.render.pdf.shutil.which",
        lambda name: f"/bin/{name}" if name in installed else None,
    )
    assert find_tex_engine() == expected
