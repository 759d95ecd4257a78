"""Time-domain specifications and the closed-loop poles that meet them.

The engineer writes step-response specifications in the ``[controller]``
table of a design file (``overshoot_percent``, ``settling_time`` with
``settling_band``, ``rise_time``, ``peak_time``).  This module turns them
into a dominant complex pole pair ``-sigma +/- j*omega_d`` under the standard
second-order approximation, says which specification sets the pair, and
places the remaining closed-loop poles by a documented rule.

Pure numerics (math, NumPy, SciPy); no SymPy.

Notation
--------
``zeta`` damping ratio, ``omega_n`` natural frequency (rad/s),
``sigma = zeta*omega_n`` (1/s), ``omega_d = omega_n*sqrt(1 - zeta**2)`` (rad/s).
The reference response is the unit step of
``omega_n**2 / (s**2 + 2*zeta*omega_n*s + omega_n**2)``.

Cautions
--------
The second-order formulas describe a plant whose closed loop behaves like
that reference system.  Zeros, the non-dominant poles, actuator limits and
unmodelled dynamics change the real response.  Where the loop moves, heats
or flies something, confirm every specification by simulation of the full
model and by test on the equipment, with limits and an independent stop.

References
----------
.. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
   Sec. 4.6 "Underdamped second-order systems" (peak time, percent
   overshoot, settling time, normalized rise-time curve).
.. [2] G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control of
   Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 3.4 "Time-domain
   specifications".
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from decimal import ROUND_CEILING, ROUND_FLOOR, Decimal
from numbers import Real

import numpy as np

from ..model.specifications import SPECIFICATION_KEYS, Specifications
from ..runtime.errors import GainsmithWarning, SpecificationError

__all__ = [
    "Specifications",
    "SpecFormula",
    "SpecRegion",
    "DominantPair",
    "DEFAULT_DAMPING_RATIO",
    "damping_ratio_from_overshoot",
    "overshoot_from_damping_ratio",
    "settling_real_part",
    "normalized_rise_time",
    "dominant_pair",
    "remaining_poles",
    "second_order_step_metrics",
]

# --------------------------------------------------------------------------
# Sources (section-level citations; equation numbers are not given because
# they were recalled, not checked against the printed books).
# --------------------------------------------------------------------------
_NISE = "N. S. Nise, Control Systems Engineering, 7th ed., Wiley, 2015, Sec. 4.6"
_FRANKLIN = (
    "G. F. Franklin, J. D. Powell, A. Emami-Naeini, Feedback Control of Dynamic Systems, "
    "7th ed., Pearson, 2015, Sec. 3.4"
)
_SOURCE_OVERSHOOT = (
    f"{_NISE} (percent overshoot vs damping ratio, solved for zeta); "
    f"{_FRANKLIN} (overshoot M_p = exp(-pi*zeta/sqrt(1-zeta^2)))"
)
_SOURCE_SETTLING = {
    0.02: f"{_NISE} (2 % settling time T_s = 4/(zeta*omega_n))",
    0.01: f"{_FRANKLIN} (1 % settling time t_s = 4.6/sigma)",
}
_SOURCE_RISE = (
    f"{_NISE} (normalized 10-90 % rise-time curve and its cubic fit in zeta; "
    "coefficients from memory, checked against the exact response in tests/test_specs.py)"
)
_SOURCE_PEAK = f"{_NISE} (peak time T_p = pi/omega_d); {_FRANKLIN} (t_p = pi/omega_d)"

#: Damping ratio used when no overshoot is specified: 1/sqrt(2) (common
#: practice, no source).  It gives about 4.3 % overshoot.
DEFAULT_DAMPING_RATIO = 1.0 / math.sqrt(2.0)

# Numerator of the settling-time approximation sigma*T_s = constant.
# 2 %: 4 (Nise, Sec. 4.6); 1 %: 4.6 (Franklin, Sec. 3.4).
_SETTLING_CONSTANT = {0.02: 4.0, 0.01: 4.6}

# Cubic fit of the normalized 10-90 % rise time omega_n*T_r in zeta,
# Nise, Sec. 4.6 (fit to the normalized rise-time curve; from memory).
_RISE_FIT = (1.768, -0.417, 1.039, 1.0)  # zeta^3, zeta^2, zeta, 1
_RISE_FIT_RANGE = (0.1, 0.9)

# Above this damping ratio the "complex pair" is two nearly coincident real
# poles; numeric pole placement is then ill conditioned (SciPy 1.17's place_poles was
# measured to fail silently for poles 1e-8 apart).
_MAX_DAMPING_RATIO = 0.9999

_REL_TOL = 1e-9
_MAX_ROUNDING_STEPS = 2000
_KEYS = SPECIFICATION_KEYS


# --------------------------------------------------------------------------
# Result and input types
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class SpecFormula:
    """How one specification became a bound on the dominant pair.

    One row of the memo table.

    Attributes
    ----------
    spec : str
        Design-file key, e.g. ``"overshoot_percent"``.
    requested : float
        The number the engineer gave.
    bound : str
        Plain-text bound, e.g. ``"zeta >= 0.5912"``.
    bound_value : float
        The number on the right of ``bound``.
    formula_latex : str
        LaTeX of the formula used (math mode, without delimiters).
    formula_text : str
        Plain-text version of the formula.
    source : str
        Full citation of the formula.
    predicted : float
        The value the chosen pair gives under the second-order approximation.
    passed : bool
        ``predicted`` meets ``requested`` within a relative tolerance of 1e-9.
    binding : bool
        This specification sets the pair.
    """

    spec: str
    requested: float
    bound: str
    bound_value: float
    formula_latex: str
    formula_text: str
    source: str
    predicted: float
    passed: bool
    binding: bool


@dataclass(frozen=True)
class SpecRegion:
    """The region of the s-plane where a dominant pair meets the specifications.

    Each minimum is 0.0 when the matching specification is absent.  The
    region describes the specifications only; the default damping ratio used
    when no overshoot is given is a design choice and is not part of it.

    Attributes
    ----------
    min_damping_ratio : float
        From the overshoot: a sector about the negative real axis.
    min_real_part : float
        From the settling time: poles left of ``-min_real_part``.
    min_natural_frequency : float
        From the rise time, evaluated at ``min_damping_ratio``.  The exact
        rise-time boundary ``omega_n >= f(zeta)/T_r`` grows with zeta, so this
        circle is the smallest natural frequency anywhere in the region
        (the rise-time fit ``f`` increases with zeta); :meth:`contains` tests
        the exact boundary.
    min_damped_frequency : float
        From the peak time: ``|Im p| >= pi/T_p``.
    rise_time : float or None
        The rise-time specification, kept so :meth:`contains` is exact.
    """

    min_damping_ratio: float
    min_real_part: float
    min_natural_frequency: float
    min_damped_frequency: float
    rise_time: float | None = None

    def contains(self, pole: complex) -> bool:
        """Return True when ``pole`` (and its conjugate) meets every bound.

        Bounds are tested with a relative tolerance of 1e-9.  Poles in the
        closed right half-plane are never contained.
        """
        pole = complex(pole)
        sigma = -pole.real
        omega_d = abs(pole.imag)
        omega_n = math.hypot(sigma, omega_d)
        if sigma <= 0.0 or not math.isfinite(omega_n):
            return False
        zeta = sigma / omega_n
        lower = 1.0 - _REL_TOL
        if zeta < self.min_damping_ratio * lower:
            return False
        if sigma < self.min_real_part * lower:
            return False
        if omega_d < self.min_damped_frequency * lower:
            return False
        if self.rise_time is not None:
            if normalized_rise_time(zeta) / omega_n > self.rise_time * (1.0 + _REL_TOL):
                return False
        return True


@dataclass(frozen=True)
class DominantPair:
    """The dominant closed-loop pole pair chosen from the specifications.

    Attributes
    ----------
    damping_ratio : float
        ``sigma / omega_n`` of the rounded pair.
    natural_frequency : float
        ``hypot(sigma, omega_d)`` in rad/s.
    real_part : float
        ``sigma > 0``; the poles are at ``-sigma +/- j*omega_d``.  Three
        significant figures.
    damped_frequency : float
        ``omega_d > 0`` in rad/s.  Three significant figures.
    poles : tuple of complex
        ``(-sigma + j*omega_d, -sigma - j*omega_d)``.
    binding : tuple of str
        Specification keys that set the pair.
    formulas : tuple of SpecFormula
        One row per given specification, in design-file key order.
    region : SpecRegion
        The specification region, for a pole-map figure.
    defaults_used : tuple of str
        Sentences naming each default that was applied.
    """

    damping_ratio: float
    natural_frequency: float
    real_part: float
    damped_frequency: float
    poles: tuple[complex, complex]
    binding: tuple[str, ...]
    formulas: tuple[SpecFormula, ...]
    region: SpecRegion
    defaults_used: tuple[str, ...]


# --------------------------------------------------------------------------
# Formulas
# --------------------------------------------------------------------------
def _overshoot_log(overshoot_percent: float) -> float:
    """Return ``L = -ln(OS/100) > 0`` after checking ``0 < OS < 100``."""
    if isinstance(overshoot_percent, bool) or not isinstance(overshoot_percent, Real):
        raise SpecificationError(
            f"expected a number, got {overshoot_percent!r}", key="overshoot_percent"
        )
    if not (math.isfinite(overshoot_percent) and 0.0 < overshoot_percent < 100.0):
        raise SpecificationError(
            f"expected a percentage with 0 < OS < 100, got {overshoot_percent!r}",
            key="overshoot_percent",
        )
    return -math.log(overshoot_percent / 100.0)


def damping_ratio_from_overshoot(overshoot_percent: float) -> float:
    """Damping ratio of the standard second-order system with a given overshoot.

    Parameters
    ----------
    overshoot_percent : float
        Percent overshoot of the unit step response, ``0 < OS < 100``.

    Returns
    -------
    float
        ``zeta = -ln(OS/100) / sqrt(pi**2 + ln(OS/100)**2)``, in ``(0, 1)``.

    Raises
    ------
    SpecificationError
        With ``key="overshoot_percent"`` when OS is outside ``(0, 100)``.

    Notes
    -----
    The inverse of :func:`overshoot_from_damping_ratio`; valid for the
    standard second-order system without zeros.

    References
    ----------
    .. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
       Sec. 4.6 (percent overshoot solved for the damping ratio).
    .. [2] G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control
       of Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 3.4.

    Examples
    --------
    >>> round(damping_ratio_from_overshoot(10.0), 4)
    0.5912
    """
    # zeta = -ln(%OS/100) / sqrt(pi^2 + ln^2(%OS/100))   [Nise, Sec. 4.6]
    log_term = _overshoot_log(overshoot_percent)
    return log_term / math.hypot(math.pi, log_term)


def overshoot_from_damping_ratio(damping_ratio: float) -> float:
    """Percent overshoot of the standard second-order step response.

    Parameters
    ----------
    damping_ratio : float
        ``zeta >= 0``.

    Returns
    -------
    float
        ``100*exp(-pi*zeta/sqrt(1 - zeta**2))`` for ``zeta < 1``; 0.0 for
        ``zeta >= 1`` (no overshoot).

    Raises
    ------
    ValueError
        When ``zeta`` is negative or not finite.

    References
    ----------
    .. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
       Sec. 4.6 (percent overshoot).
    .. [2] G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control
       of Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 3.4 (overshoot M_p).

    Examples
    --------
    >>> round(overshoot_from_damping_ratio(0.5), 2)
    16.3
    """
    zeta = float(damping_ratio)
    if not math.isfinite(zeta) or zeta < 0.0:
        raise ValueError(f"damping ratio must be finite and >= 0, got {damping_ratio!r}")
    if zeta >= 1.0:
        return 0.0
    # %OS = 100 exp(-zeta pi / sqrt(1 - zeta^2))   [Nise, Sec. 4.6; Franklin, Sec. 3.4]
    return 100.0 * math.exp(-zeta * math.pi / math.sqrt((1.0 - zeta) * (1.0 + zeta)))


def settling_real_part(settling_time: float, band: float = 0.02) -> float:
    """Smallest real part ``sigma`` of the dominant pair for a settling time.

    Uses the textbook constants: ``sigma >= 4/T_s`` for the 2 % band and
    ``sigma >= 4.6/T_s`` for the 1 % band.

    Parameters
    ----------
    settling_time : float
        Largest allowed settling time in seconds, ``> 0``.
    band : float, default 0.02
        0.02 or 0.01.

    Returns
    -------
    float
        The required ``sigma`` in 1/s.

    Raises
    ------
    SpecificationError
        With ``key="settling_time"`` or ``key="settling_band"``.

    Notes
    -----
    Why these constants rather than the band-only envelope bound
    ``-ln(band)/T_s`` (3.91 and 4.61): 4 and 4.6 are the values printed in
    the two cited books, so a reviewer can check the memo against them, and
    for the 2 % band 4 is the more conservative of the two.  Neither is a
    guarantee.  The step-response envelope is
    ``exp(-sigma*t)/sqrt(1 - zeta**2)``, and the exact 2 % settling time
    (computed by :func:`second_order_step_metrics`) satisfies
    ``2.81 <= sigma*T_s <= 4.31`` for ``0.1 <= zeta <= 0.9``: the formula is
    pessimistic for most damping ratios but optimistic by up to 7.7 % near
    ``zeta = 0.745`` (by 5.4 % at the default ``zeta = 0.707``, where
    ``sigma*T_s = 4.22``).  For the 1 % band the exact value lies in
    ``3.46 <= sigma*T_s <= 5.09`` (optimistic by up to 10.7 % near
    ``zeta = 0.79``).  These extremes were measured on a grid of ``zeta``
    with step 1e-4; tests/test_specs.py checks them.  Confirm settling by
    simulating the full closed loop.

    References
    ----------
    .. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
       Sec. 4.6 (settling time ``T_s = 4/(zeta*omega_n)``, 2 %).
    .. [2] G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control
       of Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 3.4 (settling time
       ``t_s = 4.6/sigma``, 1 %).

    Examples
    --------
    >>> settling_real_part(2.0)
    2.0
    >>> settling_real_part(2.0, band=0.01)
    2.3
    """
    if isinstance(settling_time, bool) or not isinstance(settling_time, Real):
        raise SpecificationError(f"expected a number, got {settling_time!r}", key="settling_time")
    if not (math.isfinite(settling_time) and settling_time > 0.0):
        raise SpecificationError(
            f"expected a positive time in seconds, got {settling_time!r}", key="settling_time"
        )
    if band not in _SETTLING_CONSTANT:
        raise SpecificationError(f"expected 0.02 or 0.01, got {band!r}", key="settling_band")
    # sigma = 4/T_s (2 %, Nise Sec. 4.6); sigma = 4.6/T_s (1 %, Franklin Sec. 3.4)
    return _SETTLING_CONSTANT[band] / float(settling_time)


def normalized_rise_time(damping_ratio: float) -> float:
    """Normalized 10-90 % rise time ``omega_n*T_r`` of the second-order step response.

    Parameters
    ----------
    damping_ratio : float
        ``0 <= zeta <= 1``.  The fit was made for ``0.1 <= zeta <= 0.9``.

    Returns
    -------
    float
        ``1.768*zeta**3 - 0.417*zeta**2 + 1.039*zeta + 1``.

    Raises
    ------
    ValueError
        When ``zeta`` is outside ``[0, 1]``.

    Notes
    -----
    A cubic fit of the exact curve.  Against the exact rise time found by
    root finding on the closed-form response
    (:func:`second_order_step_metrics`), the worst relative error over
    ``0.1 <= zeta <= 0.9`` (grid step 1e-5) was -0.245 % at ``zeta = 0.1``
    (fit too short) and +0.154 % near ``zeta = 0.209``; it grows outside
    that range (-0.86 % at 0.05, +0.81 % at 0.99).  The rise time increases
    with ``zeta`` at fixed ``omega_n``.

    References
    ----------
    .. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
       Sec. 4.6 (normalized rise-time curve and its polynomial fit;
       coefficients from memory, verified numerically in the tests).

    Examples
    --------
    >>> round(normalized_rise_time(0.75), 3)
    2.291
    """
    zeta = float(damping_ratio)
    if not (math.isfinite(zeta) and 0.0 <= zeta <= 1.0):
        raise ValueError(f"damping ratio must lie in [0, 1], got {damping_ratio!r}")
    # omega_n T_r = 1.768 zeta^3 - 0.417 zeta^2 + 1.039 zeta + 1   [Nise, Sec. 4.6]
    c3, c2, c1, c0 = _RISE_FIT
    return ((c3 * zeta + c2) * zeta + c1) * zeta + c0


# --------------------------------------------------------------------------
# Rounding to three significant figures
# --------------------------------------------------------------------------
def _sig3_parts(value: float, rounding: str) -> tuple[int, Decimal]:
    """Return ``(k, q)`` with ``k*q`` the 3-significant-figure rounding of ``value``.

    The decimal is taken from ``repr(value)`` so that a float printed as
    ``0.7`` stays ``0.700`` when rounded down.
    """
    exact = Decimal(repr(value))
    quantum = Decimal(1).scaleb(exact.adjusted() - 2)
    count = int((exact / quantum).to_integral_value(rounding=rounding))
    return count, quantum


def round_sig3(value: float, *, up: bool) -> float:
    """Round a positive float to 3 significant figures, up or down."""
    count, quantum = _sig3_parts(value, ROUND_CEILING if up else ROUND_FLOOR)
    return float(count * quantum)


def _step_sig3(value: float) -> float:
    """Add one unit in the third significant figure of a 3-s.f. positive float."""
    count, quantum = _sig3_parts(value, ROUND_CEILING)
    return float((count + 1) * quantum)


# --------------------------------------------------------------------------
# Choosing the dominant pair
# --------------------------------------------------------------------------
def step_predictions(spec: Specifications, sigma: float, omega_d: float) -> dict[str, float]:
    """Second-order predictions of the pair ``-sigma +/- j*omega_d`` for each given spec."""
    omega_n = math.hypot(sigma, omega_d)
    zeta = sigma / omega_n
    out: dict[str, float] = {"zeta": zeta}
    if spec.overshoot_percent is not None:
        # %OS = 100 exp(-pi sigma/omega_d), same formula as overshoot_from_damping_ratio
        out["overshoot_percent"] = 100.0 * math.exp(-math.pi * sigma / omega_d)
    if spec.settling_time is not None:
        # The textbook constant 4/sigma (2 %) is optimistic by up to about 8 % (see
        # settling_real_part), so the prediction that the pair must meet is the exact
        # settling time of the second-order step response; the rounding loop moves sigma
        # left until it holds.
        out["settling_time"] = second_order_step_metrics(zeta, omega_n, spec.settling_band)[
            "settling_time"
        ]
    if spec.rise_time is not None:
        out["rise_time"] = normalized_rise_time(zeta) / omega_n
    if spec.peak_time is not None:
        out["peak_time"] = math.pi / omega_d
    return out


def _failures(spec: Specifications, predicted: dict[str, float], zeta_min: float) -> set[str]:
    """Keys whose prediction misses the request (relative tolerance 1e-9)."""
    failed = set()
    if predicted["zeta"] < zeta_min * (1.0 - _REL_TOL):
        failed.add("zeta")
    for key in ("overshoot_percent", "settling_time", "rise_time", "peak_time"):
        requested = getattr(spec, key)
        if requested is not None and predicted[key] > requested * (1.0 + _REL_TOL):
            failed.add(key)
    return failed


def dominant_pair(spec: Specifications) -> DominantPair:
    """Choose the dominant closed-loop pole pair that meets the specifications.

    Parameters
    ----------
    spec : Specifications
        Validated specifications.

    Returns
    -------
    DominantPair
        The rounded pair, the binding specifications, one
        :class:`SpecFormula` per given specification, the specification
        region and the defaults that were applied.

    Raises
    ------
    SpecificationError
        When the overshoot alone is given (it fixes the damping ratio but
        not the speed), when the overshoot is so small that the damping ratio
        would exceed 0.9999 (the pair would be two nearly coincident real
        poles; give explicit poles instead), or when the specifications ask
        for a natural frequency that is not a finite float.

    Warns
    -----
    GainsmithWarning
        When a rise time is given and the damping ratio lies outside
        ``[0.1, 0.9]``, where the rise-time fit was not made.

    Notes
    -----
    Method, all under the standard second-order approximation:

    1. The damping ratio is fixed at its minimum: from the overshoot
       (:func:`damping_ratio_from_overshoot`), or ``1/sqrt(2)`` when no
       overshoot is given (common practice, no source; recorded in
       ``defaults_used``).
    2. ``omega_n = max(sigma_min/zeta, f(zeta)/T_r, (pi/T_p)/sqrt(1 - zeta**2))``
       over the given specifications, with ``sigma_min`` from
       :func:`settling_real_part` and ``f`` from :func:`normalized_rise_time`.
       The specifications reaching the maximum (relative tolerance 1e-9) and
       the overshoot, when given, are *binding*.
    3. The pair is rounded outward to three significant figures for a
       readable memo: ``sigma`` up, ``omega_d`` down (both raise the damping
       ratio).  Every specification is re-checked with the same formulas; a
       miss adds one unit in the third significant figure (overshoot, the
       default damping ratio or settling: to ``sigma``; peak time: to
       ``omega_d``; rise time: to both) and the check repeats.  The loop is
       bounded; it always ended within a few steps in the tests.

    All specifications are lower bounds on a speed once the damping ratio is
    fixed, so they cannot contradict one another.

    References
    ----------
    .. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
       Sec. 4.6.
    .. [2] G. F. Franklin, J. D. Powell, A. Emami-Naeini, *Feedback Control
       of Dynamic Systems*, 7th ed., Pearson, 2015, Sec. 3.4.

    Examples
    --------
    >>> pair = dominant_pair(Specifications(overshoot_percent=10.0, settling_time=2.0))
    >>> pair.real_part, pair.damped_frequency
    (2.0, 2.72)
    >>> pair.binding
    ('overshoot_percent', 'settling_time')
    """
    if not isinstance(spec, Specifications):
        raise TypeError(f"expected Specifications, got {type(spec).__name__}")
    defaults: list[str] = []

    # 1. damping ratio
    if spec.overshoot_percent is not None:
        log_term = _overshoot_log(spec.overshoot_percent)
        radius = math.hypot(math.pi, log_term)
        zeta = log_term / radius
        root = math.pi / radius  # sqrt(1 - zeta^2), without cancellation
        if zeta > _MAX_DAMPING_RATIO:
            raise SpecificationError(
                f"{spec.overshoot_percent!r} % is so small that the damping ratio would be "
                f"{zeta:.6f} > {_MAX_DAMPING_RATIO}: the pair would be two nearly coincident "
                "real poles; give explicit closed-loop poles instead",
                key="overshoot_percent",
            )
    else:
        zeta = DEFAULT_DAMPING_RATIO
        root = math.sqrt(1.0 - zeta * zeta)
        defaults.append(
            "no overshoot_percent given: damping ratio 0.707 = 1/sqrt(2), "
            "about 4.3 % overshoot (common practice, no source)"
        )

    # 2. natural frequency: the largest lower bound over the given speed specs
    candidates: dict[str, float] = {}
    sigma_min = 0.0
    if spec.settling_time is not None:
        sigma_min = settling_real_part(spec.settling_time, spec.settling_band)
        candidates["settling_time"] = sigma_min / zeta
    rise_min = 0.0
    if spec.rise_time is not None:
        rise_min = normalized_rise_time(zeta) / spec.rise_time
        candidates["rise_time"] = rise_min
        low, high = _RISE_FIT_RANGE
        if not low <= zeta <= high:
            warnings.warn(
                f"damping ratio {zeta:.4f} lies outside [{low}, {high}], where the "
                "rise-time fit was made; the rise-time bound is an extrapolation",
                GainsmithWarning,
                stacklevel=2,
            )
    omega_d_min = 0.0
    if spec.peak_time is not None:
        omega_d_min = math.pi / spec.peak_time  # T_p = pi/omega_d  [Nise Sec. 4.6]
        candidates["peak_time"] = omega_d_min / root
    if not candidates:
        raise SpecificationError(
            "overshoot_percent fixes the damping ratio but not the speed; "
            "give settling_time, rise_time or peak_time as well",
            key="controller",
        )
    omega_n = max(candidates.values())
    if not (math.isfinite(omega_n) and omega_n > 0.0 and math.isfinite(omega_n * omega_n)):
        raise SpecificationError(
            f"the specifications ask for a natural frequency of {omega_n!r} rad/s, "
            "which cannot be computed; check the times are in seconds",
            key="controller",
        )
    binding_set = {key for key, value in candidates.items() if value >= omega_n * (1 - _REL_TOL)}
    if spec.overshoot_percent is not None:
        binding_set.add("overshoot_percent")
    binding = tuple(key for key in _KEYS if key in binding_set)

    # 3. round outward to three significant figures, then verify and repair
    sigma = round_sig3(zeta * omega_n, up=True)
    omega_d = round_sig3(root * omega_n, up=False)
    for _ in range(_MAX_ROUNDING_STEPS):
        if omega_d <= 0.0:  # cannot happen for zeta <= 0.9999, kept as a guard
            omega_d = round_sig3(root * omega_n, up=True)
        predicted = step_predictions(spec, sigma, omega_d)
        failed = _failures(spec, predicted, zeta)
        if not failed:
            break
        if failed & {"zeta", "overshoot_percent", "settling_time", "rise_time"}:
            sigma = _step_sig3(sigma)
        if failed & {"peak_time", "rise_time"}:
            omega_d = _step_sig3(omega_d)
    else:  # pragma: no cover - would be a defect in the rounding rule
        raise RuntimeError(f"rounding the dominant pair did not converge for {spec!r}")

    formulas = _formula_rows(spec, zeta, predicted, binding_set, sigma_min, rise_min, omega_d_min)
    region = SpecRegion(
        min_damping_ratio=zeta if spec.overshoot_percent is not None else 0.0,
        min_real_part=sigma_min,
        min_natural_frequency=(
            normalized_rise_time(zeta if spec.overshoot_percent is not None else 0.0)
            / spec.rise_time
            if spec.rise_time is not None
            else 0.0
        ),
        min_damped_frequency=omega_d_min,
        rise_time=spec.rise_time,
    )
    natural = math.hypot(sigma, omega_d)
    return DominantPair(
        damping_ratio=sigma / natural,
        natural_frequency=natural,
        real_part=sigma,
        damped_frequency=omega_d,
        poles=(complex(-sigma, omega_d), complex(-sigma, -omega_d)),
        binding=binding,
        formulas=formulas,
        region=region,
        defaults_used=tuple(defaults),
    )


def _formula_rows(
    spec: Specifications,
    zeta: float,
    predicted: dict[str, float],
    binding: set[str],
    sigma_min: float,
    rise_min: float,
    omega_d_min: float,
) -> tuple[SpecFormula, ...]:
    """Build one memo row per given specification."""
    rows = []

    def add(key: str, bound: str, value: float, latex: str, text: str, source: str) -> None:
        requested = float(getattr(spec, key))
        rows.append(
            SpecFormula(
                spec=key,
                requested=requested,
                bound=bound,
                bound_value=value,
                formula_latex=latex,
                formula_text=text,
                source=source,
                predicted=predicted[key],
                passed=predicted[key] <= requested * (1.0 + _REL_TOL),
                binding=key in binding,
            )
        )

    if spec.overshoot_percent is not None:
        add(
            "overshoot_percent",
            f"zeta >= {zeta:.4f}",
            zeta,
            r"\zeta = \frac{-\ln(\%OS/100)}{\sqrt{\pi^2+\ln^2(\%OS/100)}}",
            "zeta = -ln(%OS/100) / sqrt(pi^2 + ln^2(%OS/100))",
            _SOURCE_OVERSHOOT,
        )
    if spec.settling_time is not None:
        constant = _SETTLING_CONSTANT[spec.settling_band]
        percent = round(spec.settling_band * 100)
        add(
            "settling_time",
            f"sigma >= {sigma_min:.4g} 1/s",
            sigma_min,
            rf"\sigma \ge \frac{{{constant:g}}}{{T_s}}",
            f"sigma >= {constant:g} / T_s ({percent} % band)",
            _SOURCE_SETTLING[spec.settling_band],
        )
    if spec.rise_time is not None:
        add(
            "rise_time",
            f"omega_n >= {rise_min:.4g} rad/s (at zeta = {zeta:.4f})",
            rise_min,
            r"\omega_n \ge \frac{1.768\zeta^3 - 0.417\zeta^2 + 1.039\zeta + 1}{T_r}",
            "omega_n >= (1.768 zeta^3 - 0.417 zeta^2 + 1.039 zeta + 1) / T_r",
            _SOURCE_RISE,
        )
    if spec.peak_time is not None:
        add(
            "peak_time",
            f"omega_d >= {omega_d_min:.4g} rad/s",
            omega_d_min,
            r"\omega_d \ge \frac{\pi}{T_p}",
            "omega_d >= pi / T_p",
            _SOURCE_PEAK,
        )
    return tuple(rows)


# --------------------------------------------------------------------------
# Remaining poles
# --------------------------------------------------------------------------
def remaining_poles(pair: DominantPair, count: int, factor: float = 5.0) -> tuple[complex, ...]:
    """Default places for the ``count`` closed-loop poles beyond the dominant pair.

    Parameters
    ----------
    pair : DominantPair
        The dominant pair.
    count : int
        Number of further poles, ``n - 2`` for an ``n``-state plant; ``>= 0``.
    factor : float, default 5.0
        How many times farther from the imaginary axis than the pair the
        nearest further pole lies; finite and ``>= 1``.  Below about 5 the
        pair no longer dominates clearly (common practice, no source).

    Returns
    -------
    tuple of complex
        Real poles ``-factor*sigma*(1 + 0.1*k)``, ``k = 0 .. count-1``, each
        rounded away from zero to three significant figures.

    Raises
    ------
    ValueError
        When ``count`` is not a non-negative integer or ``factor`` is not a
        finite number of at least 1.

    Notes
    -----
    The rule is a default; the design file may give explicit poles instead.
    A factor of 5 is common practice, no source: the further poles decay
    about five times faster than the dominant pair, so the second-order
    predictions stay roughly right.  The 10 % spread keeps the poles
    distinct, so numeric pole placement and eigenvalue checks stay well
    conditioned (SciPy 1.17's ``place_poles`` was measured to fail silently
    for poles 1e-8 apart).  Rounding away from zero only makes them faster.
    Fast poles need large gains: check actuator limits and noise.

    Examples
    --------
    >>> pair = dominant_pair(Specifications(settling_time=2.0))
    >>> remaining_poles(pair, 2)
    ((-10+0j), (-11+0j))
    """
    if isinstance(count, bool) or not isinstance(count, int) or count < 0:
        raise ValueError(f"count must be a non-negative integer, got {count!r}")
    if (
        isinstance(factor, bool)
        or not isinstance(factor, Real)
        or not math.isfinite(factor)
        or factor < 1.0
    ):
        raise ValueError(f"factor must be a finite number >= 1, got {factor!r}")
    # p_k = -factor * sigma * (1 + 0.1 k)   (common practice, no source)
    return tuple(
        complex(-round_sig3(float(factor) * pair.real_part * (1.0 + 0.1 * k), up=True), 0.0)
        for k in range(count)
    )


# --------------------------------------------------------------------------
# Exact metrics of the standard second-order step response
# --------------------------------------------------------------------------
def _step_response(zeta: float, omega_n: float):
    """Closed-form unit step response and its derivative (the impulse response)."""
    if zeta < 1.0:
        sigma = zeta * omega_n
        omega_d = omega_n * math.sqrt((1.0 - zeta) * (1.0 + zeta))

        def response(t: float) -> float:
            # y = 1 - e^{-sigma t} (cos wd t + (sigma/wd) sin wd t)
            return 1.0 - math.exp(-sigma * t) * (
                math.cos(omega_d * t) + sigma / omega_d * math.sin(omega_d * t)
            )

        def slope(t: float) -> float:
            # y' = (omega_n^2/omega_d) e^{-sigma t} sin wd t
            return omega_n * omega_n / omega_d * math.exp(-sigma * t) * math.sin(omega_d * t)

    elif zeta == 1.0:

        def response(t: float) -> float:
            # y = 1 - e^{-wn t}(1 + wn t)
            return 1.0 - math.exp(-omega_n * t) * (1.0 + omega_n * t)

        def slope(t: float) -> float:
            return omega_n * omega_n * t * math.exp(-omega_n * t)

    else:
        spread = omega_n * math.sqrt((zeta - 1.0) * (zeta + 1.0))
        fast = zeta * omega_n + spread  # poles at -slow and -fast
        slow = omega_n * omega_n / fast  # = zeta*omega_n - spread, without cancellation

        def response(t: float) -> float:
            # y = 1 - (fast e^{-slow t} - slow e^{-fast t}) / (fast - slow)
            return 1.0 - (fast * math.exp(-slow * t) - slow * math.exp(-fast * t)) / (fast - slow)

        def slope(t: float) -> float:
            return slow * fast * (math.exp(-slow * t) - math.exp(-fast * t)) / (fast - slow)

    return response, slope


def second_order_step_metrics(
    damping_ratio: float, natural_frequency: float, band: float = 0.02
) -> dict[str, float]:
    """Exact step-response metrics of ``omega_n**2/(s**2 + 2*zeta*omega_n*s + omega_n**2)``.

    Computed from the closed-form response by root finding, not from the
    approximate formulas, so the tests can use it to measure them.

    Parameters
    ----------
    damping_ratio : float
        ``zeta > 0``.
    natural_frequency : float
        ``omega_n > 0`` in rad/s.
    band : float, default 0.02
        Settling band as a fraction of the final value, ``0 < band < 1``.

    Returns
    -------
    dict
        ``overshoot_percent`` (0.0 when ``zeta >= 1``), ``peak_time`` (s;
        ``inf`` when ``zeta >= 1``), ``rise_time`` (s, 10-90 %) and
        ``settling_time`` (s, the last time ``|y - 1|`` leaves the band).

    Raises
    ------
    ValueError
        For ``zeta <= 0``, ``omega_n <= 0``, non-finite input or a band
        outside ``(0, 1)``.

    Notes
    -----
    Underdamped case, with ``sigma = zeta*omega_n`` and
    ``omega_d = omega_n*sqrt(1 - zeta**2)``:
    ``y(t) = 1 - exp(-sigma*t)*(cos(omega_d*t) + sigma/omega_d*sin(omega_d*t))``
    and ``y'(t) = (omega_n**2/omega_d)*exp(-sigma*t)*sin(omega_d*t)``
    (Nise, Sec. 4.6).

    * Peak: the first zero of ``y'`` after ``t = 0``, bracketed by sampling
      ``y'`` on a grid and refined with Brent's method; overshoot is
      ``100*(y(t_peak) - 1)``.  Neither uses the ``pi/omega_d`` formula.
    * Rise: ``y`` increases on ``[0, t_peak]`` from 0 to above 1, so the 10 %
      and 90 % crossings are unique there and found by Brent's method.
    * Settling: the error ``y - 1`` has its local extremes at the zeros of
      ``y'``, ``t_k = k*pi/omega_d``, with ``|y(t_k) - 1| = exp(-sigma*t_k)``.
      With ``k`` the last index whose extreme exceeds the band, ``|y - 1|``
      falls monotonically from ``t_k`` to the next zero of ``y - 1``, and
      the band crossing there (Brent's method) is the settling time.

    For ``zeta >= 1`` the response rises monotonically to 1; rise and
    settling are single crossings.

    References
    ----------
    .. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
       Sec. 4.6 (closed-form underdamped step response).
    .. [2] R. P. Brent, *Algorithms for Minimization without Derivatives*,
       Prentice-Hall, 1973, Ch. 4 (the root finder behind
       ``scipy.optimize.brentq``).

    Examples
    --------
    >>> metrics = second_order_step_metrics(0.5, 1.0)
    >>> round(metrics["overshoot_percent"], 3), round(metrics["peak_time"], 4)
    (16.303, 3.6276)
    """
    from scipy.optimize import brentq  # here: SciPy loads in the sidecar (symbolic.runtime.sidecar)

    zeta = float(damping_ratio)
    omega_n = float(natural_frequency)
    band = float(band)
    if not (math.isfinite(zeta) and zeta > 0.0):
        raise ValueError(f"damping ratio must be finite and > 0, got {damping_ratio!r}")
    if not (math.isfinite(omega_n) and omega_n > 0.0):
        raise ValueError(f"natural frequency must be finite and > 0, got {natural_frequency!r}")
    if not (math.isfinite(band) and 0.0 < band < 1.0):
        raise ValueError(f"band must lie in (0, 1), got {band!r}")

    response, slope = _step_response(zeta, omega_n)

    def crossing(level: float, low: float, high: float) -> float:
        return brentq(lambda t: response(t) - level, low, high, xtol=1e-15, rtol=1e-14, maxiter=200)

    if zeta < 1.0:
        sigma = zeta * omega_n
        omega_d = omega_n * math.sqrt((1.0 - zeta) * (1.0 + zeta))
        # Peak: bracket the first sign change of y' on a grid (no closed form used).
        period_guess = 2.0 * math.pi / omega_d
        grid = np.linspace(0.0, period_guess, 257)[1:]
        signs = np.array([slope(t) for t in grid])
        index = int(np.argmax(signs <= 0.0))
        peak_time = brentq(slope, grid[index - 1], grid[index], xtol=1e-15, rtol=1e-14)
        overshoot = 100.0 * (response(peak_time) - 1.0)
        rise = crossing(0.9, 0.0, peak_time) - crossing(0.1, 0.0, peak_time)
        # Settling: last extreme above the band, then the band crossing after it.
        ratio = math.log(1.0 / band) * omega_d / (sigma * math.pi)
        last = max(math.ceil(ratio) - 1, 0)
        phase = math.atan2(sigma, omega_d)
        start = last * math.pi / omega_d
        zero = (phase + math.pi / 2.0 + last * math.pi) / omega_d

        def excess(t: float) -> float:
            return abs(response(t) - 1.0) - band

        settling = brentq(excess, start, zero, xtol=1e-15, rtol=1e-14, maxiter=200)
        return {
            "overshoot_percent": overshoot,
            "peak_time": peak_time,
            "rise_time": rise,
            "settling_time": settling,
        }

    # zeta >= 1: monotone rise to 1.
    horizon = 1.0 / omega_n
    while response(horizon) < 1.0 - min(band, 0.1) / 2.0:
        horizon *= 2.0
    rise = crossing(0.9, 0.0, horizon) - crossing(0.1, 0.0, horizon)
    settling = crossing(1.0 - band, 0.0, horizon)
    return {
        "overshoot_percent": 0.0,
        "peak_time": math.inf,
        "rise_time": rise,
        "settling_time": settling,
    }
