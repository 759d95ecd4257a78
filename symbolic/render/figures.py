"""Figures for the memo (matplotlib, no screen needed), and the processes that draw them.

Each function takes finished result objects and returns a matplotlib
``Figure``; :func:`figure_files` turns a figure into a vector PDF (for TeX)
and a PNG (for Markdown).  Lines differ by style as well as colour so the
figures stay legible when printed in black and white.

Drawing is the memo's largest cost, and importing matplotlib and drawing a first
figure (fonts, backends) costs as much again in each fresh process.  So the
``memo`` command starts a *figure server* at once (:func:`start_server`): one
process imports matplotlib and draws a throw-away figure while the main process
derives and simulates, then forks the other workers, which start warm.  Figures
are sent to it as soon as a section has them (:func:`render_figures` inside
:func:`deferred_figures`) as pickled makers: ``functools.partial`` of this
module's (or :mod:`symbolic.render.robust_figures`', :mod:`symbolic.render.extended_figures`')
functions over plain data.  matplotlib is imported here only inside functions,
so the main process of a memo never loads it.  Without a server (library use,
tests) or for a maker that does not pickle, figures are drawn by forked workers
or in this process, with the same bytes.
"""

from __future__ import annotations

import dataclasses
import functools
import io
import multiprocessing as mp
import os
import pickle
import queue
import re
import sys
import threading
import types
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "figure_files",
    "step_response_figure",
    "estimation_error_figure",
    "control_effort_figure",
    "pole_map_figure",
    "observer_study_figure",
    "render_figures",
    "deferred_figures",
    "figure_names",
    "FigureBatch",
    "blank_figure",
    "start_server",
    "stop_server",
]

#: (colour, line style) per case; readable in grey scale too.
_STYLES = {
    "state_feedback": ("#000000", "-"),
    "observer_matched": ("#1f5fa8", (0, (6, 3))),
    "observer_mismatched": ("#c0392b", (0, (2, 2))),
    "limited": ("#6a3d9a", (0, (6, 2, 1, 2))),
}


def _style(r) -> tuple[str, object]:
    key = "limited" if getattr(r, "saturated", False) else r.slug
    return _STYLES.get(key, ("#555555", "-"))


def _name(r) -> str:
    return plain_label(r.name + (" (limited)" if getattr(r, "saturated", False) else ""))


_WIDTH = (6.4, 3.4)


