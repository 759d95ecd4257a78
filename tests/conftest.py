"""Shared fixtures: paths, a design-file writer and the TeX requirement."""

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
