"""Atomic publishing of a set of output files (memo PDF, Markdown, JSON, figures).

A run killed at any moment, even by SIGKILL or a power cut after the last ``fsync``, never
leaves a truncated file under a final name and never deletes the previous version of an
output.

How
---
1. Every file is written into one hidden staging folder inside the output folder,
   ``.gainsmith-staging-<pid>-<random>/``, flushed and ``fsync``-ed, and the staging
   folder itself is ``fsync``-ed.
2. Each file is then moved to its final name with ``os.replace``, which is atomic on one
   file system (POSIX ``rename``; ``MoveFileEx`` with replace on Windows): a reader sees
   the old complete file or the new complete file, never a mix.
3. The output folder is ``fsync``-ed and the staging folder removed.
4. Every publish first deletes staging folders left by runs whose process no longer
   exists (checked with ``os.kill(pid, 0)``), so a kill leaves debris only until the
   next run, and only inside a hidden folder, never beside the outputs.

A kill during step 2 can leave a mix: some outputs of the new run and some of the old
one, each file complete.  A staging folder whose process id has since been reused by an
unrelated live process is kept until that process ends.  Output folders shared between
machines (network file systems) are out of scope: the process check is local.
"""

from __future__ import annotations

import os
import re
import secrets
import shutil
from collections.abc import Mapping
from pathlib import Path

from .errors import RenderError

__all__ = ["STAGING_PREFIX", "check_file_name", "publish"]

#: Name prefix of the hidden staging folders inside an output folder.
STAGING_PREFIX = ".gainsmith-staging-"

_STAGING_NAME = re.compile(re.escape(STAGING_PREFIX) + r"(\d+)-[0-9a-f]+")
_COMPONENT = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]*")
_WINDOWS_RESERVED = frozenset(
    ["CON", "PRN", "AUX", "NUL"] + [f"{p}{i}" for p in ("COM", "LPT") for i in range(1, 10)]
)
_MAX_COMPONENT = 255


def check_file_name(name: object) -> str | None:
    """Check that `name` is an allowed output file name.

    Parameters
    ----------
    name : object
        Candidate name, e.g. ``"memo.pdf"`` or ``"figures/step.png"``.

    Returns
    -------
    str or None
        ``None`` if the name is allowed, else a sentence saying why not.

    Notes
    -----
    Allowed: a relative name of one or two ``/``-separated parts (a file, or a file in one
    subfolder), each part made of ``A-Z a-z 0-9 . _ -``, starting with a letter or digit
    (so no hidden files, no ``.`` or ``..``), at most 255 characters, and not a reserved
    Windows device name (``CON``, ``NUL``, ``COM1``...).  Absolute paths, backslashes and
    deeper folders are refused.
    """
    if not isinstance(name, str):
        return f"file name must be a str, got {type(name).__name__}"
    parts = name.split("/")
    if not name or len(parts) > 2:
        return (
            f"file name {name!r} must be a plain name or one subfolder and a name "
            "(e.g. 'memo.pdf' or 'figures/step.png')"
        )
    for part in parts:
        if not _COMPONENT.fullmatch(part) or len(part) > _MAX_COMPONENT:
            return (
                f"file name {name!r}: each part must start with a letter or digit and use "
                "only A-Z a-z 0-9 . _ - (at most 255 characters)"
            )
        if part.split(".")[0].upper() in _WINDOWS_RESERVED:
            return f"file name {name!r} uses a reserved device name"
    return None


def _check_files(files: Mapping[str, bytes]) -> None:
    problems = []
    seen: dict[str, str] = {}
    for name, content in files.items():
        problem = check_file_name(name)
        if problem is not None:
            problems.append(problem)
            continue
        if not isinstance(content, (bytes, bytearray, memoryview)):
            problems.append(f"{name!r}: content must be bytes, got {type(content).__name__}")
        folded = name.lower()
        if folded in seen:
            problems.append(f"{name!r} and {seen[folded]!r} differ only in letter case")
        seen[folded] = name
    folders = {name.split("/")[0].lower() for name in files if "/" in name}
    problems.extend(
        f"{name!r} is both a file and a folder"
        for name in files
        if "/" not in name and name.lower() in folders
    )
    if problems:
        raise RenderError("cannot publish: " + "; ".join(problems))


def _process_alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # it exists, it belongs to someone else
    except OSError:
        return True  # cannot tell (e.g. on Windows for some pids): keep the folder
    return True


def _remove_stale_staging(out_dir: Path) -> None:
    for entry in out_dir.iterdir():
        match = _STAGING_NAME.fullmatch(entry.name)
        if match is None or not entry.is_dir() or entry.is_symlink():
            continue
        pid = int(match.group(1))
        if pid != os.getpid() and not _process_alive(pid):
            shutil.rmtree(entry, ignore_errors=True)


def _fsync_folder(folder: Path) -> None:
    """Make the names in `folder` durable (not possible, and not needed, on Windows)."""
    if os.name != "posix":
        return
    descriptor = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def publish(files: Mapping[str, bytes], out_dir: Path) -> list[Path]:
    """Write a set of output files into a folder, each file atomically.

    Parameters
    ----------
    files : Mapping[str, bytes]
        Content by relative name; names as allowed by :func:`check_file_name`, e.g.
        ``{"memo.pdf": ..., "memo.md": ..., "figures/step.png": ...}``.
    out_dir : pathlib.Path
        The output folder; created (with parents) if missing.

    Returns
    -------
    list of pathlib.Path
        The final paths, in the order of `files`.

    Raises
    ------
    RenderError
        If a name or a content is not allowed (all problems reported at once), or the
        files cannot be written (disk full, permissions, a folder in the way).

    Notes
    -----
    See the module notes: files are staged in one hidden folder, ``fsync``-ed and moved in
    place with ``os.replace``; stale staging folders of dead processes are removed first.
    A kill during the final moves can leave a mix of new and old files, each complete.
    """
    _check_files(files)
    out_dir = Path(out_dir)
    staging: Path | None = None
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        _remove_stale_staging(out_dir)
        staging = out_dir / f"{STAGING_PREFIX}{os.getpid()}-{secrets.token_hex(6)}"
        staging.mkdir()
        staged_folders = {staging}
        for name, content in files.items():
            target = staging / name
            if target.parent not in staged_folders:
                target.parent.mkdir(exist_ok=True)
                staged_folders.add(target.parent)
            with open(target, "xb") as handle:
                handle.write(content)
                handle.flush()
                os.fsync(handle.fileno())
        for folder in staged_folders:
            _fsync_folder(folder)
        final_folders = {out_dir}
        published = []
        for name in files:
            final = out_dir / name
            if final.parent not in final_folders:
                final.parent.mkdir(exist_ok=True)
                final_folders.add(final.parent)
            os.replace(staging / name, final)
            published.append(final)
        for folder in final_folders:
            _fsync_folder(folder)
        return published
    except OSError as error:
        raise RenderError(f"cannot publish into {out_dir}: {error}") from error
    finally:
        if staging is not None:
            shutil.rmtree(staging, ignore_errors=True)
