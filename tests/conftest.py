"""Shared fixtures (paths, a design-file writer, the TeX requirement) and the quick subset."""

from __future__ import annotations

import dataclasses
import fcntl
import json
import os
import shutil
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
WORKED = ROOT / "worked_designs"
WORKED_FILES = sorted(WORKED.glob("*.toml"))


def tex_available() -> bool:
    return shutil.which("pdflatex") is not None and shutil.which("pdftotext") is not None


def require_tex() -> None:
    """Skip without TeX, unless CI demands it (GAINSMITH_REQUIRE_TEX=1): then fail."""
    if tex_available():
        return
    if os.environ.get("GAINSMITH_REQUIRE_TEX"):
        pytest.fail("GAINSMITH_REQUIRE_TEX is set but pdflatex/pdftotext are not on PATH")
    pytest.skip("no TeX engine (pdflatex) or pdftotext on PATH")


@pytest.fixture
def write_design(tmp_path):
    """Write a design file from a TOML snippet and return its path."""

    def _write(text: str, name: str = "design.toml") -> Path:
        path = tmp_path / name
        path.write_text(textwrap.dedent(text), encoding="utf-8")
        return path

    return _write


#: the date pinned by worked_designs/regenerate.sh (SOURCE_DATE_EPOCH)
PINNED_EPOCH = "1764633600"


@dataclasses.dataclass(frozen=True)
class WorkedMemo:
    """One worked design's memo as built by the test run (see :func:`worked_memo`)."""

    folder: Path  # <name>.tex, <name>.md, figures/, and with TeX <name>.pdf and <name>.log
    name: str
    passed: bool  # the verdict of the requirements table (the memo command's exit code 0)
    gains: dict  # "K", "L", "N": the derived values, as nested lists

    def text(self, suffix: str) -> str:
        return (self.folder / f"{self.name}{suffix}").read_text(encoding="utf-8")


def _build_worked_memo(path: Path, folder: Path, compile_pdf: bool) -> None:
    """Build the memo of `path` into `folder` as ``gainsmith memo`` does (date pinned)."""
    import symbolic
    from symbolic.render.memo import assemble_memo
    from symbolic.render.pdf import compile_pdf_with_log

    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("SOURCE_DATE_EPOCH", PINNED_EPOCH)
        patch.setenv("GAINSMITH_FIGURE_SERVER", "0")
        d = symbolic.derive(symbolic.load_design(path))
        doc = assemble_memo(d)
    (folder / "figures").mkdir(parents=True)
    for name, data in doc.figures.items():
        (folder / "figures" / name).write_bytes(data)
    (folder / f"{path.stem}.tex").write_text(doc.tex, encoding="utf-8")
    (folder / f"{path.stem}.md").write_text(doc.markdown, encoding="utf-8")
    if compile_pdf:
        assets = {f"figures/{k}": v for k, v in doc.figures.items() if k.endswith(".pdf")}
        compiled = compile_pdf_with_log(doc.tex, assets)
        (folder / f"{path.stem}.pdf").write_bytes(compiled.pdf)
        (folder / f"{path.stem}.log").write_text(compiled.log, encoding="utf-8")
    gains = {k: getattr(d, k).value.tolist() for k in ("K", "L")}
    gains["N"] = d.reference.value.tolist()
    record = {"passed": bool(doc.requirements.passed), "gains": gains}
    (folder / "record.json").write_text(json.dumps(record), encoding="utf-8")


@pytest.fixture(scope="session")
def worked_memo(tmp_path_factory):
    """``worked_memo(name)``: the worked design's memo, built once per test run.

    The build is shared by every pytest-xdist worker (a folder beside the workers' own
    temporary folders, taken under a file lock), so the five memos are derived, drawn and
    compiled once however many test files read them.  The PDF and the TeX log are there
    when TeX is; tests that read them call :func:`require_tex` first.
    """
    base = tmp_path_factory.getbasetemp()
    root = base.parent if os.environ.get("PYTEST_XDIST_WORKER") else base
    shared = root / "worked-memos"
    shared.mkdir(exist_ok=True)

    def get(name: str) -> WorkedMemo:
        folder = shared / name
        with open(shared / f"{name}.lock", "w") as lock:
            fcntl.flock(lock, fcntl.LOCK_EX)
            if not (folder / "record.json").is_file():
                shutil.rmtree(folder, ignore_errors=True)
                _build_worked_memo(WORKED / f"{name}.toml", folder, tex_available())
        record = json.loads((folder / "record.json").read_text(encoding="utf-8"))
        return WorkedMemo(folder, name, record["passed"], record["gains"])

    return get


HEAVY_LIST = Path(__file__).with_name("heavy_tests.txt")


def _heavy_tests() -> frozenset[str]:
    lines = HEAVY_LIST.read_text(encoding="utf-8").splitlines()
    return frozenset(line.strip() for line in lines if line.strip() and not line.startswith("#"))


def _node_without_parameters(item: pytest.Item) -> str:
    return item.nodeid.split("[", 1)[0]


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(config, items):
    """Mark every test "quick" except the heavy ones and the slow and benchmark ones.

    Runs before ``-m``/``-k`` deselect anything, so it sees every collected test: a line
    of ``heavy_tests.txt`` that names no test of a collected file is an error (the list
    must not rot as tests are renamed).
    """
    heavy = _heavy_tests()
    collected = {_node_without_parameters(item) for item in items}
    files = {node.split("::", 1)[0] for node in collected}
    stale = sorted(h for h in heavy if h.split("::", 1)[0] in files and h not in collected)
    if stale:
        raise pytest.UsageError(f"{HEAVY_LIST.name} names tests that do not exist: {stale}")
    for item in items:
        if _node_without_parameters(item) in heavy:
            continue
        if item.get_closest_marker("slow") or item.get_closest_marker("benchmark"):
            continue
        item.add_marker(pytest.mark.quick)
