"""Time-domain specifications: the second-order formulas and the records of the chosen pair.

The engineer writes step-response specifications in the ``[controller]``
table of a design file (``overshoot_percent``, ``settling_time`` with
``settling_band``, ``rise_time``, ``peak_time``).  This module holds the
standard second-order formulas that turn each of them into a bound on a
dominant complex pole pair ``-sigma +/- j*omega_d``, and the records of the
pair chosen from them (:class:`DominantPair`, one :class:`SpecFormula` per
specification, the :class:`SpecRegion`).  The choice itself is made by
:func:`symbolic.derivation.dominant.dominant_pair`; the exact metrics the
formulas are measured against are in :mod:`symbolic.derivation.second_order`.

Pure numerics (math); no SymPy.

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
from dataclasses import dataclass
from numbers import Real

from ..runtime.errors import SpecificationError

__all__ = [
    "DEFAULT_DAMPING_RATIO",
    "RELATIVE_TOLERANCE",
    "RISE_FIT_RANGE",
    "SETTLING_CONSTANT",
    "DominantPair",
    "SpecFormula",
    "SpecRegion",
    "damping_ratio_from_overshoot",
    "normalized_rise_time",
    "overshoot_from_damping_ratio",
    "overshoot_log",
    "settling_real_part",
]

#: Damping ratio used when no overshoot is specified: 1/sqrt(2) (common
#: practice, no source).  It gives about 4.3 % overshoot.
DEFAULT_DAMPING_RATIO = 1.0 / math.sqrt(2.0)

#: Numerator of the settling-time approximation sigma*T_s = constant.
#: 2 %: 4 (Nise, Sec. 4.6); 1 %: 4.6 (Franklin, Sec. 3.4).
SETTLING_CONSTANT = {0.02: 4.0, 0.01: 4.6}

# Cubic fit of the normalized 10-90 % rise time omega_n*T_r in zeta,
# Nise, Sec. 4.6 (fit to the normalized rise-time curve; from memory).
_RISE_FIT = (1.768, -0.417, 1.039, 1.0)  # zeta^3, zeta^2, zeta, 1
#: The damping ratios the rise-time fit was made for.
RISE_FIT_RANGE = (0.1, 0.9)

#: Relative tolerance of every comparison of a prediction with its specification.
RELATIVE_TOLERANCE = 1e-9


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
        lower = 1.0 - RELATIVE_TOLERANCE
        if zeta < self.min_damping_ratio * lower:
            return False
        if sigma < self.min_real_part * lower:
            return False
        if omega_d < self.min_damped_frequency * lower:
            return False
        if self.rise_time is not None:
            if normalized_rise_time(zeta) / omega_n > self.rise_time * (1.0 + RELATIVE_TOLERANCE):
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
def overshoot_log(overshoot_percent: float) -> float:
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
    log_term = overshoot_log(overshoot_percent)
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
    (computed by
    :func:`~symbolic.derivation.second_order.second_order_step_metrics`) satisfies
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
    if band not in SETTLING_CONSTANT:
        raise SpecificationError(f"expected 0.02 or 0.01, got {band!r}", key="settling_band")
    # sigma = 4/T_s (2 %, Nise Sec. 4.6); sigma = 4.6/T_s (1 %, Franklin Sec. 3.4)
    return SETTLING_CONSTANT[band] / float(settling_time)


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
    (:func:`~symbolic.derivation.second_order.second_order_step_metrics`), the worst relative error over
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
