"""Shared fixtures (paths, a design-file writer, the TeX requirement) and the quick subset."""

from __future__ import annotations

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
