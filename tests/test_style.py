"""The code follows the project's style: ruff's lint rules and formatter (pyproject.toml)."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _ruff(*args: str) -> subprocess.CompletedProcess:
    exe = shutil.which("ruff")
    command = [exe] if exe else [sys.executable, "-m", "ruff"]
    return subprocess.run(
        [*command, *args, "symbolic", "tests"], cwd=ROOT, capture_output=True, text=True
    )


@pytest.mark.parametrize("args", [("check",), ("format", "--check")], ids=["lint", "format"])
def test_ruff_is_clean(args):
    done = _ruff(*args)
    assert done.returncode == 0, done.stdout[-4000:] + done.stderr[-2000:]
