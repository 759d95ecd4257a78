"""Figures of the robustness study (matplotlib ``Figure`` objects, no pyplot).

* :func:`loop_magnitude_phase_figure`: Bode plot (magnitude and phase) of
  the loops broken at the plant input, crossovers and margins marked;
* :func:`loop_polar_figure`: Nyquist plot of the same loops, the critical
  point −1 and the unit circle, with a zoomed view near −1;
* :func:`mismatch_pole_figure`: closed-loop poles over the parameter grid
  with the nominal controller and observer poles.

Loops differ by line style and marker as well as colour, so the figures stay
legible in black and white.  Render them with
:func:`symbolic.render.figures.figure_files`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from ..analysis.margins import MarginReport

from .figure_layout import DIMENSIONLESS
from .figures import blank_figure, plain_label, plot_design_poles

__all__ = ["loop_magnitude_phase_figure", "loop_polar_figure", "mismatch_pole_figure"]

#: (colour, line style, marker) per loop, readable in grey scale.
_LOOP_STYLES = (
    ("#000000", "-", "o"),
    ("#1f5fa8", (0, (6, 3)), "s"),
    ("#c0392b", (0, (2, 2)), "^"),
)

#: Largest number of grid poles drawn (a random subset beyond this, always with every unstable one).
MAX_SCATTER = 40_000


def _figure(size) -> Figure:
    return blank_figure(size)


def _unwrapped_phase_deg(response: np.ndarray) -> np.ndarray:
    phase = np.degrees(np.unwrap(np.angle(response)))
    # shift by whole turns so the low-frequency phase lies in (−360°, 0°]
    if phase.size:
        turns = np.ceil(phase[0] / 360.0)
        phase = phase - 360.0 * turns
    return phase


def loop_magnitude_phase_figure(loops: Sequence[MarginReport]) -> Figure:
    """Bode plot of each loop: |L(jω)| in dB and ∠L(jω) in degrees, margins marked.

    Gain crossovers are marked with open circles on the 0 dB line and on the
    phase curve (with the phase margin as a vertical bar to −180°); phase
    crossovers with open diamonds on the −180° lines and on the magnitude
    curve.
    """
    fig = _figure((6.4, 5.6))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.17, top=0.97, hspace=0.1)
    ax_mag, ax_ph = fig.subplots(2, 1, sharex=True)
    marks = [
        w for r in loops for w in (*r.gain_crossovers_rad_s, *r.phase_crossovers_rad_s) if w > 0
    ]
    lo_w = min(marks) / 100 if marks else 0.0
    hi_w = max(marks) * 100 if marks else np.inf
    lows, highs, mags = [], [], []
    for r, (colour, style, _marker) in zip(loops, _LOOP_STYLES):
        w, L = r.frequency, r.response
        ok = np.isfinite(L) & (np.abs(L) > 0) & (w >= lo_w) & (w <= hi_w)
        w, L = w[ok], L[ok]
        if not w.size:
            continue
        mag = 20 * np.log10(np.abs(L))
        phase = _unwrapped_phase_deg(L)
        label = plain_label(r.name)
        ax_mag.semilogx(w, mag, color=colour, linestyle=style, linewidth=1.5, label=label)
        ax_ph.semilogx(w, phase, color=colour, linestyle=style, linewidth=1.5, label=label)
        lows.append(w[0])
        highs.append(w[-1])
        mags.append(mag)
        for wc in r.gain_crossovers_rad_s:
            ph = float(np.interp(np.log(wc), np.log(w), phase))
            ax_mag.plot([wc], [0.0], marker="o", markerfacecolor="none", color=colour, markersize=7)
            ax_ph.plot([wc], [ph], marker="o", markerfacecolor="none", color=colour, markersize=7)
            target = -180.0 + 360.0 * np.round((ph + 180.0) / 360.0)
            ax_ph.plot([wc, wc], [target, ph], color=colour, linewidth=2.2, alpha=0.6)
        for wp in r.phase_crossovers_rad_s:
            if wp <= 0:
                continue
            m = float(np.interp(np.log(wp), np.log(w), mag))
            ax_mag.plot([wp], [m], marker="D", markerfacecolor="none", color=colour, markersize=6)
            ax_mag.plot([wp, wp], [m, 0.0], color=colour, linewidth=2.2, alpha=0.6)
    ax_mag.axhline(0.0, color="#777777", linewidth=0.8, linestyle=(0, (1, 2)))
    if ax_ph.lines:
        lo, hi = ax_ph.get_ylim()
        for k in range(int(np.floor((lo + 180) / 360)), int(np.ceil((hi + 180) / 360)) + 1):
            ax_ph.axhline(-180.0 + 360.0 * k, color="#777777", linewidth=0.8, linestyle=(0, (1, 2)))
        ax_ph.set_ylim(lo, hi)
    if lows:
        ax_ph.set_xlim(min(lows), max(highs))
        allmag = np.concatenate(mags)
        top = max(10.0, float(allmag.max()))
        bottom = min(-10.0, float(allmag.min()))
        pad = 0.05 * (top - bottom)
        ax_mag.set_ylim(bottom - pad, top + pad)
    ax_mag.set_ylabel("|L(jω)| [dB]")
    ax_ph.set_ylabel("∠L(jω) [°]")
    ax_ph.set_xlabel("frequency ω [rad/s]")
    for ax in (ax_mag, ax_ph):
        ax.grid(True, which="both", color="#dddddd", linewidth=0.5)
    text = []
    for r in loops:
        gm_up = "∞" if r.gain_margin_db_upper is None else f"{r.gain_margin_db_upper:.3g} dB"
        gm_lo = "∞" if r.gain_margin_db_lower is None else f"{r.gain_margin_db_lower:.3g} dB"
        pm = "none" if r.phase_margin_deg is None else f"{r.phase_margin_deg:.3g}°"
        text.append(
            plain_label(f"{r.name}: gain may grow {gm_up}, shrink {gm_lo}; phase margin {pm}")
        )
    handles, labels = ax_mag.get_legend_handles_labels()
    fig.legend(
        handles,
        [f"{lab} — {t.split(': ', 1)[1]}" for lab, t in zip(labels, text)],
        loc="lower center",
        ncol=1,
        fontsize=8,
        frameon=False,
    )
    return fig


def _compressed(z: np.ndarray) -> np.ndarray:
    """z with its radius mapped to log10(1 + |z|): the whole curve fits, −1 goes to −log10 2."""
    mag = np.abs(z)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(mag > 0, z * (np.log10(1.0 + mag) / np.where(mag > 0, mag, 1.0)), 0)


def _polar_view(ax, loops: Sequence[MarginReport], compressed: bool, zoom: float) -> None:
    """Limits, title and axis labels of one panel of :func:`loop_polar_figure`."""
    if compressed:
        reach = [0.5]
        for r in loops:
            L = r.response[np.isfinite(r.response)]
            if L.size:
                reach.append(float(np.max(np.abs(_compressed(L)))))
        R = max(reach) * 1.08
        ax.set_xlim(-R, R)
        ax.set_ylim(-R, R)
        ax.set_title("whole curve, radius log10(1 + |L|)", fontsize=8)
        ax.set_xlabel(f"compressed Re L(jω) [{DIMENSIONLESS}]")
        ax.set_ylabel(f"compressed Im L(jω) [{DIMENSIONLESS}]")
    else:
        ax.set_xlim(-1 - zoom, -1 + zoom)
        ax.set_ylim(-zoom, zoom)
        ax.set_title("near −1, true scale", fontsize=8)
        ax.set_xlabel(f"Re L(jω) [{DIMENSIONLESS}]")
        ax.set_ylabel(f"Im L(jω) [{DIMENSIONLESS}]")


def loop_polar_figure(loops: Sequence[MarginReport], zoom: float = 2.0) -> Figure:
    """Nyquist plot of each loop with the critical point −1 and the unit circle.

    Left: the whole curve with its radius compressed to log10(1 + |L|) (so
    curves that run to infinity near a pole on the imaginary axis stay in
    view; the unit circle becomes the circle of radius log10 2); right: the
    true scale in the square of half-width ``zoom`` around −1.  Positive
    frequencies are drawn thick with an arrow in the direction of
    increasing ω, negative ones (the mirror image) thin.
    """
    fig = _figure((6.4, 3.8))
    fig.subplots_adjust(left=0.11, right=0.98, bottom=0.27, top=0.92, wspace=0.32)
    ax_all, ax_zoom = fig.subplots(1, 2)
    theta = np.linspace(0, 2 * np.pi, 361)
    for ax, compressed in ((ax_all, True), (ax_zoom, False)):
        ring = np.exp(1j * theta)
        ring = _compressed(ring) if compressed else ring
        crit = _compressed(np.array([-1.0 + 0j]))[0] if compressed else -1.0
        ax.plot(ring.real, ring.imag, color="#888888", linewidth=0.8, linestyle=(0, (1, 2)))
        ax.axhline(0, color="#bbbbbb", linewidth=0.5)
        ax.axvline(0, color="#bbbbbb", linewidth=0.5)
        for r, (colour, style, _marker) in zip(loops, _LOOP_STYLES):
            L = r.response[np.isfinite(r.response)]
            if not L.size:
                continue
            z = _compressed(L) if compressed else L
            ax.plot(
                z.real,
                z.imag,
                color=colour,
                linestyle=style,
                linewidth=1.5,
                label=plain_label(r.name),
            )
            ax.plot(z.real, -z.imag, color=colour, linestyle=style, linewidth=0.6)
            box = 1.0e9 if compressed else zoom
            inside = np.nonzero((np.abs(L.real + 1) < box) & (np.abs(L.imag) < box))[0]
            near = inside[np.argsort(np.abs(L[inside] + 1))] if inside.size else inside
            if near.size:
                i = int(near[0])
                j = min(i + 1, L.size - 1)
                if j == i:
                    i = max(i - 1, 0)
                ax.annotate(
                    "",
                    xy=(z[j].real, z[j].imag),
                    xytext=(z[i].real, z[i].imag),
                    arrowprops={"arrowstyle": "-|>", "color": colour, "linewidth": 1.2},
                )
        ax.plot(
            [crit.real],
            [0],
            linestyle="none",
            marker="+",
            markersize=12,
            markeredgewidth=2,
            color="#000000",
            label="critical point −1",
        )
        _polar_view(ax, loops, compressed, zoom)
        ax.set_aspect("equal", adjustable="box")
        ax.grid(True, color="#eeeeee", linewidth=0.5)
    handles, labels = ax_zoom.get_legend_handles_labels()
    fig.legend(
        handles + [ax_zoom.lines[0]],
        labels + ["unit circle"],
        loc="lower center",
        ncol=4,
        fontsize=8,
        frameon=False,
    )
    return fig


def mismatch_pole_figure(
    poles: np.ndarray,
    stable: np.ndarray,
    controller: np.ndarray,
    observer: np.ndarray,
    seed: int = 0,
) -> Figure:
    """Closed-loop poles at every grid point (dots), unstable points (triangles), nominal poles.

    Parameters
    ----------
    poles : (P, 2n) complex array
        Eigenvalues of the mismatched loop at each point.
    stable : (P,) bool array
    controller, observer : arrays
        The nominal controller (×) and observer (+) poles (the loop at the nominal point).
    seed : int
        For the reproducible subset drawn when there are more than
        :data:`MAX_SCATTER` poles.
    """
    fig = _figure((6.4, 4.6))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.24, top=0.96)
    ax = fig.add_subplot(1, 1, 1)
    ax.grid(True, color="#dddddd", linewidth=0.5)
    poles = np.atleast_2d(poles)
    stable = np.asarray(stable, dtype=bool)
    good = poles[stable].ravel()
    bad = poles[~stable].ravel()
    if good.size > MAX_SCATTER:
        rng = np.random.default_rng(seed)
        good = good[rng.choice(good.size, MAX_SCATTER, replace=False)]
    ax.axvline(0, color="#000000", linewidth=0.8)
    ax.axhline(0, color="#000000", linewidth=0.4)
    ax.plot(
        good.real,
        good.imag,
        linestyle="none",
        marker=".",
        markersize=2.5,
        color="#888888",
        label="poles over the parameter grid",
    )
    if bad.size:
        ax.plot(
            bad.real,
            bad.imag,
            linestyle="none",
            marker="^",
            markersize=4,
            markerfacecolor="none",
            color="#c0392b",
            label="poles at unstable points",
        )
    plot_design_poles(
        ax,
        controller,
        observer,
        controller_label="nominal controller poles (A − BK)",
        observer_label="nominal observer poles (A − LC)",
    )
    allp = np.concatenate([poles.ravel(), controller, observer])
    allp = allp[np.isfinite(allp)]
    span = max(1.0, float(np.max(np.abs(allp)))) * 1.1 if allp.size else 1.0
    right = max(0.1 * span, float(np.max(allp.real)) * 1.1 if allp.size else 0.0)
    ax.set_xlim(-span, right)
    ax.set_ylim(-0.75 * span, 0.75 * span)
    ax.set_xlabel("real part [1/s]")
    ax.set_ylabel("imaginary part [rad/s]")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=2, fontsize=8)
    return fig
