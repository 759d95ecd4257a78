"""Tests of symbolic.runtime.publish: atomic replacement of a set of output files.

The defining property (each final name holds one complete version, old or new, whatever
moment the writer dies) rests on POSIX ``rename``: "If newpath already exists, it will be
atomically replaced, so that there is no point at which another process attempting to
access newpath will find it missing" (Linux man-pages, rename(2); IEEE Std 1003.1-2017,
rename()).  The tests kill a real writer with SIGKILL at random moments and at chosen
points (during staging, between two renames) and inspect what is left.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from symbolic.runtime.errors import RenderError
from symbolic.runtime.publish import STAGING_PREFIX, check_file_name, publish

ROOT = Path(__file__).resolve().parent.parent
NAMES = ["memo.pdf", "memo.md", "design.json", "figures/step.png", "figures/poles.png"]


def content(name: str, version: int, size: int) -> bytes:
    """A file body that says which file and version it is, repeated to `size` bytes."""
    header = f"{name}|v{version}|".encode()
    return (header * (size // len(header) + 1))[:size]


def version_of(path: Path, name: str, size: int) -> int:
    """The version a complete file holds; fails on a truncated or mixed file."""
    data = path.read_bytes()
    version = int(data.split(b"|")[1][1:])
    assert data == content(name, version, size), f"{name}: not one complete version"
    return version


# --------------------------------------------------------------------------------------
# Ordinary use
# --------------------------------------------------------------------------------------


def test_publish_writes_all_files_and_returns_their_paths(tmp_path: Path) -> None:
    out = tmp_path / "out" / "deeper"
    files = {name: content(name, 1, 1000) for name in NAMES}
    paths = publish(files, out)
    assert paths == [out / name for name in NAMES]
    for name in NAMES:
        assert (out / name).read_bytes() == files[name]
    assert sorted(p.name for p in out.iterdir()) == [
        "design.json",
        "figures",
        "memo.md",
        "memo.pdf",
    ]


def test_second_publish_replaces_files(tmp_path: Path) -> None:
    publish({name: content(name, 1, 5000) for name in NAMES}, tmp_path)
    publish({name: content(name, 2, 300) for name in NAMES}, tmp_path)
    for name in NAMES:
        assert version_of(tmp_path / name, name, 300) == 2


def test_publish_leaves_other_files_alone(tmp_path: Path) -> None:
    (tmp_path / "notes.txt").write_bytes(b"mine")
    (tmp_path / ".git").mkdir()
    publish({"memo.md": b"x"}, tmp_path)
    assert (tmp_path / "notes.txt").read_bytes() == b"mine"
    assert (tmp_path / ".git").is_dir()


def test_publish_accepts_bytearray_and_memoryview(tmp_path: Path) -> None:
    publish({"a.bin": bytearray(b"ab"), "b.bin": memoryview(b"cd")}, tmp_path)
    assert (tmp_path / "a.bin").read_bytes() == b"ab"
    assert (tmp_path / "b.bin").read_bytes() == b"cd"


@pytest.mark.parametrize(
    "name",
    [
        "",
        "../escape.pdf",
        "/etc/passwd",
        "a/b/c.png",
        ".hidden",
        "figures/.hidden",
        "./memo.pdf",
        "figures/../memo.pdf",
        "back\\slash.pdf",
        "space name.pdf",
        "nul\x00.pdf",
        "memo.pdf/",
        "CON",
        "nul.txt",
        "x" * 256,
        "ü.pdf",
    ],
)
def test_bad_names_are_refused(tmp_path: Path, name: str) -> None:
    assert check_file_name(name) is not None
    with pytest.raises(RenderError, match="cannot publish"):
        publish({name: b"x"}, tmp_path / "out")
    assert not (tmp_path / "out").exists()


def test_all_problems_are_reported_at_once(tmp_path: Path) -> None:
    files = {"../a": b"x", "ok.txt": "not bytes", "Memo.pdf": b"1", "memo.pdf": b"2"}
    with pytest.raises(RenderError) as caught:
        publish(files, tmp_path)  # type: ignore[arg-type]
    message = str(caught.value)
    assert "'../a'" in message and "must be bytes" in message and "letter case" in message


def test_a_name_cannot_be_both_file_and_folder(tmp_path: Path) -> None:
    with pytest.raises(RenderError, match="both a file and a folder"):
        publish({"figures": b"x", "figures/a.png": b"y"}, tmp_path)


def test_a_folder_in_the_way_raises_and_cleans_up(tmp_path: Path) -> None:
    (tmp_path / "memo.pdf").mkdir()
    with pytest.raises(RenderError, match="cannot publish into"):
        publish({"memo.pdf": b"x"}, tmp_path)
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(STAGING_PREFIX)]


def test_stale_staging_of_a_dead_process_is_removed(tmp_path: Path) -> None:
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)  # fmt: skip
    pid = int(dead.stdout)
    stale = tmp_path / f"{STAGING_PREFIX}{pid}-deadbeef"
    (stale / "figures").mkdir(parents=True)
    (stale / "figures" / "half.png").write_bytes(b"half")
    alive = tmp_path / f"{STAGING_PREFIX}{os.getppid()}-0123abcd"
    alive.mkdir()
    publish({"memo.md": b"x"}, tmp_path)
    assert not stale.exists()
    assert alive.is_dir()  # a live process may still be publishing: keep its folder


# --------------------------------------------------------------------------------------
# SIGKILL
# --------------------------------------------------------------------------------------

# The writer loads symbolic.runtime.publish without running symbolic/__init__.py (which imports
# SymPy and would make every start take seconds): it registers a bare package object.
WRITER = r"""
import os, signal, sys, types
root, out, size, mode = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
package = types.ModuleType("symbolic")
package.__path__ = [os.path.join(root, "symbolic")]
sys.modules["symbolic"] = package
from pathlib import Path
from symbolic.runtime import publish as _publish

