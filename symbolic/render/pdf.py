"""Compile a LaTeX memo to PDF with pdfLaTeX, locked so that the source can read no file
outside its folder, write none outside it and run no command.

The lock does not rely on the escaping of user text (:mod:`symbolic.render.texsafe`); it is the
second line of defence, and it holds on a reviewer's default TeX Live, whose own
configuration lets a document read any file (``openin_any = a``).

Notes
-----
What the compile does, in order:

1. writes ``memo.tex`` and the assets into a fresh folder from ``tempfile.mkdtemp()``;
2. runs ``latexmk`` (which reruns pdfLaTeX until cross-references settle) or, without it,
   ``pdflatex`` up to three times, with ``-no-shell-escape -interaction=nonstopmode
   -halt-on-error -no-file-line-error``; ``latexmk`` gets ``-norc`` so that no
   configuration file can change the engine or its options;
3. in an environment with ``openin_any=p`` and ``openout_any=p`` (pdfTeX reads and writes
   no absolute path, no ``..`` and no hidden file), ``shell_escape=f`` (``\\write18``
   runs nothing), ``HOME`` set to the temporary folder (no personal ``texmf`` tree or
   ``.latexmkrc``), and the search-path variables (``TEXINPUTS`` and the like) and
   ``TEXMFOUTPUT`` removed;
4. in a new process group, killed as a whole when the time is up (a plain
   ``subprocess.run`` timeout would kill ``latexmk`` but leave ``pdflatex`` looping);
5. returns the PDF bytes and always deletes the folder.

LuaLaTeX is never used: ``\\directlua`` reads and writes absolute paths even with the
settings above.  XeLaTeX is not used either, since the escaper targets pdfLaTeX's fonts.
"""

from __future__ import annotations

import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from ..runtime.errors import RenderError
from ..runtime.publish import check_file_name

__all__ = ["CompiledPdf", "compile_pdf", "compile_pdf_with_log", "find_tex_engine"]

_JOB = "memo"
_OUTPUT_FILE = ".engine-output.txt"
_ENGINE_FLAGS = (
    "-no-shell-escape",
    "-interaction=nonstopmode",
    "-halt-on-error",
    "-no-file-line-error",
)
_MAX_PDFLATEX_RUNS = 3
_RERUN_HINTS = (
    "Rerun to get",
    "Label(s) may have changed",
    "There were undefined references",
    "Rerun LaTeX",
)
# Environment variables that steer kpathsea's file search or TeX's output; removed so
# that the compile sees only the installation's own trees and its own folder.
_DROPPED_VARIABLE = re.compile(
    r"^(TEX(?!MFCNF$).*|.*INPUTS|.*FONTS|.*_any|shell_escape.*|LATEXMK.*)$", re.IGNORECASE
)


def find_tex_engine() -> str | None:
    """Find the program that will compile the memo.

    Returns
    -------
    str or None
        The path of ``latexmk`` when both it and ``pdflatex`` are on ``PATH``, else the
        path of ``pdflatex``, else ``None``.  ``None`` also when only ``lualatex`` (or
        ``xelatex``) is installed: LuaTeX's ``\\directlua`` escapes the file-access lock,
        so gainsmith does not use it.
    """
    pdflatex = shutil.which("pdflatex")
    if pdflatex is None:
        return None
    return shutil.which("latexmk") or pdflatex


def _locked_environment(folder: Path) -> dict[str, str]:
    environment = {
        key: value for key, value in os.environ.items() if not _DROPPED_VARIABLE.match(key)
    }
    environment.update(
        {
            "openin_any": "p",
            "openout_any": "p",
            "shell_escape": "f",
            "HOME": str(folder),
            "USERPROFILE": str(folder),
            # Long log lines are not wrapped, so an error message is one line.
            "max_print_line": "1000",
            "error_line": "254",
            "half_error_line": "238",
        }
    )
    return environment


