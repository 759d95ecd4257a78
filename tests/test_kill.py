"""No data lost: a memo run killed with SIGKILL at any moment leaves complete files.

``gainsmith memo`` publishes its files through ``symbolic/_publish.py``: each file
is written into a hidden staging folder, flushed, and moved to its final name with
``os.replace`` (atomic on POSIX: IEEE Std 1003.1-2017, ``rename()``, "If the link
named by the new argument exists, it shall be removed and old renamed to new ...
a link named new shall remain visible to other threads throughout the renaming
operation").

The test writes a previous memo (with another parameter value, so that old and
new files differ), then starts the command again and kills it with SIGKILL at
several moments: fixed delays, random delays (seeded), the moment the staging
folder appears and the moment the first final file is replaced.  After each
kill, every file in the output folder must be byte-identical to its previous
version or to its new version (the memo is deterministic when
``SOURCE_DATE_EPOCH`` is set), no other file may appear beside them (hidden
``.gainsmith-staging-*`` folders may remain), and the killed command must leave
no process behind.  A final complete run removes the staging folders.

Two variants: ``test_kill_during_memo_command`` runs the real command
(``python -m symbolic memo``) at every delay and is marked slow;
``test_kill_during_memo_forked`` forks this test process (already importing
gainsmith, so each run starts in a fraction of a second), makes the previous
version by overwriting the files of one complete run, kills three times and
runs in the ordinary suite (two memo runs in all).
"""

from __future__ import annotations

import hashlib
import os
import random
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest

from .conftest import ROOT, WORKED

DESIGN = WORKED / "focus_actuator.toml"
EPOCH = "1700000000"  # any fixed date: the memo shows it
PREVIOUS = ["--set", "m=0.013"]  # the previous memo: another carriage mass
STAGING = ".gainsmith-staging-"

pytestmark = pytest.mark.skipif(
    sys.platform != "linux", reason="SIGKILL, process groups and /proc are used"
)


# --------------------------------------------------------------------------
# Looking at the output folder
# --------------------------------------------------------------------------
def snapshot(out: Path) -> dict[str, str]:
    """sha256 of every visible file (relative name), staging folders left out."""
    files = {}
    for path in sorted(out.rglob("*")):
        rel = path.relative_to(out)
        if rel.parts[0].startswith(STAGING) or not path.is_file():
            continue
        files[rel.as_posix()] = hashlib.sha256(path.read_bytes()).hexdigest()
    return files


def staging_folders(out: Path) -> list[str]:
    return sorted(p.name for p in out.iterdir() if p.name.startswith(STAGING))


def inode_map(out: Path) -> dict[str, int]:
    return {
        p.relative_to(out).as_posix(): p.stat().st_ino
        for p in out.rglob("*")
        if p.is_file() and not p.relative_to(out).parts[0].startswith(STAGING)
    }


def group_members(pgid: int) -> list[int]:
    """Live processes (not zombies) of a process group, from /proc."""
    members = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2 :].split()
        state, group = fields[0], int(fields[2])
        if group == pgid and state != "Z":
            members.append(int(entry.name))
    return members


# --------------------------------------------------------------------------
# Running and killing
# --------------------------------------------------------------------------
def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["SOURCE_DATE_EPOCH"] = EPOCH
    env.pop("GAINSMITH_DEBUG", None)
    return env


def _command(out: Path, extra: list[str]) -> list[str]:
    return [
        sys.executable,
        "-m",
        "symbolic",
        "memo",
        str(DESIGN),
        "-o",
        str(out),
        "--no-pdf",
        *extra,
    ]


def run_to_completion(out: Path, extra: list[str]) -> None:
    done = subprocess.run(
        _command(out, extra), cwd=ROOT, env=_env(), capture_output=True, text=True, timeout=300
    )
    assert done.returncode == 0, done.stderr


class Trigger:
    """When to kill: after a delay, or when something shows in the output folder."""

    def __init__(self, label: str, ready: Callable[[float], bool]):
        self.label = label
        self.ready = ready


def after(seconds: float) -> Trigger:
    return Trigger(f"after {seconds:.2f} s", lambda elapsed: elapsed >= seconds)


def when_staging_appears(out: Path) -> Trigger:
    return Trigger("when the staging folder appears", lambda _: bool(staging_folders(out)))


def when_first_file_replaced(out: Path) -> Trigger:
    before = inode_map(out)

    def ready(_: float) -> bool:
        now = inode_map(out)
        return any(now.get(name) != ino for name, ino in before.items())

    return Trigger("when the first final file is replaced", ready)


