"""Figures of merit of a simulated step response: overshoot, settling, rise and peak times.

Definitions, with ``y`` the tracked output, ``y_f`` its exact final value
(``response.final_value``, from the closed-loop DC gain, not the last sample) and
``s = sign(y_f)`` so that the response is measured in the direction of the step
(Ogata [1] Sec. 5-3, Nise [2] Sec. 4.6):

* ``overshoot_percent = 100 (max s y - |y_f|) / |y_f|``, 0 when the response never passes
  ``y_f``; the maximum is refined by a parabola through the top sample and its neighbours.
* ``undershoot_percent = 100 max(0, -min s y) / |y_f|`` (a start in the wrong direction).
* ``peak_time``: time of that maximum; None when there is no overshoot.
* ``settling_time_2pct`` / ``settling_time_1pct``: the last time ``|y - y_f|`` exceeds
  2 % / 1 % of ``|y_f|`` (linear interpolation between samples); None when the run ends
  outside the band.
* ``rise_time``: from the first time ``s y`` reaches 10 % of ``|y_f|`` to the first time it
  reaches 90 % (linear interpolation); None when 90 % is never reached.
* ``steady_state_error = reference - y_f``.
* ``peak_control = max |u_i(t_k)|`` over all inputs and samples.
* ``estimation_settling_time``: the first time after which ``||x - x_hat||`` stays below 2 %
  of its initial value (linear interpolation); None for the true-state case, when the initial
  error is zero, or when the run ends above 2 %.

References
----------
.. [1] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 5-3
   (transient-response specifications: rise, peak and settling time, maximum overshoot).
.. [2] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015, Sec. 4.6 (10-90 % rise
   time, settling time as the time to stay within a band about the final value).
"""

from __future__ import annotations

import math

import numpy as np

from ..runtime.errors import DesignFileError
from .step_results import Response, StepMetrics

__all__ = ["step_metrics"]


def _crossing_up(time: np.ndarray, values: np.ndarray, level: float) -> float | None:
    """First time ``values`` reaches ``level`` from below, interpolated linearly."""
    hits = np.flatnonzero(values >= level)
    if hits.size == 0:
        return None
    i = int(hits[0])
    if i == 0:
        return float(time[0])
    v0, v1 = values[i - 1], values[i]
    return float(time[i - 1] + (time[i] - time[i - 1]) * (level - v0) / (v1 - v0))


def _last_exit(time: np.ndarray, error: np.ndarray, band: float) -> float | None:
    """Time after which ``|error| <= band`` for good, interpolated linearly.

    None when the last sample is still outside the band (not settled within the run).
    """
    outside = np.flatnonzero(np.abs(error) > band)
    if outside.size == 0:
        return float(time[0])
    j = int(outside[-1])
    if j == error.size - 1:
        return None
    e0, e1 = error[j], error[j + 1]
    edge = math.copysign(band, e0)
    return float(time[j] + (time[j + 1] - time[j]) * (e0 - edge) / (e0 - e1))


def _refined_peak(time: np.ndarray, values: np.ndarray) -> tuple[float, float]:
    """Largest value and its time; refined by the parabola through the top sample and its
    two neighbours (exact for a locally quadratic response)."""
    i = int(np.argmax(values))
    if i == 0 or i == values.size - 1:
        return float(values[i]), float(time[i])
    t = time[i - 1 : i + 2]
    v = values[i - 1 : i + 2]
    # Vertex of the Lagrange parabola through (t_k, v_k), k = 0, 1, 2.
    d1 = (v[1] - v[0]) / (t[1] - t[0])
    d2 = (v[2] - v[1]) / (t[2] - t[1])
    curvature = (d2 - d1) / (t[2] - t[0])
    if curvature >= 0.0:
        return float(values[i]), float(time[i])
    # p(t) = v0 + d1 (t - t0) + curvature (t - t0)(t - t1)
    # p'(t) = d1 + curvature (2 t - t0 - t1) = 0
    t_peak = 0.5 * (t[0] + t[1]) - d1 / (2.0 * curvature)
    t_peak = float(np.clip(t_peak, t[0], t[2]))
    v_peak = v[0] + d1 * (t_peak - t[0]) + curvature * (t_peak - t[0]) * (t_peak - t[1])
    return float(max(v_peak, v[1])), t_peak


