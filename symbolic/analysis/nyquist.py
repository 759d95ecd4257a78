"""The Nyquist criterion on a loop broken at the plant input: the winding number along the contour.

The number of counter-clockwise encirclements of −1 by L(jω), ω from −∞ to ∞ (poles on the
imaginary axis indented to the right by small semicircles), equals P − Z, with P the
open-loop poles and Z the closed-loop poles in the open right half-plane.  Z comes from the
closed-loop eigenvalues, P from the eigenvalues of A_L, and the encirclements from the
winding number of 1 + L(s) along the contour.

References
----------
.. [1] H. Nyquist, "Regeneration theory", *Bell System Technical Journal*
   11(1):126–147, 1932. doi:10.1002/j.1538-7305.1932.tb02344.x
.. [2] G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control of
   Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 6.3 (the Nyquist
   criterion, with poles on the imaginary axis indented).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .broken_loop import (
    AXIS_TOLERANCE,
    BrokenLoop,
    axis_poles,
    closed_loop_matrix,
    frequency_grid,
    loop_response,
    spectral_scale,
)

__all__ = ["EncirclementCount", "count_encirclements"]

#: A piece of the contour: ("line", 0, 0) along the imaginary axis, or ("arc", centre, radius)
#: around a pole on the axis at j·centre.
Segment = tuple[str, float, float]


@dataclass(frozen=True)
class EncirclementCount:
    """The Nyquist criterion checked on one loop.

    ``counterclockwise`` encirclements of −1 by L(jω), ω from −∞ to ∞, must
    equal ``open_loop_unstable − closed_loop_unstable`` (P − Z).
    """

    counterclockwise: int
    winding: float  # total angle / 2π, before rounding
    open_loop_unstable: int  # P
    imaginary_axis_poles: int  # indented around
    closed_loop_unstable: int  # Z, from the closed-loop eigenvalues
    closed_loop_marginal: bool
    consistent: bool

    @property
    def clockwise(self) -> int:
        """The clockwise count N of the usual statement Z = N + P."""
        return -self.counterclockwise


def _segment_points(segment: Segment, params: np.ndarray) -> np.ndarray:
    """The points s of one contour segment at its parameters (ω on a line, angle on an arc)."""
    kind, centre, radius = segment
    if kind == "line":
        return 1j * params
    return 1j * centre + radius * np.exp(1j * params)


def _phase_steps(values: np.ndarray) -> np.ndarray:
    """Phase differences between neighbouring points, wrapped to [−π, π)."""
    ang = np.angle(values)
    return (np.diff(ang) + np.pi) % (2 * np.pi) - np.pi


def count_encirclements(loop: BrokenLoop, k: float = 1.0) -> EncirclementCount:
    """Encirclements of −1/k by L(s) along the Nyquist contour, with the criterion checked.

    The contour runs up the imaginary axis from −jW to +jW (W large enough
    that |L| < 1e-3 there, so the large semicircle adds no winding) and
    passes each open-loop pole on the axis by a semicircle of small radius
    to its right, so those poles are not counted in P.  The winding number
    of 1 + k L(s) along it is accumulated from wrapped phase steps, with
    points added wherever a step exceeds π/4.

    References: H. Nyquist, *Bell System Technical Journal* 11(1):126–147,
    1932; Franklin, Powell and Emami-Naeini, *Feedback Control of Dynamic
    Systems*, 7th ed., Sec. 6.3 (indentation around poles on the axis).
    """
    poles = np.linalg.eigvals(loop.A)
    scale = spectral_scale(poles)
    tol = AXIS_TOLERANCE * scale
    P = int(np.sum(poles.real > tol))
    closed = np.linalg.eigvals(closed_loop_matrix(loop, k))
    cscale = spectral_scale(closed)
    Z = int(np.sum(closed.real > 1e-10 * cscale))
    marginal = bool(np.any(np.abs(closed.real) <= 1e-10 * cscale))
    axis = axis_poles(poles)
    centres, radii = _indentations(axis, np.concatenate([poles, closed]), tol, scale)
    segments, params = _contour(frequency_grid(loop), centres, radii)

    def F(z: np.ndarray) -> np.ndarray:
        return 1.0 + k * loop_response(loop, z)

    total = _winding_angle(F, segments, params)
    if total is None or marginal:
        # a closed-loop pole on the contour: the winding number is not defined
        return EncirclementCount(0, math.nan, P, int(axis.size), Z, marginal, False)
    winding = total / (2 * np.pi)
    ccw = int(round(winding))
    consistent = abs(winding - ccw) < 0.05 and ccw == P - Z
    return EncirclementCount(ccw, winding, P, int(axis.size), Z, marginal, bool(consistent))


def _indentations(
    axis: np.ndarray, others: np.ndarray, tol: float, scale: float
) -> tuple[list[float], list[float]]:
    """Centres (imaginary parts, clustered) and radii of the semicircles around the axis poles.

    Each radius is small against the distance to the nearest other open- or closed-loop pole.
    """
    centres: list[float] = []
    for w in sorted(axis.imag):
        if not centres or abs(w - centres[-1]) > tol:
            centres.append(float(w))
    radii = []
    for c in centres:
        dist = np.abs(others - 1j * c)
        dist = dist[dist > tol * 10]
        nearest = float(dist.min()) if dist.size else scale
        radii.append(min(1e-3 * nearest, 1e-4 * scale))
    return centres, radii


def _contour(
    grid: np.ndarray, centres: list[float], radii: list[float]
) -> tuple[list[Segment], list[np.ndarray]]:
    """The contour from −jW to +jW as segments: lines between indentations, arcs around axis poles."""
    W = float(grid[-1])
    base = np.concatenate([-grid[::-1], [0.0], grid])
    segments: list[Segment] = []
    params: list[np.ndarray] = []
    start = -W
    for c, r in zip(centres, radii):
        a, b = start, c - r
        if b > a:
            inner = base[(base > a) & (base < b)]
            segments.append(("line", 0.0, 0.0))
            params.append(np.concatenate([[a], inner, [b]]))
        segments.append(("arc", c, r))
        params.append(np.linspace(-np.pi / 2, np.pi / 2, 61))
        start = c + r
    inner = base[(base > start) & (base < W)]
    segments.append(("line", 0.0, 0.0))
    params.append(np.concatenate([[start], inner, [W]]))
    return segments, params


def _winding_angle(
    F: Callable[[np.ndarray], np.ndarray], segments: list[Segment], params: list[np.ndarray]
) -> float | None:
    """The total phase change of F along the closed contour; None where F is 0 or not finite.

    Points are added wherever a phase step exceeds π/4; the contour is closed through the
    large semicircle (|L| < 1e-3 there: no winding).
    """
    total = 0.0
    last_value = None
    first_value = None
    for seg, par in zip(segments, params):
        values = _refined_values(F, seg, np.asarray(par, dtype=float))
        if not np.all(np.isfinite(values) & (values != 0)):
            return None
        if first_value is None:
            first_value = values[0]
        if last_value is not None:
            total += float(_phase_steps(np.array([last_value, values[0]]))[0])
        total += float(np.sum(_phase_steps(values)))
        last_value = values[-1]
    if first_value is None:
        return None
    return total + float(_phase_steps(np.array([last_value, first_value]))[0])


def _refined_values(F: Callable[[np.ndarray], np.ndarray], seg: Segment, par: np.ndarray):
    """F along one segment, with points added until no phase step exceeds π/4."""
    values = F(_segment_points(seg, par))
    for _ in range(40):
        steps = np.abs(_phase_steps(values))
        bad = np.nonzero(~(steps <= np.pi / 4))[0]
        if bad.size == 0 or par.size > 2_000_000:
            break
        mids = 0.5 * (par[bad] + par[bad + 1])
        mids = mids[(mids > par[bad]) & (mids < par[bad + 1])]
        if mids.size == 0:
            break
        new_vals = F(_segment_points(seg, mids))
        par = np.concatenate([par, mids])
        values = np.concatenate([values, new_vals])
        order = np.argsort(par, kind="stable")
        par, values = par[order], values[order]
    return values
