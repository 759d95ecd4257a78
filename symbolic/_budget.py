"""Run a heavy symbolic step where it can be stopped.

SymPy can run for minutes (or exhaust memory) on an innocent-looking
expression.  :func:`run_bounded` runs a function in a forked child process
with a wall-clock limit and an address-space limit; the caller catches
:class:`~symbolic._errors.BudgetExceeded` and falls back to numbers.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import pickle
import resource
import sys
import traceback
from collections.abc import Callable
from typing import Any, TypeVar

from ._errors import BudgetExceeded, GainsmithError

__all__ = ["run_bounded", "DEFAULT_MEMORY_BYTES"]

T = TypeVar("T")

#: Address-space cap of the child (bytes).  Generous for honest work, small
#: enough that a runaway expression cannot take the machine down.
DEFAULT_MEMORY_BYTES = 6 * 1024**3


def _child(conn: Any, func: Callable[..., Any], args: tuple, memory: int | None) -> None:
    try:
        if memory:
            soft, hard = resource.getrlimit(resource.RLIMIT_AS)
            cap = memory if hard == resource.RLIM_INFINITY else min(memory, hard)
            resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
        sys.setrecursionlimit(max(sys.getrecursionlimit(), 20000))
        result = func(*args)
        payload = pickle.dumps(("ok", result), protocol=pickle.HIGHEST_PROTOCOL)
    except MemoryError:
        payload = pickle.dumps(("memory", None))
    except GainsmithError as exc:
        payload = pickle.dumps(("error", exc))
    except BaseException as exc:  # report, do not crash the parent
        payload = pickle.dumps(("crash", f"{type(exc).__name__}: {exc}\n{traceback.format_exc()}"))
    try:
        conn.send_bytes(payload)
    finally:
        conn.close()
        os._exit(0)


def run_bounded(
    func: Callable[..., T],
    args: tuple = (),
    *,
    seconds: float | None,
    memory_bytes: int | None = DEFAULT_MEMORY_BYTES,
    what: str = "symbolic step",
) -> T:
    """Call ``func(*args)`` in a child process, within a time and memory budget.

    Parameters
    ----------
    func, args
        A picklable result is expected; ``func`` is inherited through
        ``fork`` so it need not be importable by name.
    seconds : float or None
        Wall-clock limit.  ``None`` runs ``func`` in this process, unbounded
        (used by tests and when fork is unavailable).
    memory_bytes : int or None
        Address-space limit of the child.
    what : str
        Named in the error message.

    Raises
    ------
    BudgetExceeded
        When the limit is hit or the child dies.
    GainsmithError
        Re-raised from the child unchanged.
    """
    if seconds is None or "fork" not in mp.get_all_start_methods():
        return func(*args)
    ctx = mp.get_context("fork")
    receiver, sender = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(sender, func, args, memory_bytes), daemon=True)
    proc.start()
    sender.close()
    try:
        if not receiver.poll(seconds):
            raise BudgetExceeded(f"{what} did not finish within {seconds:g} s")
        try:
            status, value = pickle.loads(receiver.recv_bytes())
        except (EOFError, OSError) as exc:
            raise BudgetExceeded(f"{what} stopped without a result (out of memory?)") from exc
    finally:
        if proc.is_alive():
            proc.kill()
        proc.join(timeout=5)
        receiver.close()
    if status == "ok":
        return value
    if status == "memory":
        raise BudgetExceeded(f"{what} ran out of its memory budget")
    if status == "error":
        raise value
    raise BudgetExceeded(f"{what} failed: {value.splitlines()[0]}")
