"""SciPy in a second process, loaded while this one loads SymPy.

Importing ``scipy.signal`` takes longer than any derivation of a worked design
(TECH-NOTES; about 2 s on the reference machine, as long as SymPy and NumPy
together), and the engine needs SciPy only for the independent numeric side:
``place_poles``, the optimal matching of poles, the transfer function of the
compensator, one root finder.  So the command line starts a *sidecar* at
once: a forked process that imports SciPy while the main process imports
SymPy and reads the design file.  :func:`call` then runs one of those numeric
functions in the sidecar; the two imports overlap and the command finishes
about one SciPy import earlier.

The sidecar is only an accelerator.  :func:`call` runs the function in this
process instead, with the same result, whenever

* no sidecar was started (library use, tests), or this is a forked child of
  the process that started it;
* this process has imported the SciPy module the function needs by now (a
  local call is then cheaper than a round trip);
* the sidecar fails for any reason (it died, the result does not pickle, the
  function raised): the local call then raises the same error, in the usual
  way, with the usual message.

Warnings raised in the sidecar are raised again here, so nothing is lost.
Functions and arguments travel by pickle: only module-level functions of
gainsmith's numeric modules and plain data (floats, arrays, dataclasses of
those) are sent.
"""

from __future__ import annotations

import atexit
import os
import pickle
import sys
import threading
import warnings
from collections.abc import Callable
from typing import Any, TypeVar

__all__ = ["start", "stop", "call", "running"]

T = TypeVar("T")

#: What the sidecar imports, in order, before the first request arrives: the
#: root finder first (the pole choice needs it early), ``scipy.signal`` last.
PRELOAD = (
    "numpy",
    "scipy.optimize",
    "symbolic.derivation.dominant",
    "symbolic.derivation.numeric",
    "symbolic.derivation.systems",
    "scipy.signal",
)

_state: dict[str, Any] = {"conn": None, "process": None, "owner": None}
_lock = threading.Lock()


def _serve(conn: Any, parent: int) -> None:
    """The sidecar's loop: preload in a thread, answer requests as they come."""
    from .budget import die_with_parent

    die_with_parent(parent)
    import importlib

    importlib.import_module(PRELOAD[0])
    importlib.import_module(PRELOAD[1])
    # the rest loads while requests are served (imports take the import lock per
    # module, so a request that needs a module still loading waits for it)
    loader = threading.Thread(
        target=lambda: [importlib.import_module(name) for name in PRELOAD[2:]], daemon=True
    )
    loader.start()
    while True:
        try:
            request = conn.recv_bytes()
        except (EOFError, OSError):
            os._exit(0)
        try:
            func, args, kwargs = pickle.loads(request)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                value = func(*args, **kwargs)
            raised = [(str(w.message), w.category) for w in caught]
            reply = pickle.dumps(("ok", value, raised), protocol=pickle.HIGHEST_PROTOCOL)
        except BaseException as exc:  # the caller repeats the call locally
            reply = pickle.dumps(("failed", f"{type(exc).__name__}: {exc}", []))
        try:
            conn.send_bytes(reply)
        except (EOFError, OSError):
            os._exit(0)


def start() -> bool:
    """Fork the sidecar (once per process); returns whether one is running.

    Call this before importing SymPy or SciPy, so that the fork is cheap and
    the two imports overlap.  Without ``fork`` (not Linux/macOS), or when
    this process has imported SciPy already (nothing left to overlap), it
    does nothing and every :func:`call` runs locally.
    """
    with _lock:
        if running():
            return True
        if "scipy" in sys.modules:
            return False
        import multiprocessing as mp

        if "fork" not in mp.get_all_start_methods():
            return False
        ctx = mp.get_context("fork")
        here, there = ctx.Pipe(duplex=True)
        process = ctx.Process(target=_serve, args=(there, os.getpid()), daemon=True)
        process.start()
        there.close()
        _state.update(conn=here, process=process, owner=os.getpid())
        atexit.register(stop)
        return True


def running() -> bool:
    """Whether this process owns a live sidecar."""
    process = _state["process"]
    return process is not None and _state["owner"] == os.getpid() and process.is_alive()


def stop() -> None:
    """Stop the sidecar, if this process started one (also run at exit)."""
    process, conn = _state["process"], _state["conn"]
    if process is None or _state["owner"] != os.getpid():
        return
    _state.update(conn=None, process=None, owner=None)
    try:
        conn.close()
    finally:
        if process.is_alive():
            process.kill()
        process.join(timeout=5)


def _remote(func: Callable[..., T], args: tuple, kwargs: dict) -> tuple[bool, Any]:
    conn = _state["conn"]
    try:
        conn.send_bytes(pickle.dumps((func, args, kwargs), protocol=pickle.HIGHEST_PROTOCOL))
        status, value, raised = pickle.loads(conn.recv_bytes())
    except (EOFError, OSError, pickle.PicklingError, AttributeError, TypeError):
        stop()  # a broken pipe or an unpicklable request: no more remote calls
        return False, None
    if status != "ok":
        return False, None
    for message, category in raised:
        warnings.warn(message, category, stacklevel=3)
    return True, value


def call(func: Callable[..., T], *args: Any, **kwargs: Any) -> T:
    """``func(*args, **kwargs)``, in the sidecar when that saves time.

    ``func`` must be a module-level function (it is pickled by name).  The
    result is the same wherever it runs; see the module notes for when the
    call stays in this process.  A function may name the module it loads in an
    attribute ``sidecar_needs`` (default ``"scipy"``): the call goes to the
    sidecar while that module is not loaded here, so a process that loaded
    ``scipy.integrate`` for itself still leaves ``scipy.signal`` to the sidecar.
    """
    needs = getattr(func, "sidecar_needs", "scipy")
    if running() and needs not in sys.modules:
        with _lock:
            if running():
                done, value = _remote(func, args, kwargs)
                if done:
                    return value
    return func(*args, **kwargs)
