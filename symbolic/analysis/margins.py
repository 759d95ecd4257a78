"""Stability margins of a single-input loop broken at the plant input.

Two loops are studied for every single-input design, side by side:

* **state feedback with the true state**: the loop transfer function is
  L(s) = K (sI − A)⁻¹ B (realisation (A, B, K, 0));
* **the observer-based compensator**: L(s) = C(s) G(s) with the plant
  G(s) = C (sI − A)⁻¹ B + D and the compensator C(s) = K (sI − F)⁻¹ L,
  F = A − BK − LC + LDK, so that u = −C(s) y.  The series connection has
  the realisation::

      A_L = [[A, 0], [L C, F]],  B_L = [[B], [L D]],  C_L = [0, K],  D_L = 0

  (plant state first, then the compensator state; the signal injected at
  the broken plant input drives the plant and, through the feedthrough D,
  the measurement the observer sees).

The loop is closed as v = −k w around the realisation (k = 1 is the design);
for a strictly proper loop the closed-loop matrix is A_L − k B_L C_L, and in
general A_L − k B_L (1 + k D_L)⁻¹ C_L.

What is computed
----------------
Gain margins as a range (k_low, k_high) of loop-gain factors for which the
closed loop is stable.  Candidates come from the frequency response: the
loop's characteristic polynomial det(sI − A_L + k B_L C_L) has a root on the
imaginary axis at s = jω exactly when 1 + k L(jω) = 0, i.e. where L(jω) is
real and negative (a phase crossover, or ω = 0), with k = −1/L(jω).  Each
candidate is then confirmed by the eigenvalues of the closed loop (the
definitive check), and a scan of k over 16 decades with bisection finds any
stability change the frequency sweep missed.  The upper gain margin is
20 log10(k_high) dB (the loop gain may grow by this much), the lower one
20 log10(1/k_low) dB (the loop gain may shrink by this much); either is
``None`` when no such limit exists.

Phase margin at each gain crossover ω_c (|L(jω_c)| = 1):
PM = ∠L(jω_c) + 180°, wrapped to (−180°, 180°]; the smallest is reported.

Delay margin: a delay τ in the loop multiplies L(jω) by e^(−jωτ), a pure
phase lag of ωτ at unchanged magnitude, so a root reaches the imaginary
axis first at a gain crossover, when ω_c τ = ∠L(jω_c) + π (mod 2π).  The
delay margin is min over the gain crossovers of ((∠L(jω_c) + π) mod 2π)/ω_c
(which is PM/ω_c, PM in radians, when the PM is positive).

The Nyquist criterion is verified on every loop: the number of
counter-clockwise encirclements of −1 by L(jω), ω from −∞ to ∞ (poles on
the imaginary axis indented to the right by small semicircles), equals
P − Z, with P the open-loop poles and Z the closed-loop poles in the open
right half-plane.  Z comes from the closed-loop eigenvalues, P from the
eigenvalues of A_L, and the encirclements from the winding number of
1 + L(s) along the contour.

Caution: margins describe the linear model only.  Before a loop built from
these gains drives a machine that moves, heats or flies, test it on the real
plant with reduced limits and an independent emergency stop; actuator
saturation, sampling, sensor noise and unmodelled dynamics all erode these
margins.

References
----------
.. [1] H. Nyquist, "Regeneration theory", *Bell System Technical Journal*
   11(1):126–147, 1932. doi:10.1002/j.1538-7305.1932.tb02344.x
.. [2] H. W. Bode, *Network Analysis and Feedback Amplifier Design*,
   Van Nostrand, 1945, Ch. 8 (gain and phase margins).
.. [3] G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control of
   Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 6.3 (the Nyquist
   criterion, with poles on the imaginary axis indented) and Sec. 6.4
   (gain and phase margins).
.. [4] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall,
   2010, Sec. 7-5 and 7-6 (Nyquist criterion; relative stability).
.. [5] J. C. Doyle, "Guaranteed margins for LQG regulators", *IEEE
   Transactions on Automatic Control* 23(4):756–757, 1978.
   doi:10.1109/TAC.1978.1101812 (why an observer-based loop can have far
   smaller margins than state feedback with the true state).
.. [6] R. P. Brent, *Algorithms for Minimization without Derivatives*,
   Prentice Hall, 1973, Ch. 4 (the root finder of ``scipy.optimize.brentq``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from ..derivation.checks import eigenvalue_check
from ..derivation.systems import frequency_response
from ..model.results import Check, Derivation

__all__ = [
    "BrokenLoop",
    "EncirclementCount",
    "MarginComparison",
    "MarginReport",
    "broken_loop_margins",
    "closed_loop_matrix",
    "compare_margins",
    "count_encirclements",
    "frequency_grid",
    "is_stable",
    "loop_response",
    "observer_loop",
    "state_feedback_loop",
]

#: Points per decade of the frequency grid before refinement.
POINTS_PER_DECADE = 120
#: The gain scan covers k from 10**-SCAN_DECADES to 10**SCAN_DECADES.
SCAN_DECADES = 8
#: Points per decade of the gain scan.
SCAN_PER_DECADE = 10
#: Relative step on either side of a critical gain for the eigenvalue cross-check.
GAIN_PROBE = 1e-6
#: Eigenvalues with |Re| below this times max(1, spectral radius) count as on the imaginary axis.
AXIS_TOLERANCE = 1e-6
#: Relative tolerance of the frequency response against scipy.signal.freqresp.
FREQRESP_TOLERANCE = 1e-8


# --------------------------------------------------------------------------
# Loops
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class BrokenLoop:
    """A single-input, single-output loop transfer function L(s) as a realisation.

    L(s) = C (sI − A)⁻¹ B + D, closed by negative feedback v = −k w.
    """

    name: str
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    description: str = ""

    @property
    def order(self) -> int:
        return int(self.A.shape[0])


def _as_float(M, shape=None) -> np.ndarray:
    out = np.array(M, dtype=float, copy=True)
    if shape is not None:
        out = out.reshape(shape)
    return out


def state_feedback_loop(A: np.ndarray, B: np.ndarray, K: np.ndarray) -> BrokenLoop:
    """The loop K (sI − A)⁻¹ B: state feedback with the true state, broken at the input.

    Parameters
    ----------
    A : (n, n) array
    B : (n, 1) array
    K : (1, n) array

    Returns
    -------
    BrokenLoop
        Realisation (A, B, K, 0).

    Examples
    --------
    >>> import numpy as np
    >>> loop = state_feedback_loop(np.array([[0., 1.], [0., 0.]]), np.array([[0.], [1.]]),
    ...                            np.array([[8., 4.]]))
    >>> np.sort_complex(np.linalg.eigvals(closed_loop_matrix(loop, 1.0)))
    array([-2.-2.j, -2.+2.j])
    """
    A = _as_float(A)
    n = A.shape[0]
    B = _as_float(B, (n, -1))
    K = _as_float(K, (-1, n))
    if B.shape[1] != 1 or K.shape[0] != 1:
        raise ValueError("the loop broken at the plant input needs a single input")
    return BrokenLoop(
        "state feedback",
        A,
        B,
        K,
        np.zeros((1, 1)),
        "K (sI − A)⁻¹ B: state feedback with the true state",
    )


def observer_loop(
    A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray, K: np.ndarray, L: np.ndarray
) -> BrokenLoop:
    """The loop C(s) G(s) of the observer-based compensator, broken at the plant input.

    G(s) = C (sI − A)⁻¹ B + D and C(s) = K (sI − F)⁻¹ L with
    F = A − BK − LC + LDK (so u = −C(s) y).  The series connection
    (plant first) has the realisation
    A_L = [[A, 0], [L C, F]], B_L = [[B], [L D]], C_L = [0, K], D_L = 0.

    Parameters
    ----------
    A, B, C, D : arrays
        The plant (single input; any number of outputs).
    K : (1, n) array
    L : (n, p) array

    Returns
    -------
    BrokenLoop

    Notes
    -----
    Closing this loop with k = 1 gives [[A, −BK], [LC, A − BK − LC]], whose
    eigenvalues are the controller and observer poles (the separation
    principle; D. G. Luenberger, "An introduction to observers", *IEEE
    Trans. Automatic Control* 16(6):596–602, 1971).
    """
    A = _as_float(A)
    n = A.shape[0]
    B = _as_float(B, (n, -1))
    C = _as_float(C, (-1, n))
    p = C.shape[0]
    D = _as_float(D, (p, B.shape[1]))
    K = _as_float(K, (-1, n))
    L = _as_float(L, (n, p))
    if B.shape[1] != 1 or K.shape[0] != 1:
        raise ValueError("the loop broken at the plant input needs a single input")
    F = A - B @ K - L @ C + L @ D @ K
    AL = np.block([[A, np.zeros((n, n))], [L @ C, F]])
    BL = np.vstack([B, L @ D])
    CL = np.hstack([np.zeros((1, n)), K])
    return BrokenLoop(
        "observer-based",
        AL,
        BL,
        CL,
        np.zeros((1, 1)),
        "C(s) G(s): observer-based compensator K (sI − F)⁻¹ L in series with the plant",
    )


def loop_response(loop: BrokenLoop, s: np.ndarray | complex) -> np.ndarray:
    """L(s) = C (sI − A)⁻¹ B + D at complex points s (vectorised; s = jω for a frequency response).

    Points at an eigenvalue of A give ``inf``.
    """
    s_arr = np.atleast_1d(np.asarray(s, dtype=complex))
    n = loop.order
    out = np.empty(s_arr.shape, dtype=complex)
    eye = np.eye(n)
    flat = s_arr.ravel()
    res = np.empty(flat.size, dtype=complex)
    step = 4096
    for start in range(0, flat.size, step):
        chunk = flat[start : start + step]
        M = chunk[:, None, None] * eye[None] - loop.A[None]
        rhs = np.broadcast_to(loop.B.astype(complex), (chunk.size, n, 1))
        try:
            x = np.linalg.solve(M, rhs)
            res[start : start + step] = (loop.C @ x)[:, 0, 0] + loop.D[0, 0]
        except np.linalg.LinAlgError:
            for i, z in enumerate(chunk):
                try:
                    xi = np.linalg.solve(z * eye - loop.A, loop.B.astype(complex))
                    res[start + i] = (loop.C @ xi)[0, 0] + loop.D[0, 0]
                except np.linalg.LinAlgError:
                    res[start + i] = complex(np.inf, 0.0)
    out[...] = res.reshape(s_arr.shape)
    return out if np.ndim(s) else out[0]


def closed_loop_matrix(loop: BrokenLoop, k: float) -> np.ndarray:
    """State matrix of the loop closed by v = −k w: A − k B (1 + k D)⁻¹ C."""
    d = float(loop.D[0, 0])
    return loop.A - (k / (1.0 + k * d)) * (loop.B @ loop.C)


def _scale(eigs: np.ndarray) -> float:
    return max(1.0, float(np.max(np.abs(eigs)))) if eigs.size else 1.0


def is_stable(M: np.ndarray) -> bool:
    """True when every eigenvalue of M has a negative real part (asymptotic stability).

    Real parts within 1e-10·max(1, spectral radius) of zero count as not stable.
    """
    eig = np.linalg.eigvals(M)
    if not np.all(np.isfinite(eig)):
        return False
    return bool(np.max(eig.real) < -1e-10 * _scale(eig)) if eig.size else True


def _stable_many(loop: BrokenLoop, ks: np.ndarray) -> np.ndarray:
    d = float(loop.D[0, 0])
    BC = loop.B @ loop.C
    factors = ks / (1.0 + ks * d)
    mats = loop.A[None] - factors[:, None, None] * BC[None]
    eig = np.linalg.eigvals(mats)
    radius = np.maximum(1.0, np.max(np.abs(eig), axis=1))
    return np.max(eig.real, axis=1) < -1e-10 * radius


# --------------------------------------------------------------------------
# Frequency grid
# --------------------------------------------------------------------------
def _axis_poles(eigs: np.ndarray) -> np.ndarray:
    """Eigenvalues on the imaginary axis (within AXIS_TOLERANCE, relative)."""
    tol = AXIS_TOLERANCE * _scale(eigs)
    return eigs[np.abs(eigs.real) <= tol]


def frequency_grid(loop: BrokenLoop, points_per_decade: int = POINTS_PER_DECADE) -> np.ndarray:
    """A logarithmic grid of positive frequencies [rad/s] for the loop.

    It spans three decades below the slowest and above the fastest open- or
    closed-loop pole (extended until |L| < 1e-3 at the top), with extra
    points around every lightly damped pole, and avoids the frequencies of
    poles on the imaginary axis.
    """
    poles = np.linalg.eigvals(loop.A)
    closed = np.linalg.eigvals(closed_loop_matrix(loop, 1.0))
    allp = np.concatenate([poles, closed])
    mags = np.abs(allp)
    mags = mags[mags > AXIS_TOLERANCE * _scale(allp)]
    lo = float(mags.min()) / 1e3 if mags.size else 1e-3
    hi = float(mags.max()) * 1e3 if mags.size else 1e3
    for _ in range(8):
        value = loop_response(loop, 1j * hi)
        if np.isfinite(value) and abs(value - loop.D[0, 0]) < 1e-3:
            break
        hi *= 10.0
    decades = math.log10(hi / lo)
    grid = [np.geomspace(lo, hi, int(points_per_decade * decades) + 1)]
    zero = AXIS_TOLERANCE * _scale(allp)
    for p in allp:
        w, sigma = abs(p.imag), abs(p.real)
        if w > zero and sigma < 0.7 * abs(p):
            width = max(sigma, 1e-6 * w)
            local = w + width * np.linspace(-12.0, 12.0, 97)
            grid.append(local[local > 0])
    omega = np.unique(np.concatenate(grid))
    axis = _axis_poles(poles)
    for p in axis:
        w = abs(p.imag)
        if w > 0:
            omega = omega[np.abs(omega - w) > 1e-9 * w]
    return omega


# --------------------------------------------------------------------------
# Nyquist winding number
# --------------------------------------------------------------------------
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


def _path_points(segments, params_list) -> np.ndarray:
    out = []
    for seg, params in zip(segments, params_list):
        kind, centre, radius = seg
        if kind == "line":
            out.append(1j * params)
        else:
            out.append(1j * centre + radius * np.exp(1j * params))
    return out


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
    scale = _scale(poles)
    tol = AXIS_TOLERANCE * scale
    P = int(np.sum(poles.real > tol))
    closed = np.linalg.eigvals(closed_loop_matrix(loop, k))
    cscale = _scale(closed)
    Z = int(np.sum(closed.real > 1e-10 * cscale))
    marginal = bool(np.any(np.abs(closed.real) <= 1e-10 * cscale))
    axis = _axis_poles(poles)
    # cluster the imaginary parts of the poles on the axis
    centres: list[float] = []
    for w in sorted(axis.imag):
        if not centres or abs(w - centres[-1]) > tol:
            centres.append(float(w))
    others = np.concatenate([poles, closed])
    radii = []
    for c in centres:
        dist = np.abs(others - 1j * c)
        dist = dist[dist > tol * 10]
        nearest = float(dist.min()) if dist.size else scale
        radii.append(min(1e-3 * nearest, 1e-4 * scale))
    grid = frequency_grid(loop)
    W = float(grid[-1])
    base = np.concatenate([-grid[::-1], [0.0], grid])
    # segments: lines between indentations, arcs around axis poles
    segments = []
    params = []
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

    def F(z: np.ndarray) -> np.ndarray:
        return 1.0 + k * loop_response(loop, z)

    total = 0.0
    last_value = None
    first_value = None
    finite = True
    for seg, par in zip(segments, params):
        par = np.asarray(par, dtype=float)
        values = F(_path_points([seg], [par])[0])
        for _ in range(40):
            steps = np.abs(_phase_steps(values))
            bad = np.nonzero(~(steps <= np.pi / 4))[0]
            if bad.size == 0 or par.size > 2_000_000:
                break
            mids = 0.5 * (par[bad] + par[bad + 1])
            mids = mids[(mids > par[bad]) & (mids < par[bad + 1])]
            if mids.size == 0:
                break
            new_vals = F(_path_points([seg], [mids])[0])
            par = np.concatenate([par, mids])
            values = np.concatenate([values, new_vals])
            order = np.argsort(par, kind="stable")
            par, values = par[order], values[order]
        if not np.all(np.isfinite(values) & (values != 0)):
            finite = False
            break
        if first_value is None:
            first_value = values[0]
        if last_value is not None:
            total += float(_phase_steps(np.array([last_value, values[0]]))[0])
        total += float(np.sum(_phase_steps(values)))
        last_value = values[-1]
    if not finite or first_value is None or marginal:
        # a closed-loop pole on the contour: the winding number is not defined
        return EncirclementCount(0, math.nan, P, int(axis.size), Z, marginal, False)
    # close through the large semicircle (|L| < 1e-3 there: no winding)
    total += float(_phase_steps(np.array([last_value, first_value]))[0])
    winding = total / (2 * np.pi)
    ccw = int(round(winding))
    consistent = abs(winding - ccw) < 0.05 and ccw == P - Z
    return EncirclementCount(ccw, winding, P, int(axis.size), Z, marginal, bool(consistent))


# --------------------------------------------------------------------------
# Margins
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class MarginReport:
    """Gain, phase and delay margins of one loop broken at the plant input.

    Gain factors k multiply the loop; the closed loop is stable for k in
    (``gain_factor_lower``, ``gain_factor_upper``) (``None`` for 0 and ∞).
    """

    name: str
    description: str
    closed_loop_stable: bool
    gain_factor_lower: float | None
    gain_factor_upper: float | None
    gain_margin_db_lower: float | None  # 20 log10(1/k_low) > 0: the gain may shrink by this
    gain_margin_db_upper: float | None  # 20 log10(k_high) > 0: the gain may grow by this
    #: the per-crossover phase margin of least magnitude, signed: positive means a phase lag of
    #: this size brings L(jω_c) to −1, negative a phase lead; None: no gain crossover
    phase_margin_deg: float | None
    delay_margin_s: float | None
    crossover_rad_s: float | None  # gain crossover of the smallest phase margin
    gain_crossovers_rad_s: tuple[float, ...]
    phase_margins_deg: tuple[float, ...]  # one per gain crossover
    phase_crossovers_rad_s: tuple[float, ...]  # L(jω) real and negative (ω = 0 included)
    critical_gains: tuple[float, ...]  # k = −1/L(jω) at those crossovers
    open_loop_unstable_poles: int
    imaginary_axis_poles: int
    nyquist: EncirclementCount
    frequency: np.ndarray  # the grid, rad/s
    response: np.ndarray  # L(jω) on the grid
    checks: tuple[Check, ...]
    notes: tuple[str, ...]

    @property
    def passed(self) -> bool:
        return all(c.passed is not False for c in self.checks)


def _db(x: float) -> float:
    return 20.0 * math.log10(x)


def _wrap_deg(x: float) -> float:
    """An angle in degrees wrapped to (−180, 180]."""
    y = math.fmod(x + 180.0, 360.0)
    if y <= 0:
        y += 360.0
    return y - 180.0


def _roots(f, grid: np.ndarray, values: np.ndarray, scale: np.ndarray | None = None) -> list[float]:
    """Refined sign changes of f on the grid (brentq between neighbours).

    Values within 1e-12 of ``scale`` (pointwise) count as zero; a zero with
    neighbours of opposite sign is a root, runs of zeros (f vanishing on a
    whole interval) are not.
    """
    v = np.array(values, dtype=float)
    if scale is not None:
        v[np.abs(v) <= 1e-12 * np.asarray(scale)] = 0.0
    out = []
    n = v.size
    for i in range(n - 1):
        fa, fb = v[i], v[i + 1]
        if not (np.isfinite(fa) and np.isfinite(fb)):
            continue
        if fa * fb < 0:
            a, b = float(grid[i]), float(grid[i + 1])
            try:
                out.append(float(brentq(f, a, b, xtol=1e-15 * b, rtol=1e-13, maxiter=200)))
            except (ValueError, RuntimeError):
                continue
        elif fb == 0 and fa != 0 and i + 2 < n and fa * v[i + 2] < 0:
            out.append(float(grid[i + 1]))
    return out


def _critical_gains(loop: BrokenLoop, omega: np.ndarray, response: np.ndarray):
    """Phase crossovers (L real, negative) and the gains k = −1/L there."""
    crossings: list[tuple[float, float]] = []
    poles = np.linalg.eigvals(loop.A)
    if not np.any(np.abs(poles) <= AXIS_TOLERANCE * _scale(poles)):
        dc = complex(loop_response(loop, 0.0))
        if np.isfinite(dc) and dc.real < 0:
            crossings.append((0.0, -1.0 / dc.real))

    def imag(w: float) -> float:
        return float(loop_response(loop, 1j * w).imag)

    for w in _roots(imag, omega, response.imag, np.abs(response)):
        value = complex(loop_response(loop, 1j * w))
        if not np.isfinite(value) or abs(value) > 1e12:
            continue  # a pole on the axis, not a crossing
        if abs(value.imag) > 1e-6 * max(abs(value), 1e-300):
            continue
        if value.real < 0:
            crossings.append((w, -1.0 / value.real))
    return crossings


def _gain_range(
    loop: BrokenLoop, candidates: list[float], notes: list[str]
) -> tuple[float | None, float | None, list[float]]:
    """The stable interval of k containing 1, confirmed by closed-loop eigenvalues."""
    scan = np.logspace(-SCAN_DECADES, SCAN_DECADES, 2 * SCAN_DECADES * SCAN_PER_DECADE + 1)
    cand = sorted({c for c in candidates if c > 0 and np.isfinite(c)})
    probes = [1.0]
    for c in cand:
        probes += [c * (1 - GAIN_PROBE), c * (1 + GAIN_PROBE)]
    ks = np.unique(np.concatenate([scan, probes]))
    stable = _stable_many(loop, ks)
    boundaries: list[float] = []
    for i in np.nonzero(stable[:-1] != stable[1:])[0]:
        a, b = float(ks[i]), float(ks[i + 1])
        inside = [c for c in cand if a <= c <= b]
        if inside:
            boundaries.append(inside[0] if len(inside) == 1 else min(inside, key=lambda c: c))
            continue
        # missed by the frequency sweep: bisect on the eigenvalues
        sa = bool(stable[i])
        for _ in range(200):
            m = math.sqrt(a * b)
            if b / a - 1 < 1e-12:
                break
            if is_stable(closed_loop_matrix(loop, m)) == sa:
                a = m
            else:
                b = m
        k = math.sqrt(a * b)
        boundaries.append(k)
        notes.append(
            f"{loop.name}: a stability change at gain factor {k:.6g} was found by the eigenvalue"
            " scan, not by a phase crossover of the frequency sweep"
        )
    lower = [b for b in boundaries if b < 1.0]
    upper = [b for b in boundaries if b > 1.0]
    return (max(lower) if lower else None), (min(upper) if upper else None), boundaries


def broken_loop_margins(loop: BrokenLoop) -> MarginReport:
    """Gain-margin range, phase margin, delay margin and Nyquist check of one loop.

    Parameters
    ----------
    loop : BrokenLoop
        From :func:`state_feedback_loop`, :func:`observer_loop`, or any
        single-input, single-output realisation.

    Returns
    -------
    MarginReport

    Notes
    -----
    Gain margins come from the phase crossovers (L(jω) real and negative;
    k = −1/L(jω)) and are confirmed, as the definitive check, by the
    eigenvalues of the closed loop at k(1 ± 1e-6) on both sides of each
    limit.  Phase margin PM = ∠L(jω_c) + 180° at |L(jω_c)| = 1; delay
    margin min ((∠L(jω_c) + π) mod 2π)/ω_c.  The frequency response is
    cross-checked against ``scipy.signal.freqresp`` of the same realisation.

    References
    ----------
    H. W. Bode, *Network Analysis and Feedback Amplifier Design*, 1945,
    Ch. 8; G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control
    of Dynamic Systems*, 7th ed., 2015, Sec. 6.4; K. Ogata, *Modern Control
    Engineering*, 5th ed., 2010, Sec. 7-6.

    Examples
    --------
    L(s) = 1/(s(s + 1)): phase margin 51.8° at 0.786 rad/s, no finite gain margin.

    >>> import numpy as np
    >>> loop = BrokenLoop("demo", np.array([[0., 1.], [0., -1.]]), np.array([[0.], [1.]]),
    ...                   np.array([[1., 0.]]), np.zeros((1, 1)))
    >>> r = broken_loop_margins(loop)
    >>> round(r.phase_margin_deg, 2), round(r.crossover_rad_s, 4), r.gain_margin_db_upper
    (51.83, 0.7862, None)
    """
    checks: list[Check] = []
    notes: list[str] = []
    poles = np.linalg.eigvals(loop.A)
    P = int(np.sum(poles.real > AXIS_TOLERANCE * _scale(poles)))
    axis = _axis_poles(poles)
    omega = frequency_grid(loop)
    response = loop_response(loop, 1j * omega)

    # frequency response against SciPy (independent implementation)
    sub = omega[:: max(1, omega.size // 400)]
    # away from the open-loop poles, where both evaluations are well conditioned
    near = np.min(np.abs(1j * sub[:, None] - poles[None, :]), axis=1) if poles.size else sub
    sub = sub[near > 1e-3 * sub]
    # and where the margins are decided (SciPy goes through the zeros and poles of an
    # ill-conditioned polynomial and loses digits where |L| is very small or very large)
    mag = np.abs(loop_response(loop, 1j * sub))
    sub = sub[(mag >= 1e-2) & (mag <= 1e2)]
    if sub.size:
        ref = frequency_response(loop.A, loop.B, loop.C, loop.D, sub)  # scipy.signal.freqresp
        mine = loop_response(loop, 1j * sub)
        ok = np.isfinite(ref) & np.isfinite(mine)
        diff = (
            float(np.max(np.abs(mine[ok] - ref[ok]) / np.maximum(np.abs(ref[ok]), 1e-300)))
            if np.all(ok)
            else math.inf
        )
        checks.append(
            Check(
                f"{loop.name}: L(jω) vs scipy.signal.freqresp of the same realisation"
                " (relative, where 0.01 ≤ |L| ≤ 100)",
                diff,
                FREQRESP_TOLERANCE,
                diff <= FREQRESP_TOLERANCE,
            )
        )
    else:
        checks.append(
            Check(
                f"{loop.name}: L(jω) vs scipy.signal.freqresp",
                None,
                None,
                None,
                "|L(jω)| never lies between 0.01 and 100 on the grid",
            )
        )

    stable = is_stable(closed_loop_matrix(loop, 1.0))
    nyq = count_encirclements(loop)
    checks.append(
        Check(
            f"{loop.name}: Nyquist criterion, counter-clockwise encirclements of −1"
            f" ({nyq.counterclockwise}) = P − Z ({nyq.open_loop_unstable} − {nyq.closed_loop_unstable})",
            None if nyq.closed_loop_marginal else float(abs(nyq.winding - nyq.counterclockwise)),
            0.05,
            None if nyq.closed_loop_marginal else nyq.consistent,
            "a closed-loop pole on the imaginary axis: the count is not defined"
            if nyq.closed_loop_marginal
            else "",
        )
    )

    # gain crossovers and phase margins
    with np.errstate(divide="ignore"):
        logmag = np.log(np.abs(response))

    def logabs(w: float) -> float:
        return float(np.log(abs(loop_response(loop, 1j * w))))

    gains_w = _roots(logabs, omega, logmag)
    pms, taus = [], []
    for w in gains_w:
        phase = float(np.angle(loop_response(loop, 1j * w)))
        pms.append(_wrap_deg(math.degrees(phase) + 180.0))
        taus.append(((phase + math.pi) % (2 * math.pi)) / w)
    crossings = _critical_gains(loop, omega, response)
    phase_w = tuple(w for w, _k in crossings)
    crit = tuple(k for _w, k in crossings)

    k_low = k_high = None
    if stable:
        k_low, k_high, _bounds = _gain_range(loop, list(crit), notes)
        for label, k in (("lower", k_low), ("upper", k_high)):
            if k is None:
                continue
            below = is_stable(closed_loop_matrix(loop, k * (1 - GAIN_PROBE)))
            above = is_stable(closed_loop_matrix(loop, k * (1 + GAIN_PROBE)))
            checks.append(
                Check(
                    f"{loop.name}: closed loop changes stability across the {label} gain limit"
                    f" k = {k:.6g} (eigenvalues at k(1 ± {GAIN_PROBE:g}))",
                    None,
                    None,
                    below != above,
                )
            )
        # the whole interval is stable (scan inside it)
        lo = k_low if k_low is not None else 10.0**-SCAN_DECADES
        hi = k_high if k_high is not None else 10.0**SCAN_DECADES
        inner = np.geomspace(lo * (1 + 1e-3), hi * (1 - 1e-3), 41)
        checks.append(
            Check(
                f"{loop.name}: closed loop stable at 41 gain factors across the stable range",
                None,
                None,
                bool(np.all(_stable_many(loop, inner))),
            )
        )
    else:
        notes.append(f"{loop.name}: the closed loop is not stable at the design gain (k = 1)")

    if stable and not gains_w:
        notes.append(f"{loop.name}: |L(jω)| never crosses 1: no phase or delay margin limit")
    i_min = int(np.argmin(np.abs(pms))) if pms else None
    return MarginReport(
        name=loop.name,
        description=loop.description,
        closed_loop_stable=stable,
        gain_factor_lower=k_low,
        gain_factor_upper=k_high,
        gain_margin_db_lower=None if k_low is None else _db(1.0 / k_low),
        gain_margin_db_upper=None if k_high is None else _db(k_high),
        phase_margin_deg=None if (i_min is None or not stable) else pms[i_min],
        delay_margin_s=None if (not taus or not stable) else float(min(taus)),
        crossover_rad_s=None if i_min is None else gains_w[i_min],
        gain_crossovers_rad_s=tuple(gains_w),
        phase_margins_deg=tuple(pms),
        phase_crossovers_rad_s=phase_w,
        critical_gains=crit,
        open_loop_unstable_poles=P,
        imaginary_axis_poles=int(axis.size),
        nyquist=nyq,
        frequency=omega,
        response=response,
        checks=tuple(checks),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------
# Both loops of a design
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class MarginComparison:
    """State feedback with the true state beside the observer-based compensator."""

    state_feedback: MarginReport
    observer_based: MarginReport
    checks: tuple[Check, ...]
    notes: tuple[str, ...]

    @property
    def passed(self) -> bool:
        return (
            all(c.passed is not False for c in self.checks)
            and self.state_feedback.passed
            and self.observer_based.passed
        )


def compare_margins(d: Derivation) -> MarginComparison:
    """Margins of both loops of a single-input design, broken at the plant input.

    Raises
    ------
    ValueError
        For a plant with several inputs (the loop broken at one input is then
        not the whole story; not computed).
    """
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    K, L = d.K.value, d.L.value
    sf = state_feedback_loop(A, B, K)
    ob = observer_loop(A, B, C, D, K, L)
    checks = []
    for loop, want, label in (
        (sf, d.controller_poles.values, "controller poles"),
        (
            ob,
            np.concatenate([d.controller_poles.values, d.observer_poles.values]),
            "the controller and observer poles",
        ),
    ):
        checks.append(
            eigenvalue_check(
                f"{loop.name} loop closed at k = 1: eigenvalues vs {label} (relative)",
                closed_loop_matrix(loop, 1.0),
                want,
                terms=(A, (B, K), (B, K), (L, C)),
            )
        )
    a = broken_loop_margins(sf)
    b = broken_loop_margins(ob)
    notes = []
    if (
        a.phase_margin_deg is not None
        and b.phase_margin_deg is not None
        and b.phase_margin_deg < a.phase_margin_deg - 10
    ):
        notes.append(
            f"the observer-based loop has a phase margin of {b.phase_margin_deg:.3g}° against"
            f" {a.phase_margin_deg:.3g}° with the true state: the observer costs robustness"
            " (J. C. Doyle, IEEE Trans. Automatic Control 23(4):756–757, 1978)"
        )
    return MarginComparison(a, b, tuple(checks), tuple(notes))