def _commands(engine: str) -> list[list[str]]:
    """The command lines to run, in order (one for latexmk, up to three for pdflatex)."""
    if Path(engine).name.lower().startswith("latexmk"):
        pdflatex = "pdflatex -no-file-line-error %O %S"
        return [
            [engine, "-norc", "-pdf", "-bibtex-", f"-pdflatex={pdflatex}"]
            + [flag for flag in _ENGINE_FLAGS if flag != "-no-file-line-error"]
            + [f"{_JOB}.tex"]
        ]
    return [[engine, *_ENGINE_FLAGS, f"{_JOB}.tex"]] * _MAX_PDFLATEX_RUNS


def _kill_group(process: subprocess.Popen[bytes]) -> None:
    if sys.platform != "win32":
        try:
            os.killpg(process.pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
    process.kill()


def _run(command: list[str], folder: Path, deadline: float, timeout: float) -> tuple[int, str]:
    """Run one command in `folder`; return its exit code and its output."""
    output_path = folder / _OUTPUT_FILE
    remaining = deadline - time.monotonic()
    if remaining <= 0:
        raise RenderError(f"TeX did not finish within {timeout:g} s")
    with open(output_path, "ab") as output:
        try:
            process = subprocess.Popen(
                command,
                cwd=folder,
                env=_locked_environment(folder),
                stdin=subprocess.DEVNULL,
                stdout=output,
                stderr=subprocess.STDOUT,
                start_new_session=sys.platform != "win32",
            )
        except OSError as error:
            raise RenderError(f"cannot start {command[0]}: {error}") from error
        try:
            code = process.wait(timeout=remaining)
        except subprocess.TimeoutExpired:
            _kill_group(process)
            process.wait()
            raise RenderError(f"TeX did not finish within {timeout:g} s") from None
        finally:
            if process.returncode is None:
                _kill_group(process)
                process.wait()
    return code, output_path.read_text(encoding="utf-8", errors="replace")


_BANG = re.compile(r"^! (.+)$", re.MULTILINE)
_LINE_NUMBER = re.compile(r"^l\.(\d+)", re.MULTILINE)
_UNPRINTABLE = re.compile(r"[^\x20-\x7e]")


def _first_error(log: str) -> str | None:
    """``"! message (memo.tex l.NNN)"`` for the first TeX error in the log, or None."""
    bang = _BANG.search(log)
    if bang is None:
        return None
    message = _UNPRINTABLE.sub("?", bang.group(1).strip())[:300]
    line = _LINE_NUMBER.search(log, bang.end())
    where = f" ({_JOB}.tex l.{line.group(1)})" if line else ""
    return f"! {message}{where}"


def _needs_rerun(log: str) -> bool:
    return any(hint in log for hint in _RERUN_HINTS)


def _save_log(log_path: Path | None, folder: Path) -> None:
    """Copy memo.log (or, if TeX wrote none, the engine's output) to `log_path`."""
    if log_path is None:
        return
    source = folder / f"{_JOB}.log"
    if not source.is_file():
        source = folder / _OUTPUT_FILE
    try:
        if source.is_file():
            shutil.copyfile(source, log_path)
        else:
            Path(log_path).write_text("", encoding="utf-8")
    except OSError as error:
        raise RenderError(f"cannot write the TeX log to {log_path}: {error}") from error


@dataclass(frozen=True)
class CompiledPdf:
    """A compiled document and the text of the TeX log of its last pdfLaTeX run."""

    pdf: bytes
    #: ``memo.log`` as text (read inside the throw-away folder; no file leaves it)
    log: str


def compile_pdf(
    tex_source: str,
    assets: Mapping[str, bytes],
    *,
    timeout: float = 120.0,
    log_path: Path | None = None,
) -> bytes:
    """Compile a LaTeX document to PDF in a locked, throw-away folder.

    Parameters
    ----------
    tex_source : str
        The whole document (written as UTF-8 to ``memo.tex``).
    assets : Mapping[str, bytes]
        Files the document uses, by relative name, e.g. ``{"step.pdf": ...}`` or
        ``{"figures/step.pdf": ...}``: plain names of ``A-Z a-z 0-9 . _ -`` with at most
        one folder level (see :func:`symbolic.runtime.publish.check_file_name`), and not starting
        with ``memo.`` (the compile's own files).
    timeout : float, optional
        Seconds for the whole compile (all reruns), by default 120.
    log_path : pathlib.Path, optional
        Where to write the TeX log (``memo.log``, or the engine's output if TeX wrote no
        log).  Written after every compile, failed or not.

    Returns
    -------
    bytes
        The PDF.

    Raises
    ------
    RenderError
        If no engine is installed (see :func:`find_tex_engine`); if an asset name is not
        allowed; if TeX stops on an error, with the one-line message ``"! <first error
        line> (memo.tex l.<line>)"``; or if it does not finish within `timeout`
        (``"TeX did not finish within N s"``).

    Notes
    -----
    See the module notes for the lock.  The compile can still write files inside its own
    temporary folder and loop until the timeout; nothing from the folder but the PDF (and
    the log, if asked) leaves it.
    """
    return compile_pdf_with_log(tex_source, assets, timeout=timeout, log_path=log_path).pdf


def compile_pdf_with_log(
    tex_source: str,
    assets: Mapping[str, bytes],
    *,
    timeout: float = 120.0,
    log_path: Path | None = None,
) -> CompiledPdf:
    """:func:`compile_pdf`, returning the TeX log's text beside the PDF.

    The same locked compile in the same throw-away folder: the log is read there as text
    (after the last run) and the folder is deleted as before, so a caller can check the
    layout (e.g. ``Overfull \\hbox`` lines) without any file leaving the folder.  Raises
    as :func:`compile_pdf` does.
    """
    problems = [
        problem
        for name in assets
        for problem in (check_file_name(name) or _reserved(name),)
        if problem is not None
    ]
    if problems:
        raise RenderError("cannot compile: " + "; ".join(problems))
    engine = find_tex_engine()
    if engine is None:
        raise RenderError(
            "no TeX engine found: install pdflatex (TeX Live) and preferably latexmk; "
            "lualatex is not used"
        )
    folder = Path(tempfile.mkdtemp(prefix="gainsmith-tex-"))
    try:
        _write_sources(folder, tex_source, assets)
        code, log, output = _run_engine(engine, folder, timeout, log_path)
        pdf = folder / f"{_JOB}.pdf"
        if code != 0 or not pdf.is_file():
            error = _first_error(log) or _first_error(output)
            if error is None:
                error = f"{Path(engine).name} failed with exit code {code} and no TeX error"
            raise RenderError(error)
        return CompiledPdf(pdf=pdf.read_bytes(), log=log)
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def _write_sources(folder: Path, tex_source: str, assets: Mapping[str, bytes]) -> None:
    """``memo.tex`` and the assets, into the compile folder."""
    (folder / f"{_JOB}.tex").write_bytes(tex_source.encode("utf-8", errors="replace"))
    for name, content in assets.items():
        target = folder / name
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(bytes(content))


def _run_engine(
    engine: str, folder: Path, timeout: float, log_path: Path | None
) -> tuple[int, str, str]:
    """Run the engine (pdfLaTeX rerun until the cross-references settle) within `timeout`;
    the exit code, the TeX log and the engine's output of the last run.  The log is saved
    to `log_path` either way."""
    deadline = time.monotonic() + timeout
    code, log, output = 0, "", ""
    for attempt, command in enumerate(_commands(engine)):
        try:
            code, output = _run(command, folder, deadline, timeout)
        except RenderError:
            _save_log(log_path, folder)
            raise
        log = _read_log(folder, output)
        if code != 0 or not _needs_rerun(log) or attempt == _MAX_PDFLATEX_RUNS - 1:
            break
    _save_log(log_path, folder)
    return code, log, output


def _reserved(name: str) -> str | None:
    if name.lower().startswith(f"{_JOB}."):
        return f"asset name {name!r} clashes with the compile's own files ({_JOB}.*)"
    return None


def _read_log(folder: Path, fallback: str) -> str:
    log = folder / f"{_JOB}.log"
    if log.is_file():
        return log.read_text(encoding="utf-8", errors="replace")
    return fallback
