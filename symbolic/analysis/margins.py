"""Stability margins of a single-input loop broken at the plant input.

The loops (state feedback with the true state, the observer-based compensator) and
their closed-loop matrices are built by :mod:`symbolic.analysis.broken_loop`.

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

The Nyquist criterion is verified on every loop: the counter-clockwise
encirclements of −1 equal P − Z (:mod:`symbolic.analysis.nyquist`).

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
from .broken_loop import (
    AXIS_TOLERANCE,
    BrokenLoop,
    axis_poles,
    closed_loop_matrix,
    frequency_grid,
    is_stable,
    loop_response,
    observer_loop,
    spectral_scale,
    stable_at_gains,
    state_feedback_loop,
)
from .nyquist import EncirclementCount, count_encirclements

__all__ = [
    "MarginComparison",
    "MarginReport",
    "broken_loop_margins",
    "compare_margins",
    "stable_gain_range",
]

#: The gain scan covers k from 10**-SCAN_DECADES to 10**SCAN_DECADES.
SCAN_DECADES = 8
#: Points per decade of the gain scan.
SCAN_PER_DECADE = 10
#: Relative step on either side of a critical gain for the eigenvalue cross-check.
GAIN_PROBE = 1e-6
#: Relative tolerance of the frequency response against scipy.signal.freqresp.
FREQRESP_TOLERANCE = 1e-8


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
    if not np.any(np.abs(poles) <= AXIS_TOLERANCE * spectral_scale(poles)):
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


def stable_gain_range(
    loop: BrokenLoop, candidates: list[float], notes: list[str]
) -> tuple[float | None, float | None, list[float]]:
    """The stable interval of k containing 1, confirmed by closed-loop eigenvalues."""
    scan = np.logspace(-SCAN_DECADES, SCAN_DECADES, 2 * SCAN_DECADES * SCAN_PER_DECADE + 1)
    cand = sorted({c for c in candidates if c > 0 and np.isfinite(c)})
    probes = [1.0]
    for c in cand:
        probes += [c * (1 - GAIN_PROBE), c * (1 + GAIN_PROBE)]
    ks = np.unique(np.concatenate([scan, probes]))
    stable = stable_at_gains(loop, ks)
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
        From :func:`~symbolic.analysis.broken_loop.state_feedback_loop`,
        :func:`~symbolic.analysis.broken_loop.observer_loop`, or any single-input,
        single-output realisation.

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
    notes: list[str] = []
    poles = np.linalg.eigvals(loop.A)
    omega = frequency_grid(loop)
    response = loop_response(loop, 1j * omega)
    stable = is_stable(closed_loop_matrix(loop, 1.0))
    nyq = count_encirclements(loop)
    checks = [_freqresp_check(loop, omega, poles), _nyquist_check(loop, nyq)]
    gains_w, pms, taus = _phase_margins(loop, omega, response)
    crossings = _critical_gains(loop, omega, response)
    crit = tuple(k for _w, k in crossings)
    k_low, k_high = _gain_limits(loop, stable, crit, checks, notes)
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
        phase_crossovers_rad_s=tuple(w for w, _k in crossings),
        critical_gains=crit,
        open_loop_unstable_poles=int(np.sum(poles.real > AXIS_TOLERANCE * spectral_scale(poles))),
        imaginary_axis_poles=int(axis_poles(poles).size),
        nyquist=nyq,
        frequency=omega,
        response=response,
        checks=tuple(checks),
        notes=tuple(notes),
    )


def _freqresp_check(loop: BrokenLoop, omega: np.ndarray, poles: np.ndarray) -> Check:
    """The frequency response against SciPy (an independent implementation)."""
    sub = omega[:: max(1, omega.size // 400)]
    # away from the open-loop poles, where both evaluations are well conditioned
    near = np.min(np.abs(1j * sub[:, None] - poles[None, :]), axis=1) if poles.size else sub
    sub = sub[near > 1e-3 * sub]
    # and where the margins are decided (SciPy goes through the zeros and poles of an
    # ill-conditioned polynomial and loses digits where |L| is very small or very large)
    mag = np.abs(loop_response(loop, 1j * sub))
    sub = sub[(mag >= 1e-2) & (mag <= 1e2)]
    if not sub.size:
        return Check(
            f"{loop.name}: L(jω) vs scipy.signal.freqresp",
            None,
            None,
            None,
            "|L(jω)| never lies between 0.01 and 100 on the grid",
        )
    ref = frequency_response(loop.A, loop.B, loop.C, loop.D, sub)  # scipy.signal.freqresp
    mine = loop_response(loop, 1j * sub)
    ok = np.isfinite(ref) & np.isfinite(mine)
    diff = (
        float(np.max(np.abs(mine[ok] - ref[ok]) / np.maximum(np.abs(ref[ok]), 1e-300)))
        if np.all(ok)
        else math.inf
    )
    return Check(
        f"{loop.name}: L(jω) vs scipy.signal.freqresp of the same realisation"
        " (relative, where 0.01 ≤ |L| ≤ 100)",
        diff,
        FREQRESP_TOLERANCE,
        diff <= FREQRESP_TOLERANCE,
    )


def _nyquist_check(loop: BrokenLoop, nyq: EncirclementCount) -> Check:
    """The Nyquist criterion as a check: encirclements of −1 equal P − Z."""
    return Check(
        f"{loop.name}: Nyquist criterion, counter-clockwise encirclements of −1"
        f" ({nyq.counterclockwise}) = P − Z ({nyq.open_loop_unstable} − {nyq.closed_loop_unstable})",
        None if nyq.closed_loop_marginal else float(abs(nyq.winding - nyq.counterclockwise)),
        0.05,
        None if nyq.closed_loop_marginal else nyq.consistent,
        "a closed-loop pole on the imaginary axis: the count is not defined"
        if nyq.closed_loop_marginal
        else "",
    )


def _phase_margins(
    loop: BrokenLoop, omega: np.ndarray, response: np.ndarray
) -> tuple[list[float], list[float], list[float]]:
    """The gain crossovers, and the phase margin [°] and delay margin [s] at each."""
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
    return gains_w, pms, taus


def _gain_limits(
    loop: BrokenLoop, stable: bool, crit: tuple[float, ...], checks: list[Check], notes: list[str]
) -> tuple[float | None, float | None]:
    """The stable gain range (None, None when the loop is unstable at k = 1), with its checks
    and notes appended."""
    if not stable:
        notes.append(f"{loop.name}: the closed loop is not stable at the design gain (k = 1)")
        return None, None
    k_low, k_high, _bounds = stable_gain_range(loop, list(crit), notes)
    checks.extend(_gain_limit_checks(loop, k_low, k_high))
    return k_low, k_high


def _gain_limit_checks(loop: BrokenLoop, k_low: float | None, k_high: float | None) -> list[Check]:
    """Eigenvalue checks of the stable gain range: stability changes across each limit, and
    holds at 41 gain factors inside the range."""
    checks = []
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
            bool(np.all(stable_at_gains(loop, inner))),
        )
    )
    return checks


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
