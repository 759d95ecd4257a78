"""The processes that draw the memo's figures: the figure server and forked workers.

Drawing is the memo's largest cost, and importing matplotlib and drawing a first
figure (fonts, backends) costs as much again in each fresh process.  So the
``memo`` command starts a *figure server* at once (:func:`start_server`): one
process imports matplotlib and draws a throw-away figure while the main process
derives and simulates, then forks the other workers, which start warm.  Figures
are sent to it as soon as a section has them (:func:`render_figures` inside
:func:`deferred_figures`) as pickled makers: ``functools.partial`` of the functions of
:mod:`symbolic.render.figures`, :mod:`symbolic.render.robust_figures` or
:mod:`symbolic.render.extended_figures` over plain data (:func:`portable`).  matplotlib is
imported only inside functions, so the main process of a memo never loads it.  Without a
server (library use, tests) or for a maker that does not pickle, figures are drawn by
forked workers or in this process, with the same bytes.
"""

from __future__ import annotations

import dataclasses
import functools
import multiprocessing as mp
import os
import pickle
import queue
import sys
import threading
import types
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from typing import TYPE_CHECKING, Any

import numpy as np

from .figures import figure_files, figure_names, warm_up

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = [
    "SERVER_WORKERS",
    "FigureBatch",
    "deferred_figures",
    "portable",
    "render_figures",
    "server_process",
    "server_running",
    "start_server",
    "stop_server",
]

#: Workers of the figure server: one per core, at most this many (a worked memo has 10 to 14
#: figures).
SERVER_WORKERS = 4

_server: dict[str, Any] = {"conns": None, "process": None, "owner": None}
_server_lock = threading.Lock()


def _serve_figures(conn: Any) -> None:
    while True:
        try:
            stem, make = pickle.loads(conn.recv_bytes())
        except (EOFError, OSError):
            os._exit(0)
        except Exception as exc:  # a maker that does not unpickle here: drawn by the caller
            reply = ("failed", f"{type(exc).__name__}: {exc}")
        else:
            try:
                reply = ("ok", figure_files(make(), stem))
            except Exception as exc:  # the caller draws it again, and sees the error itself
                reply = ("failed", f"{type(exc).__name__}: {exc}")
        try:
            conn.send_bytes(pickle.dumps(reply, protocol=pickle.HIGHEST_PROTOCOL))
        except (EOFError, OSError):
            os._exit(0)


def _server_main(conns: list, parent: int) -> None:
    """The first worker: warm up, fork the others (they inherit the warm state), serve."""
    from ..runtime.budget import die_with_parent

    die_with_parent(parent)
    try:
        warm_up()
    except Exception:  # noqa: BLE001 - a failed warm-up only costs time; drawing will tell
        pass
    for k in range(1, len(conns)):
        pid = os.fork()
        if pid == 0:
            die_with_parent()  # with the first worker (which dies with gainsmith)
            for j, conn in enumerate(conns):
                if j != k:
                    conn.close()
            _serve_figures(conns[k])
            os._exit(0)
    for conn in conns[1:]:
        conn.close()
    _serve_figures(conns[0])


def start_server(workers: int | None = None) -> bool:
    """Fork the figure server (once per process); returns whether one is running.

    Call it before the heavy imports, as the ``memo`` command does.  ``workers`` defaults
    to one per usable core, at most :data:`SERVER_WORKERS`.  Nothing is started when
    matplotlib is loaded here already (forked workers start warm anyway) or without
    ``fork``.
    """
    with _server_lock:
        if server_running():
            return True
        if "matplotlib" in sys.modules or "fork" not in mp.get_all_start_methods():
            return False
        if workers is None:
            cores = (
                len(os.sched_getaffinity(0))
                if hasattr(os, "sched_getaffinity")
                else (os.cpu_count() or 1)
            )
            workers = min(SERVER_WORKERS, cores)
        if workers < 1:
            return False
        ctx = mp.get_context("fork")
        pairs = [ctx.Pipe(duplex=True) for _ in range(workers)]
        process = ctx.Process(
            target=_server_main, args=([b for _, b in pairs], os.getpid()), daemon=True
        )
        process.start()
        for _, there in pairs:
            there.close()
        _server.update(conns=[a for a, _ in pairs], process=process, owner=os.getpid())
        return True


def server_process() -> Any:
    """The first worker of the figure server this process started (a
    ``multiprocessing.Process``), or None."""
    return _server["process"] if _server["owner"] == os.getpid() else None


def server_running() -> bool:
    """Whether this process owns a live figure server."""
    process = _server["process"]
    return process is not None and _server["owner"] == os.getpid() and process.is_alive()


def stop_server() -> None:
    """Stop the figure server, if this process started one."""
    process, conns = _server["process"], _server["conns"]
    if process is None or _server["owner"] != os.getpid():
        return
    _server.update(conns=None, process=None, owner=None)
    for conn in conns:
        conn.close()  # the other workers see the pipe close and exit
    if process.is_alive():
        process.kill()
    process.join(timeout=5)


class _ServerQueue:
    """Figures sent to the server as they are added; one thread per worker feeds it."""

    def __init__(self, conns: list):
        self.jobs: queue.Queue = queue.Queue()
        self.files: dict[str, dict[str, bytes] | None] = {}
        self.threads = [
            threading.Thread(target=self._feed, args=(conn,), daemon=True) for conn in conns
        ]
        for thread in self.threads:
            thread.start()

    def _feed(self, conn: Any) -> None:
        while True:
            job = self.jobs.get()
            if job is None:
                return
            stem, payload = job
            try:
                conn.send_bytes(payload)
                status, value = pickle.loads(conn.recv_bytes())
            except (EOFError, OSError):
                status, value = "failed", "the figure worker stopped"
            self.files[stem] = value if status == "ok" else None

    def finish(self) -> dict[str, dict[str, bytes] | None]:
        for _ in self.threads:
            self.jobs.put(None)
        for thread in self.threads:
            thread.join()
        return self.files