def blank_figure(size) -> Figure:
    """A matplotlib ``Figure`` of ``size`` inches at 100 dpi on an Agg canvas (no pyplot)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, dpi=100)
    FigureCanvasAgg(fig)
    return fig


def _new(size=_WIDTH) -> tuple[Figure, Axes]:
    fig = blank_figure(size)
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.15, top=0.96)
    ax = fig.add_subplot(1, 1, 1)
    ax.grid(True, color="#cccccc", linewidth=0.6)
    return fig, ax


def _label(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def plain_label(text: str) -> str:
    """Keep matplotlib from reading $...$ in user text as mathtext."""
    return text.replace("$", r"\$")


def plot_design_poles(
    ax: Axes,
    controller: np.ndarray,
    observer: np.ndarray,
    *,
    controller_label: str = "controller poles (A − BK)",
    observer_label: str = "observer poles (A − LC)",
    observer_colour: str = "#c0392b",
    observer_size: float = 7,
) -> None:
    """Controller poles as crosses and observer poles as open circles (shared by the maps)."""
    ax.plot(
        controller.real,
        controller.imag,
        linestyle="none",
        marker="x",
        markersize=9,
        markeredgewidth=2,
        color="#000000",
        label=controller_label,
    )
    ax.plot(
        observer.real,
        observer.imag,
        linestyle="none",
        marker="o",
        markersize=observer_size,
        markerfacecolor="none",
        markeredgewidth=1.5,
        color=observer_colour,
        label=observer_label,
    )


def step_response_figure(
    responses: Sequence, output_name: str, output_unit: str, reference: float
) -> Figure:
    """Tracked output of each simulated case against time, with the reference."""
    fig, ax = _new()
    for r in responses:
        colour, style = _style(r)
        ax.plot(
            r.time, r.tracked_output, color=colour, linestyle=style, linewidth=1.6, label=_name(r)
        )
    t = responses[0].time
    ax.axhline(reference, color="#888888", linewidth=0.8, linestyle=(0, (1, 3)), label="reference")
    ax.set_xlabel("time [s]")
    ax.set_ylabel(plain_label(_label(output_name, output_unit)))
    ax.set_xlim(t[0], t[-1])
    ax.legend(loc="best", fontsize=8, frameon=True)
    return fig


def estimation_error_figure(responses: Sequence) -> Figure:
    """Norm of the estimation error x − x̂ on a log scale (observer cases only)."""
    fig, ax = _new()
    plotted = False
    for r in responses:
        e = getattr(r, "estimation_error_norm", None)
        if e is None or not np.any(e > 0):
            continue
        colour, style = _style(r)
        positive = np.where(e > 0, e, np.nan)
        ax.semilogy(r.time, positive, color=colour, linestyle=style, linewidth=1.6, label=_name(r))
        e0 = e[0]
        if e0 > 0:
            ax.axhline(
                0.02 * e0,
                color="#888888",
                linewidth=0.8,
                linestyle=(0, (1, 3)),
                label="2 % of initial error",
            )
        plotted = True
    ax.set_xlabel("time [s]")
    ax.set_ylabel("estimation error norm ‖x − x̂‖")
    if plotted:
        ax.legend(loc="best", fontsize=8)
    else:
        ax.text(0.5, 0.5, "no initial estimation error", transform=ax.transAxes, ha="center")
    return fig


def control_effort_figure(
    responses: Sequence, input_name: str, input_unit: str, u_max: float | None
) -> Figure:
    """Control signal of each case, with the actuator limit drawn when given."""
    fig, ax = _new()
    for r in responses:
        colour, style = _style(r)
        u = np.asarray(r.control)
        ax.plot(
            r.time,
            u[:, 0] if u.ndim == 2 else u,
            color=colour,
            linestyle=style,
            linewidth=1.6,
            label=_name(r),
        )
    if u_max is not None:
        for sign in (1, -1):
            ax.axhline(
                sign * u_max,
                color="#000000",
                linewidth=1.0,
                linestyle=(0, (4, 1, 1, 1)),
                label="actuator limit" if sign == 1 else None,
            )
    ax.set_xlabel("time [s]")
    ax.set_ylabel(plain_label(_label(input_name, input_unit)))
    ax.set_xlim(responses[0].time[0], responses[0].time[-1])
    ax.legend(loc="best", fontsize=8)
    return fig


def pole_map_figure(
    controller: np.ndarray, observer: np.ndarray, region=None, plant: np.ndarray | None = None
) -> Figure:
    """Controller and observer poles in the s-plane with the region that meets the specs.

    ``region`` has ``min_damping_ratio``, ``min_real_part``,
    ``min_natural_frequency`` (see :class:`symbolic.derivation.specs.SpecRegion`).
    """
    fig, ax = _new((6.4, 5.0))
    fig.subplots_adjust(bottom=0.27)
    allp = np.concatenate([controller, observer] + ([plant] if plant is not None else []))
    span = max(1.0, float(np.max(np.abs(allp)))) * 1.15
    left = -span
    ax.set_xlim(left, 0.12 * span)
    ax.set_ylim(-0.75 * span, 0.75 * span)
    if region is not None:
        zeta = region.min_damping_ratio
        sigma = region.min_real_part
        wn = region.min_natural_frequency
        # the admissible set: Re ≤ −σ, inside the damping wedge, outside |s| = ωn
        x = np.linspace(left, 0, 400)
        y = np.linspace(-0.75 * span, 0.75 * span, 400)
        X, Y = np.meshgrid(x, y)
        S = X + 1j * Y
        ok = (X <= -sigma) & (np.abs(S) >= wn)
        if zeta > 0:
            ok &= -X >= zeta * np.abs(S)
        ax.contourf(X, Y, ok.astype(float), levels=[0.5, 1.5], colors=["#d9ead3"], alpha=0.8)
        ax.contour(X, Y, ok.astype(float), levels=[0.5], colors=["#2e7d32"], linewidths=0.8)
        ax.plot([], [], color="#2e7d32", linewidth=6, alpha=0.4, label="meets the specifications")
    ax.axvline(0, color="#000000", linewidth=0.8)
    ax.axhline(0, color="#000000", linewidth=0.5)
    if plant is not None:
        ax.plot(
            plant.real,
            plant.imag,
            linestyle="none",
            marker="s",
            markersize=7,
            markerfacecolor="none",
            markeredgecolor="#555555",
            label="open-loop plant poles",
        )
    plot_design_poles(ax, controller, observer)
    ax.set_xlabel("real part [1/s]")
    ax.set_ylabel("imaginary part [rad/s]")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, fontsize=8)
    return fig


def observer_study_figure(
    factors: np.ndarray,
    overshoot: np.ndarray,
    settling: np.ndarray,
    peak_u: np.ndarray,
    input_name: str,
    input_unit: str,
) -> Figure:
    """Overshoot, settling time and peak control against the observer speed factor."""
    fig = blank_figure((6.4, 5.2))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.1, top=0.97, hspace=0.12)
    axes = fig.subplots(3, 1, sharex=True)
    for ax, values, label, marker in (
        (axes[0], overshoot, "overshoot [%]", "o"),
        (axes[1], settling, "settling time 2 % [s]", "s"),
        (
            axes[2],
            peak_u,
            plain_label(f"peak |{input_name}|" + (f" [{input_unit}]" if input_unit else "")),
            "^",
        ),
    ):
        ax.plot(factors, values, color="#000000", marker=marker, markersize=4, linewidth=1.2)
        ax.set_ylabel(label, fontsize=8)
        ax.grid(True, color="#cccccc", linewidth=0.6)
    axes[-1].set_xlabel("observer speed factor (observer poles / controller poles)")
    axes[-1].set_xscale("log")
    return fig


_SUPERSCRIPT = str.maketrans(
    "-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079"
)
#: The labels matplotlib's log-axis formatter writes: $\mathdefault{10^{-2}}$ and
#: $\mathdefault{2\times10^{-1}}$ (minor ticks of a short range).
_LOG_LABEL = re.compile(r"^\$\\mathdefault\{(?:([0-9.]+)\\times\s*)?10\^\{(-?[0-9]+)\}\}\$$")


def _unicode_label(label: str) -> str:
    """10⁻² for $\\mathdefault{10^{-2}}$: plain text, set without the mathtext parser."""
    match = _LOG_LABEL.match(label)
    if match is None:
        return label  # anything else stays as matplotlib wrote it
    factor, exponent = match.groups()
    power = "10" + exponent.translate(_SUPERSCRIPT)
    return f"{factor}\u00d7{power}" if factor else power


@functools.cache
def _plain_log_labels_class() -> type:
    from matplotlib.ticker import Formatter

    class PlainLogLabels(Formatter):
        """The labels of a log-axis formatter, as plain Unicode text instead of mathtext.

        Parsing mathtext took about a fifth of the time of saving the memo's figures
        (measured: the log axes of the estimation-error, observer-study and Bode figures);
        which ticks get a label is still decided by matplotlib's formatter.
        """

        def __init__(self, inner: Formatter):
            self.inner = inner

        def set_axis(self, axis) -> None:
            super().set_axis(axis)
            self.inner.set_axis(axis)

        def set_locs(self, locs) -> None:
            self.inner.set_locs(locs)

        def __call__(self, x, pos=None) -> str:
            return _unicode_label(self.inner(x, pos))

    return PlainLogLabels


def _plain_log_labels(fig: Figure) -> None:
    from matplotlib.ticker import LogFormatterSciNotation

    plain = _plain_log_labels_class()
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            if isinstance(axis.get_major_formatter(), LogFormatterSciNotation):
                axis.set_major_formatter(plain(axis.get_major_formatter()))
            if isinstance(axis.get_minor_formatter(), LogFormatterSciNotation):
                axis.set_minor_formatter(plain(axis.get_minor_formatter()))


def figure_files(fig: Figure, stem: str) -> dict[str, bytes]:
    """Render a figure as ``stem.pdf`` (vector, for TeX) and ``stem.png`` (for Markdown).

    Metadata that changes between runs (creation date, software version) is
    left out so the same design gives the same files.  Log-axis tick labels are
    set as plain text (``10⁻²``) rather than mathtext, which is slow to lay out.
    """
    _plain_log_labels(fig)
    out = {}
    buf = io.BytesIO()
    fig.savefig(
        buf, format="pdf", metadata={"CreationDate": None, "Creator": None, "Producer": None}
    )
    out[f"{stem}.pdf"] = buf.getvalue()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=150, metadata={"Software": None})
    out[f"{stem}.png"] = buf.getvalue()
    return out


# --------------------------------------------------------------------------------------------
# The figure server: warm workers started with the memo command
# --------------------------------------------------------------------------------------------
#: Workers of the figure server: one per core, at most this many (a memo has 9 to 12 figures).
SERVER_WORKERS = 4

_server: dict[str, Any] = {"conns": None, "process": None, "owner": None}
_server_lock = threading.Lock()


def _warm_up() -> None:
    """Draw and save a throw-away figure: imports the backends and loads the fonts."""
    fig, ax = _new()
    ax.semilogy([1.0, 2.0], [1e-3, 1.0], label="warm-up")
    ax.set_xlabel("t [s]")
    ax.legend()
    figure_files(fig, "warm-up")


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
        _warm_up()
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


def _portable(value: Any) -> Any:
    """``value`` with every dataclass instance replaced by a ``SimpleNamespace`` of its
    fields and properties (recursively): it unpickles in a figure worker without importing
    the module that defines it (which may load SymPy or SciPy there).  Methods are not
    copied: figure functions read fields and properties only."""
    if isinstance(value, np.ndarray) or value is None or isinstance(value, str | bytes):
        return value
    cls = type(value)
    if dataclasses.is_dataclass(cls):
        out = {f.name: _portable(getattr(value, f.name)) for f in dataclasses.fields(value)}
        for klass in reversed(cls.__mro__):
            for name, attribute in vars(klass).items():
                if isinstance(attribute, property):
                    out[name] = _portable(getattr(value, name))
        return types.SimpleNamespace(**out)
    if cls in (list, tuple):
        return cls(_portable(v) for v in value)
    if cls is dict:
        return {k: _portable(v) for k, v in value.items()}
    return value


def _portable_maker(make: Callable[[], Figure]) -> Callable[[], Figure]:
    if not isinstance(make, functools.partial):
        return make
    return functools.partial(
        make.func,
        *(_portable(a) for a in make.args),
        **{k: _portable(v) for k, v in make.keywords.items()},
    )


_PENDING: list[tuple[str, Callable[[], Figure]]] = []


def _render_one(index: int) -> dict[str, bytes]:
    stem, make = _PENDING[index]
    return figure_files(make(), stem)


def figure_names(stem: str) -> list[str]:
    """The file names :func:`figure_files` gives a figure: ``stem.pdf`` and ``stem.png``."""
    return [f"{stem}.pdf", f"{stem}.png"]


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