NAMES = NAMES_PLACEHOLDER

def content(name, version):
    header = f"{name}|v{version}|".encode()
    return (header * (size // len(header) + 1))[:size]

def die_on_call(module, attribute, count):
    original = getattr(module, attribute)
    calls = []
    def wrapper(*args, **kwargs):
        calls.append(1)
        if len(calls) == count:
            os.kill(os.getpid(), signal.SIGKILL)
        return original(*args, **kwargs)
    setattr(module, attribute, wrapper)

print("ready", flush=True)
version = 0
while True:
    version += 1
    if version == 2 and mode != "loop":
        where, count = mode.split(":")
        die_on_call(os, where, int(count))
    _publish.publish({name: content(name, version) for name in NAMES}, Path(out))
    print(f"done {version}", flush=True)
""".replace("NAMES_PLACEHOLDER", repr(NAMES))


def _start_writer(out: Path, size: int, mode: str) -> subprocess.Popen[str]:
    process = subprocess.Popen(
        [sys.executable, "-c", WRITER, str(ROOT), str(out), str(size), mode],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert process.stdout is not None
    assert process.stdout.readline().strip() == "ready", process.stderr.read()
    return process


def _finish(process: subprocess.Popen[str]) -> int:
    """Reap the writer; return the last version it reported complete."""
    stdout, _ = process.communicate(timeout=30)
    done = [int(line.split()[1]) for line in stdout.splitlines() if line.startswith("done")]
    return max(done, default=0)


def _inspect_after_kill(
    out: Path, size: int, last_done: int, existed_before: bool = True
) -> tuple[dict[str, int], int]:
    """Check what a killed writer left; return the version of each file and the number of
    staging folders.  `existed_before`: a complete set was on disk when the writer began."""
    staging = 0
    for entry in out.iterdir() if out.exists() else []:
        if entry.name.startswith(STAGING_PREFIX) and entry.is_dir():
            staging += 1
            continue
        # nothing but final names (and their subfolder) may be visible
        assert entry.name in {"memo.pdf", "memo.md", "design.json", "figures"}, entry.name
    if (out / "figures").exists():
        for entry in (out / "figures").iterdir():
            assert entry.name in {"step.png", "poles.png"}, entry.name
    versions = {}
    for name in NAMES:
        path = out / name
        if path.exists():
            versions[name] = version_of(path, name, size)
        else:
            # a final file may be missing only if no complete set was ever published
            assert last_done == 0 and not existed_before, f"{name} vanished"
    for version in versions.values():
        assert version >= last_done  # never an older version than one already published
    return versions, staging


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL and fork semantics are POSIX")
def test_sigkill_at_random_moments_leaves_complete_files(tmp_path: Path) -> None:
    size = 1_000_000
    rng = random.Random(20240611)
    delays = [0.0, 0.005, 0.02] + [rng.uniform(0.0, 0.15) for _ in range(5)]
    out = tmp_path / "out"
    summary = []
    for index, delay in enumerate(delays):
        process = _start_writer(out, size, "loop")
        time.sleep(delay)
        process.send_signal(signal.SIGKILL)
        last_done = _finish(process)
        versions, staging = _inspect_after_kill(out, size, last_done, existed_before=index > 0)
        summary.append((round(delay, 3), last_done, sorted(set(versions.values())), staging))
        # the next publish removes the dead writer's staging folder
        publish({name: content(name, 0, size) for name in NAMES}, out)
        assert not [p for p in out.iterdir() if p.name.startswith(STAGING_PREFIX)]
    print("delay, versions completed, versions on disk, staging folders:", summary)


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL and fork semantics are POSIX")
@pytest.mark.parametrize("fsync_call", [1, 3, 6])
def test_sigkill_while_staging_keeps_the_previous_version(tmp_path: Path, fsync_call: int) -> None:
    size = 200_000
    out = tmp_path / "out"
    process = _start_writer(out, size, f"fsync:{fsync_call}")
    assert _finish(process) == 1
    assert process.returncode == -signal.SIGKILL
    versions, staging = _inspect_after_kill(out, size, 1)
    assert versions == {name: 1 for name in NAMES}
    assert staging == 1
    publish({"memo.md": b"next"}, out)
    assert not [p for p in out.iterdir() if p.name.startswith(STAGING_PREFIX)]


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL and fork semantics are POSIX")
@pytest.mark.parametrize("replace_call", [1, 2, 5])
def test_sigkill_between_renames_leaves_a_mix_of_complete_files(
    tmp_path: Path, replace_call: int
) -> None:
    size = 200_000
    out = tmp_path / "out"
    process = _start_writer(out, size, f"replace:{replace_call}")
    assert _finish(process) == 1
    versions, staging = _inspect_after_kill(out, size, 1)
    # the renames before the fatal one happened, in order; the rest kept version 1
    expected = {name: 2 if i < replace_call - 1 else 1 for i, name in enumerate(NAMES)}
    assert versions == expected
    assert staging == 1