def portable(value: Any) -> Any:
    """``value`` with every dataclass instance replaced by a ``SimpleNamespace`` of its
    fields and properties (recursively): it unpickles in a figure worker without importing
    the module that defines it (which may load SymPy or SciPy there).  Methods are not
    copied: figure functions read fields and properties only."""
    if isinstance(value, np.ndarray) or value is None or isinstance(value, str | bytes):
        return value
    cls = type(value)
    if dataclasses.is_dataclass(cls):
        out = {f.name: portable(getattr(value, f.name)) for f in dataclasses.fields(value)}
        for klass in reversed(cls.__mro__):
            for name, attribute in vars(klass).items():
                if isinstance(attribute, property):
                    out[name] = portable(getattr(value, name))
        return types.SimpleNamespace(**out)
    if cls in (list, tuple):
        return cls(portable(v) for v in value)
    if cls is dict:
        return {k: portable(v) for k, v in value.items()}
    return value


def _portable_maker(make: Callable[[], Figure]) -> Callable[[], Figure]:
    if not isinstance(make, functools.partial):
        return make
    return functools.partial(
        make.func,
        *(portable(a) for a in make.args),
        **{k: portable(v) for k, v in make.keywords.items()},
    )


_PENDING: list[tuple[str, Callable[[], Figure]]] = []


def _render_one(index: int) -> dict[str, bytes]:
    stem, make = _PENDING[index]
    return figure_files(make(), stem)


class FigureBatch:
    """Figures queued by several callers, then drawn together.

    :func:`render_figures` called inside :func:`deferred_figures` queues its makers
    here and returns the file names with empty contents; :meth:`result` returns the
    files.  With a figure server running (:func:`start_server`), each figure goes to
    it as soon as it is added, so drawing overlaps the rest of the memo; otherwise
    :meth:`start` forks one set of workers for every queued figure, which draw while
    this process goes on (the memo renders its templates meanwhile).
    """

    def __init__(self, workers: int | None = None):
        self.items: list[tuple[str, Callable[[], Figure]]] = []
        self.workers = workers
        self._pool = None
        self._pending = None
        self._server: _ServerQueue | None = None
        if workers is None and server_running():
            self._server = _ServerQueue(_server["conns"])

    def add(self, makers: Mapping[str, Callable[[], Figure]]) -> dict[str, bytes]:
        if self._pool is not None:
            raise RuntimeError("figures were added after the batch started")
        for stem, make in makers.items():
            self.items.append((stem, make))
            if self._server is not None:
                try:
                    payload = pickle.dumps(
                        (stem, _portable_maker(make)), protocol=pickle.HIGHEST_PROTOCOL
                    )
                except (pickle.PicklingError, AttributeError, TypeError):
                    continue  # drawn here by result()
                self._server.jobs.put((stem, payload))
        return {name: b"" for stem in makers for name in figure_names(stem)}

    def start(self) -> None:
        """Fork the workers and hand them every queued figure (no wait; nothing to do
        when the figure server has them)."""
        global _PENDING
        if self._server is not None:
            return
        workers = self.workers
        if workers is None:
            workers = min(len(self.items), os.cpu_count() or 1, 4)
        if self._pool is not None or workers <= 1 or "fork" not in mp.get_all_start_methods():
            return
        _PENDING = self.items
        try:
            self._pool = mp.get_context("fork").Pool(workers)  # workers copy _PENDING now
        finally:
            _PENDING = []
        self._pending = self._pool.map_async(_render_one, range(len(self.items)), chunksize=1)

    def result(self) -> dict[str, bytes]:
        """Every queued figure's files, in the order added (a figure the server could not
        draw, or every figure when no workers were started, is drawn here)."""
        if self._server is not None:
            served = self._server.finish()
            self._server = None
            parts = [served.get(stem) or figure_files(make(), stem) for stem, make in self.items]
        elif self._pending is None:
            parts = [figure_files(make(), stem) for stem, make in self.items]
        else:
            try:
                parts = self._pending.get()
            finally:
                self.close()
        out: dict[str, bytes] = {}
        for part in parts:
            out.update(part)
        return out

    def close(self) -> None:
        if self._server is not None:
            self._server.finish()
            self._server = None
        if self._pool is not None:
            self._pool.terminate()
            self._pool.join()
            self._pool = None


_BATCH: FigureBatch | None = None


@contextmanager
def deferred_figures(workers: int | None = None) -> Iterator[FigureBatch]:
    """Within the block, :func:`render_figures` queues figures on the yielded batch."""
    global _BATCH
    if _BATCH is not None:
        raise RuntimeError("deferred_figures blocks do not nest")
    batch = FigureBatch(workers)
    _BATCH = batch
    try:
        yield batch
    finally:
        _BATCH = None
        batch.close()


def render_figures(
    makers: Mapping[str, Callable[[], Figure]], workers: int | None = None
) -> dict[str, bytes]:
    """Draw and save several figures, in forked worker processes where available.

    ``makers`` maps a file stem to a function returning the figure.  Saving
    is the slow part (text layout, PDF and PNG writers) and the figures are
    independent, so they are drawn in parallel on the machine's cores; the
    result (file name → bytes) is the same as drawing them one by one.
    Inside :func:`deferred_figures` the figures are queued instead and the
    returned files are empty until the batch's :meth:`FigureBatch.result`.
    """
    if _BATCH is not None:
        return _BATCH.add(makers)
    batch = FigureBatch(workers)
    batch.add(makers)
    try:
        batch.start()
        return batch.result()
    finally:
        batch.close()
