"""Run a heavy symbolic step where it can be stopped.

SymPy can run for minutes (or exhaust memory) on an innocent-looking
expression.  :func:`run_bounded` runs a function in a forked child process
with a wall-clock limit and an address-space limit; the caller catches
:class:`~symbolic.runtime.errors.BudgetExceeded` and falls back to numbers.

The child cannot outlive its budget by much, even when the parent is killed
(SIGKILL, the out-of-memory killer) and so never stops it: on Linux the kernel
kills the child when its parent dies (:func:`die_with_parent`), and everywhere
a CPU-time limit a little above the budget ends it.  Core dumps of the child
are switched off, so that limit leaves no ``core`` file behind.
"""

from __future__ import annotations

import ctypes
import inspect
import math
import multiprocessing as mp
import os
import pickle
import resource
import signal
import sys
import time
import traceback
from collections.abc import Callable, Iterator
from typing import Any, TypeVar

from .errors import BudgetExceeded, GainsmithError

__all__ = [
    "BoundedChild",
    "Outcome",
    "run_bounded",
    "run_bounded_steps",
    "die_with_parent",
    "DEFAULT_MEMORY_BYTES",
]

T = TypeVar("T")

#: Address-space cap of the child (bytes).  Generous for honest work, small
#: enough that a runaway expression cannot take the machine down.
DEFAULT_MEMORY_BYTES = 6 * 1024**3


#: Seconds of CPU the child may use beyond its wall-clock budget before the kernel
#: stops it (a safety net for a child whose parent is gone; common practice, no source).
CPU_GRACE_SECONDS = 2

_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>


def die_with_parent(parent: int | None = None) -> None:
    """Have the kernel SIGKILL this process when its parent dies (Linux only).

    For forked helpers (the symbolic stages here, figure workers) that must not
    keep running, or wait forever, after the gainsmith process is killed.  Uses
    ``prctl(PR_SET_PDEATHSIG, SIGKILL)`` (Linux man-pages, prctl(2)); elsewhere
    it does nothing.  If ``parent`` is given and is no longer this process's
    parent (it died before the request took effect), the process exits at once.

    Notes
    -----
    The signal is tied to the *thread* that forked the child: fork from a thread
    that outlives the child (as :func:`run_bounded` does, since it waits).
    """
    if not sys.platform.startswith("linux"):
        return
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
    except (OSError, AttributeError):  # no libc symbol: keep the CPU limit only
        return
    if parent is not None and os.getppid() != parent:
        os._exit(1)


def _limit_child(seconds: float | None, memory: int | None) -> None:
    """Resource limits of the forked child: address space, CPU time, no core file."""
    if memory:
        _soft, hard = resource.getrlimit(resource.RLIMIT_AS)
        cap = memory if hard == resource.RLIM_INFINITY else min(memory, hard)
        resource.setrlimit(resource.RLIMIT_AS, (cap, hard))
    if seconds is not None:
        _soft, hard = resource.getrlimit(resource.RLIMIT_CPU)
        cpu = math.ceil(seconds) + CPU_GRACE_SECONDS
        if hard == resource.RLIM_INFINITY or cpu <= hard:
            resource.setrlimit(resource.RLIMIT_CPU, (cpu, hard))
    _soft, hard = resource.getrlimit(resource.RLIMIT_CORE)
    resource.setrlimit(resource.RLIMIT_CORE, (0, hard))


def _child(
    conn: Any,
    func: Callable[..., Any],
    args: tuple,
    memory: int | None,
    seconds: float | None = None,
    parent: int | None = None,
) -> None:
    try:
        die_with_parent(parent)
        _limit_child(seconds, memory)
        sys.setrecursionlimit(max(sys.getrecursionlimit(), 20000))
        result = func(*args)
        if inspect.isgenerator(result):  # run_bounded_steps: one message per finished step
            for step in result:
                conn.send_bytes(pickle.dumps(("step", step), protocol=pickle.HIGHEST_PROTOCOL))
            result = None
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


def _failure(status: str, value: Any, what: str) -> BudgetExceeded:
    """The error for a child's final message other than "ok"; our own errors are re-raised."""
    if status == "error":
        raise value
    if status == "memory":
        return BudgetExceeded(f"{what} ran out of its memory budget")
    return BudgetExceeded(f"{what} failed: {value.splitlines()[0]}")


class Outcome:
    """A step already run (its value, or the error it raised), collected like a
    :class:`BoundedChild`: :meth:`result` returns the value or raises the error."""

    def __init__(self, value: Any = None, error: BaseException | None = None):
        self.value, self.error = value, error

    def result(self) -> Any:
        if self.error is not None:
            raise self.error
        return self.value

    def cancel(self) -> None:
        """Nothing runs: nothing to stop."""


