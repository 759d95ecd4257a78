"""Exact step-response metrics of the standard second-order system.

``omega_n**2 / (s**2 + 2*zeta*omega_n*s + omega_n**2)``: overshoot, peak time, 10-90 % rise
time and settling time from the closed-form response by root finding, not from the
approximate formulas of :mod:`symbolic.derivation.specs`, so that the pole choice can predict
an exact settling time and the tests can measure the approximations.

References
----------
.. [1] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015,
   Sec. 4.6 (closed-form underdamped step response).
.. [2] R. P. Brent, *Algorithms for Minimization without Derivatives*,
   Prentice-Hall, 1973, Ch. 4 (the root finder behind
   ``scipy.optimize.brentq``).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["second_order_step_metrics"]


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
    The underdamped case is :func:`_underdamped_metrics`.  For ``zeta >= 1`` the response
    rises monotonically to 1; rise and settling are single crossings.

    References
    ----------
    See the module references [1] and [2].

    Examples
    --------
    >>> metrics = second_order_step_metrics(0.5, 1.0)
    >>> round(metrics["overshoot_percent"], 3), round(metrics["peak_time"], 4)
    (16.303, 3.6276)
    """
    zeta = float(damping_ratio)
    omega_n = float(natural_frequency)
    band = float(band)
    if not (math.isfinite(zeta) and zeta > 0.0):
        raise ValueError(f"damping ratio must be finite and > 0, got {damping_ratio!r}")
    if not (math.isfinite(omega_n) and omega_n > 0.0):
        raise ValueError(f"natural frequency must be finite and > 0, got {natural_frequency!r}")
    if not (math.isfinite(band) and 0.0 < band < 1.0):
        raise ValueError(f"band must lie in (0, 1), got {band!r}")
    if zeta < 1.0:
        return _underdamped_metrics(zeta, omega_n, band)
    return _monotone_metrics(zeta, omega_n, band)


def _crossing(response, level: float, low: float, high: float) -> float:
    """The time in ``[low, high]`` where ``response`` crosses ``level`` (Brent's method)."""
    from scipy.optimize import brentq  # here: SciPy loads in the sidecar (symbolic.runtime.sidecar)

    return brentq(lambda t: response(t) - level, low, high, xtol=1e-15, rtol=1e-14, maxiter=200)


def _underdamped_metrics(zeta: float, omega_n: float, band: float) -> dict[str, float]:
    """The metrics for ``0 < zeta < 1``.

    With ``sigma = zeta*omega_n`` and ``omega_d = omega_n*sqrt(1 - zeta**2)``:
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
    """
    from scipy.optimize import brentq  # here: SciPy loads in the sidecar (symbolic.runtime.sidecar)

    response, slope = _step_response(zeta, omega_n)
    sigma = zeta * omega_n
    omega_d = omega_n * math.sqrt((1.0 - zeta) * (1.0 + zeta))
    # Peak: bracket the first sign change of y' on a grid (no closed form used).
    period_guess = 2.0 * math.pi / omega_d
    grid = np.linspace(0.0, period_guess, 257)[1:]
    signs = np.array([slope(t) for t in grid])
    index = int(np.argmax(signs <= 0.0))
    peak_time = brentq(slope, grid[index - 1], grid[index], xtol=1e-15, rtol=1e-14)
    overshoot = 100.0 * (response(peak_time) - 1.0)
    rise = _crossing(response, 0.9, 0.0, peak_time) - _crossing(response, 0.1, 0.0, peak_time)
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


def _monotone_metrics(zeta: float, omega_n: float, band: float) -> dict[str, float]:
    """The metrics for ``zeta >= 1``: a monotone rise to 1, no overshoot and no peak."""
    response, _slope = _step_response(zeta, omega_n)
    horizon = 1.0 / omega_n
    while response(horizon) < 1.0 - min(band, 0.1) / 2.0:
        horizon *= 2.0
    rise = _crossing(response, 0.9, 0.0, horizon) - _crossing(response, 0.1, 0.0, horizon)
    settling = _crossing(response, 1.0 - band, 0.0, horizon)
    return {
        "overshoot_percent": 0.0,
        "peak_time": math.inf,
        "rise_time": rise,
        "settling_time": settling,
    }