def _kill_group(pgid: int) -> list[int]:
    """SIGKILL what is left of a group this test started; return who was left."""
    left = group_members(pgid)
    for pid in left:
        try:
            os.kill(pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    return left


def kill_command(out: Path, trigger: Trigger) -> tuple[bool, list[int]]:
    """Start the real command, SIGKILL it when the trigger fires.

    Returns whether it was killed before it finished, and the processes of its
    group still alive 3 s after the kill (then killed by the test).
    """
    proc = subprocess.Popen(
        _command(out, []),
        cwd=ROOT,
        env=_env(),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    start = time.perf_counter()
    while proc.poll() is None and not trigger.ready(time.perf_counter() - start):
        time.sleep(0.002)
    killed = proc.poll() is None
    if killed:
        os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    return killed, _leftovers(proc.pid)


def _leftovers(pgid: int) -> list[int]:
    deadline = time.monotonic() + 3.0
    while group_members(pgid) and time.monotonic() < deadline:
        time.sleep(0.05)
    return _kill_group(pgid)


def _fork_memo(out: Path, extra: list[str]) -> int:
    """Fork this process; the child runs the command-line entry point in its own group."""
    from symbolic.cli import main

    pid = os.fork()
    if pid == 0:  # child: its own process group, quiet, then the command
        code = 99
        try:
            os.setpgid(0, 0)
            os.environ["SOURCE_DATE_EPOCH"] = EPOCH
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, 1)
            os.dup2(devnull, 2)
            code = main(["memo", str(DESIGN), "-o", str(out), "--no-pdf", *extra])
        finally:
            os._exit(code)
    try:
        os.setpgid(pid, pid)
    except (PermissionError, ProcessLookupError):
        pass  # the child did it first, or already finished
    return pid


def complete_forked(out: Path, extra: list[str]) -> None:
    pid = _fork_memo(out, extra)
    _, status = os.waitpid(pid, 0)
    assert os.waitstatus_to_exitcode(status) == 0


def kill_forked(out: Path, trigger: Trigger) -> tuple[bool, list[int]]:
    """As :func:`kill_command`, with a fork of this process instead of a new interpreter."""
    pid = _fork_memo(out, [])
    start = time.perf_counter()
    finished = False
    while not trigger.ready(time.perf_counter() - start):
        done, _status = os.waitpid(pid, os.WNOHANG)
        if done:
            finished = True
            break
        time.sleep(0.002)
    if not finished:
        os.kill(pid, signal.SIGKILL)
        os.waitpid(pid, 0)
    return not finished, _leftovers(pid)


# --------------------------------------------------------------------------
# The scenario
# --------------------------------------------------------------------------
def _kill_all(
    out: Path, kill, triggers: list[Callable[[Path], Trigger]], previous: dict[str, str]
) -> tuple[list[tuple[str, bool, dict[str, str], list[str]]], list[str]]:
    """One kill per trigger (each built just before its run); snapshots after each."""
    after_kills: list[tuple[str, bool, dict[str, str], list[str]]] = []
    orphans: list[str] = []
    for make_trigger in triggers:
        trigger = make_trigger(out)
        killed, left = kill(out, trigger)
        if left:
            orphans.append(
                f"{trigger.label}: {len(left)} process(es) still alive 3 s after the kill"
            )
        # nothing beside the outputs but hidden staging folders
        visible = {
            p.relative_to(out).as_posix()
            for p in out.rglob("*")
            if not p.relative_to(out).parts[0].startswith(STAGING)
        }
        assert visible - set(previous) - {"figures"} == set(), (
            f"{trigger.label}: unexpected files {sorted(visible - set(previous))}"
        )
        after_kills.append((trigger.label, killed, snapshot(out), staging_folders(out)))
    return after_kills, orphans


def _verify(after_kills, orphans, previous: dict[str, str], new: dict[str, str]) -> list[str]:
    """Every file after every kill is the previous or the new version; one line per kill."""
    assert set(new) == set(previous)
    assert any(new[name] != previous[name] for name in new), "old and new memo should differ"
    report = []
    for label, killed, files, staged in after_kills:
        assert set(files) == set(previous), f"{label}: files missing {set(previous) - set(files)}"
        for name, digest in files.items():
            assert digest in (previous[name], new[name]), (
                f"{label}: {name} is neither the previous nor the new version (partial write?)"
            )
        fresh = sum(files[n] == new[n] != previous[n] for n in files)
        report.append(
            f"{label}: {'killed' if killed else 'finished first'}, {fresh} file(s) new,"
            f" {len(staged)} staging folder(s)"
        )
    assert not orphans, "; ".join(orphans)
    return report


def _scenario(
    tmp_path: Path, complete, kill, triggers: list[Callable[[Path], Trigger]]
) -> list[str]:
    """Previous memo (another mass), the kills, then a complete run; one line per kill."""
    out = tmp_path / "memo"
    complete(out, PREVIOUS)
    previous = snapshot(out)
    assert any(name.endswith(".md") for name in previous)
    assert any(name.startswith("figures/") for name in previous)
    after_kills, orphans = _kill_all(out, kill, triggers, previous)
    complete(out, [])
    new = snapshot(out)
    assert staging_folders(out) == [], "a successful run must remove stale staging folders"
    return _verify(after_kills, orphans, previous, new)


def _print(request, lines: list[str]) -> None:
    reporter = request.config.pluginmanager.get_plugin("terminalreporter")
    capture = request.config.pluginmanager.get_plugin("capturemanager")
    if reporter is None or capture is None:  # pragma: no cover
        print("\n".join(lines))
        return
    with capture.global_and_fixture_disabled():
        reporter.write_line("")
        for line in lines:
            reporter.write_line(f"kill test: {line}")


def _after(seconds: float) -> Callable[[Path], Trigger]:
    return lambda out: after(seconds)


def test_kill_during_memo_forked(tmp_path, request):
    """The short variant: two memo runs instead of four.

    The new version is written first; the "previous" version is then made by
    overwriting each file with other bytes of our own (the check is about whole
    files, not about what is in them).  After the kills, the cleanup of stale
    staging folders is checked through ``publish`` itself, which every successful
    run calls first.
    """
    # import what the memo needs before forking, so each child starts at once
    import symbolic.analysis.study  # noqa: F401
    import symbolic.render.memo  # noqa: F401
    from symbolic.runtime.publish import publish

    out = tmp_path / "memo"
    complete_forked(out, [])
    new = snapshot(out)
    assert any(name.endswith(".md") for name in new)
    for name in new:
        (out / name).write_bytes(f"previous version of {name}\n".encode())
    previous = snapshot(out)

    triggers = [_after(0.3), _after(1.5), when_first_file_replaced]
    after_kills, orphans = _kill_all(out, kill_forked, triggers, previous)
    publish({}, out)  # what the next successful run does first
    assert staging_folders(out) == [], "stale staging folders must go with the next run"
    _print(request, _verify(after_kills, orphans, previous, new))


@pytest.mark.slow
def test_kill_during_memo_command(tmp_path, request):
    rng = random.Random(20261202)
    delays = [0.2, 0.5, 1.0, 2.0, 3.0, 5.0] + sorted(rng.uniform(0.5, 8.0) for _ in range(3))
    triggers = [_after(d) for d in delays] + [when_staging_appears, when_first_file_replaced]
    _print(request, _scenario(tmp_path, run_to_completion, kill_command, triggers))


def test_symbolic_child_dies_with_its_parent():
    """A forked symbolic stage (``run_bounded``) does not outlive a killed gainsmith.

    A helper process (its own process group) starts a 60 s stage with a 100 s
    budget; the helper is SIGKILLed; the stage must be gone within 3 s
    (``PR_SET_PDEATHSIG``, Linux man-pages prctl(2)).
    """
    from symbolic.runtime.budget import run_bounded

    ready_r, ready_w = os.pipe()
    pid = os.fork()
    if pid == 0:
        code = 99
        try:
            os.setpgid(0, 0)
            os.close(ready_r)

            def stage() -> None:
                os.write(ready_w, b"x")  # the child is running
                time.sleep(60)

            run_bounded(stage, seconds=100, what="a long stage")
            code = 0
        finally:
            os._exit(code)
    os.close(ready_w)
    try:
        os.setpgid(pid, pid)
    except (PermissionError, ProcessLookupError):
        pass
    assert os.read(ready_r, 1) == b"x"
    os.close(ready_r)
    assert len(group_members(pid)) == 2  # the helper and its stage
    os.kill(pid, signal.SIGKILL)
    os.waitpid(pid, 0)
    left = _leftovers(pid)
    assert left == [], f"the symbolic stage outlived its parent: {left}"