def step_metrics(response: Response, *, reference: float | None = None) -> StepMetrics:
    """Figures of merit of the tracked output of a step response.

    Parameters
    ----------
    response : Response
        A result of :func:`~symbolic.verification.stepping.simulate_step` or
        :func:`~symbolic.verification.step_cases.simulate_cases`.
    reference : float, optional
        Height of the reference step; by default the one the response was simulated with.

    Returns
    -------
    StepMetrics

    Notes
    -----
    The figures are those defined in the module docstring (Ogata [1] Sec. 5-3, Nise [2]
    Sec. 4.6).  When ``y_f`` is unknown (unstable loop, run stopped early, unreachable with a
    limit) or zero, every figure relative to it is None; ``notes`` says why.

    References
    ----------
    See the module references [1], [2].

    Examples
    --------
    >>> from symbolic.verification.stepping import simulate_step
    >>> from symbolic.verification.step_results import LoopModel
    >>> stage = LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                   K=[[2, 3.5]], L=[[19.5], [88.25]], reference_gain=[[4]])
    >>> figures = step_metrics(simulate_step(stage, use_observer=False, samples=4001))
    >>> figures.overshoot_percent, figures.peak_time    # poles -2, -2: no overshoot
    (0.0, None)
    >>> round(figures.rise_time, 3)                     # 3.357 / 2 for a double pole at -2
    1.679
    """
    if not isinstance(response, Response):
        raise DesignFileError(f"expected a Response, got {type(response).__name__}", key="response")
    ref = response.reference if reference is None else float(reference)
    notes: list[str] = []
    y_f = response.final_value
    common = {
        "peak_control": float(np.max(np.abs(response.control))) if response.control.size else None,
        "estimation_settling_time": _estimation_settling(response, notes),
        "final_value": y_f,
        "reference": ref,
    }
    reason = _undefined_reason(response)
    if reason is not None:
        notes.append(f"no final value ({reason}); step figures undefined")
        return _undefined(common, None, notes)
    zero_tol = 1e-12 * max(abs(ref), float(np.max(np.abs(response.tracked_output))), 1e-300)
    if abs(y_f) <= zero_tol:
        notes.append("the final value is zero; figures relative to it are undefined")
        return _undefined(common, ref - y_f, notes)
    figures = _step_figures(response.time, response.tracked_output, y_f, notes)
    return StepMetrics(**figures, steady_state_error=ref - y_f, **common, notes=tuple(notes))


def _estimation_settling(response: Response, notes: list[str]) -> float | None:
    """``estimation_settling_time`` (module docstring); a note when the run ends above 2 %."""
    if response.estimation_error_norm is None or not response.estimation_error_norm.size:
        return None
    time = response.time
    norms = response.estimation_error_norm
    scale = max(
        float(np.max(np.linalg.norm(response.state, axis=1))), abs(response.reference), 1e-300
    )
    if not norms[0] > 1e-14 * scale:
        return None
    settling = _last_exit(time, norms, 0.02 * float(norms[0]))
    if settling is None:
        notes.append("the estimation error is still above 2 % at the end of the run")
    return settling


def _undefined_reason(response: Response) -> str | None:
    """Why the step figures are undefined (no usable final value), or None when they are not."""
    if (
        response.final_value is not None
        and not response.stopped_early
        and response.tracked_output.size >= 2
    ):
        return None
    if not response.stable:
        return "the loop is not stable"
    if response.stopped_early:
        return "the run stopped early"
    if response.final_value is None:
        return "the final value is not reachable"
    return "too few samples"


def _undefined(common: dict, steady_state_error: float | None, notes: list[str]) -> StepMetrics:
    """The metrics when the figures relative to the final value are undefined."""
    return StepMetrics(
        overshoot_percent=None,
        settling_time_2pct=None,
        settling_time_1pct=None,
        rise_time=None,
        peak_time=None,
        steady_state_error=steady_state_error,
        undershoot_percent=None,
        **common,
        notes=tuple(notes),
    )


def _step_figures(time: np.ndarray, y: np.ndarray, y_f: float, notes: list[str]) -> dict:
    """Overshoot, undershoot, peak, settling and rise times about a non-zero final value."""
    size = abs(y_f)
    direction = math.copysign(1.0, y_f)
    along = direction * y
    peak_value, peak_at = _refined_peak(time, along)
    if peak_value > size * (1.0 + 1e-9):
        overshoot = 100.0 * (peak_value - size) / size
        peak_time: float | None = peak_at
    else:
        overshoot = 0.0
        peak_time = None
    undershoot = 100.0 * max(0.0, -float(np.min(along))) / size
    settling_2 = _last_exit(time, y - y_f, 0.02 * size)
    settling_1 = _last_exit(time, y - y_f, 0.01 * size)
    if settling_2 is None:
        notes.append("the response is still outside the 2 % band at the end of the run")
    elif settling_1 is None:
        notes.append("the response is still outside the 1 % band at the end of the run")
    t10 = _crossing_up(time, along, 0.1 * size)
    t90 = _crossing_up(time, along, 0.9 * size)
    return {
        "overshoot_percent": overshoot,
        "settling_time_2pct": settling_2,
        "settling_time_1pct": settling_1,
        "rise_time": None if t10 is None or t90 is None else t90 - t10,
        "peak_time": peak_time,
        "undershoot_percent": undershoot,
    }