class BoundedChild:
    """A bounded symbolic step started now and collected later.

    :func:`run_bounded` and :func:`run_bounded_steps` in two halves: the constructor
    forks the child (its time budget runs from here), :meth:`result` or :meth:`steps`
    waits for it.  Several can run side by side while this process does other work;
    the derivation starts the closed forms of its extensions this way, together with
    its main symbolic stage.  ``seconds=None`` (or no ``fork``) runs ``func`` in this
    process, unbounded, when it is collected.  Collect each exactly once, or
    :meth:`cancel` it (also safe after collecting).
    """

    def __init__(
        self,
        func: Callable[..., Any],
        args: tuple = (),
        *,
        seconds: float | None,
        memory_bytes: int | None = DEFAULT_MEMORY_BYTES,
        what: str = "symbolic step",
    ):
        self.func, self.args, self.seconds, self.what = func, args, seconds, what
        self.started = time.monotonic()
        self._proc: Any = None
        self._receiver: Any = None
        if seconds is not None and "fork" in mp.get_all_start_methods():
            ctx = mp.get_context("fork")
            self._receiver, sender = ctx.Pipe(duplex=False)
            self._proc = ctx.Process(
                target=_child,
                args=(sender, func, args, memory_bytes, seconds, os.getpid()),
                daemon=True,
            )
            self._proc.start()
            sender.close()

    def cancel(self) -> None:
        """Kill the child if it still runs, and reap it."""
        proc, receiver = self._proc, self._receiver
        self._proc = self._receiver = None
        if proc is None:
            return
        try:
            if proc.is_alive():
                proc.kill()
            proc.join(timeout=5)
        finally:
            receiver.close()

    def _left(self) -> float:
        return self.seconds - (time.monotonic() - self.started)

    def steps(self) -> tuple[list[Any], list[float], BudgetExceeded | None]:
        """Collect a generator's steps (see :func:`run_bounded_steps`)."""
        results: list[Any] = []
        seconds_at: list[float] = []
        if self._proc is None:
            for step in self.func(*self.args):
                results.append(step)
                seconds_at.append(time.monotonic() - self.started)
            return results, seconds_at, None
        try:
            while True:
                left = self._left()
                if left <= 0 or not self._receiver.poll(left):
                    stopped = BudgetExceeded(
                        f"{self.what} did not finish within {self.seconds:g} s"
                    )
                    return results, seconds_at, stopped
                try:
                    status, value = pickle.loads(self._receiver.recv_bytes())
                except (EOFError, OSError):
                    stopped = BudgetExceeded(
                        f"{self.what} stopped without a result (out of memory?)"
                    )
                    return results, seconds_at, stopped
                if status != "step":
                    failed = None if status == "ok" else _failure(status, value, self.what)
                    return results, seconds_at, failed
                results.append(value)
                seconds_at.append(time.monotonic() - self.started)
        finally:
            self.cancel()

    def result(self) -> Any:
        """Collect a function's value (see :func:`run_bounded`)."""
        if self._proc is None:
            return self.func(*self.args)
        try:
            left = self._left()
            if left <= 0 or not self._receiver.poll(left):
                raise BudgetExceeded(f"{self.what} did not finish within {self.seconds:g} s")
            try:
                status, value = pickle.loads(self._receiver.recv_bytes())
            except (EOFError, OSError) as exc:
                raise BudgetExceeded(
                    f"{self.what} stopped without a result (out of memory?)"
                ) from exc
        finally:
            self.cancel()
        if status == "ok":
            return value
        raise _failure(status, value, self.what)


def run_bounded_steps(
    func: Callable[..., Iterator[Any]],
    args: tuple = (),
    *,
    seconds: float | None,
    memory_bytes: int | None = DEFAULT_MEMORY_BYTES,
    what: str = "symbolic step",
) -> tuple[list[Any], list[float], BudgetExceeded | None]:
    """Run a generator of successive steps in one child, keeping the steps that finish.

    Like :func:`run_bounded` (one fork, one time and memory budget), but
    ``func(*args)`` yields the result of each step as soon as it is done, so a
    later step that runs over the budget does not take the earlier ones with it.

    Returns
    -------
    results : list
        The yielded values, in order, up to the step that did not finish.
    seconds_at : list of float
        Wall time (from the call) at which each result arrived.
    stopped : BudgetExceeded or None
        Why the remaining steps are missing (None when the generator ran out).

    Raises
    ------
    GainsmithError
        Re-raised from the child unchanged.
    """
    return BoundedChild(func, args, seconds=seconds, memory_bytes=memory_bytes, what=what).steps()


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
    return BoundedChild(func, args, seconds=seconds, memory_bytes=memory_bytes, what=what).result()
