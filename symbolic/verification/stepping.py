"""Closed-loop step simulation of an observer-based state-feedback design.

The loop simulated here is the plant

.. math::  \\dot x = A x + B u, \\qquad y = C x + D u,

driven by the control law :math:`u = -K \\hat x + N r` with a full-order (Luenberger) observer

.. math::  \\dot{\\hat x} = A \\hat x + B u + L (y - C \\hat x - D u),

and a step reference :math:`r(t) = r \\cdot 1(t)` applied at :math:`t = 0`.  Without a limit on
``u`` this loop is linear and time-invariant with a constant input, so it is stepped *exactly*
(zero-order-hold stepping, exact at the samples for any step size) with one matrix exponential
per case (Van Loan's augmented matrix [1]; :mod:`symbolic.verification.linear_stepping`, with the
loop matrices of :mod:`symbolic.verification.stacked_loop`).  With a limit ``u_max`` the loop is
nonlinear and is integrated with :func:`scipy.integrate.solve_ivp` (LSODA [3];
:mod:`symbolic.verification.saturated`).

*Divergence.*  Both paths stop at the first sample where ``max |z_i|`` passes
:data:`~symbolic.verification.linear_stepping.STATE_LIMIT`; the arrays are then shorter than
``samples`` and ``stopped_early`` is set.

*Final value.*  For a stable loop the exact equilibrium ``x_ss = -(A - B K)^{-1} B N r`` gives
``final_value = (C - D K) x_ss + D N r`` (tracked row).  With a limit it is kept only if
``|u_ss| <= u_max``; the limited loop need not reach it from every start, which the response
itself shows.

The module works on NumPy arrays only.  Bad arguments raise
:class:`~symbolic.runtime.errors.DesignFileError` (a ``ValueError``) whose ``key`` names the
offending argument; an unstable loop or a run stopped because the state grew past the state
limit gives a :class:`~symbolic.runtime.errors.GainsmithWarning` and a note in the result.

Caution: a simulated step response is a model result.  Before a loop built from these gains
drives a machine that moves, heats or flies, check it against the real plant with reduced limits,
with an independent emergency stop, and with the actuator limits, delays and sensor noise that the
linear model leaves out.

References
----------
.. [1] C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE Transactions
   on Automatic Control 23(3):395-404, 1978. doi:10.1109/TAC.1978.1101743
.. [2] D. G. Luenberger, "An introduction to observers", IEEE Transactions on Automatic Control
   16(6):596-602, 1971. doi:10.1109/TAC.1971.1099826
.. [3] L. R. Petzold, "Automatic selection of methods for solving stiff and nonstiff systems of
   ordinary differential equations", SIAM Journal on Scientific and Statistical Computing
   4(1):136-148, 1983 (LSODA, as wrapped by ``scipy.integrate.solve_ivp``).
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Sequence

import numpy as np

from ..runtime.errors import DesignFileError, GainsmithWarning
from .horizon import horizon_from_eigenvalues
from .linear_stepping import STATE_LIMIT, step_linear
from .saturated import SATURATED_ATOL, SATURATED_RTOL, integrate_saturated
from .stacked_loop import StackedLoop, is_stable, stacked_loop, steady_state
from .step_results import LoopModel, Response, frozen_array

__all__ = [
    "CASE_NAMES",
    "MAX_SAMPLES",
    "check_vector",
    "simulate_step",
]

#: Largest number of samples accepted (memory guard: 2n x samples floats per array).
MAX_SAMPLES = 2_000_000

CASE_NAMES = {
    "state_feedback": "state feedback (true state)",
    "observer_matched": "observer, matched estimate",
    "observer_mismatched": "observer, mismatched estimate",
}

_SLUG = re.compile(r"^[a-z][a-z0-9_]{0,63}$")


# --------------------------------------------------------------------------------------------
# Arguments
# --------------------------------------------------------------------------------------------


def check_vector(value: object, n: int, key: str, problems: list[str]) -> np.ndarray | None:
    """``value`` as a finite real vector of length ``n`` (None when not given).

    A value that is not such a vector adds a line to ``problems`` and gives None.
    """
    if value is None:
        return None
    try:
        raw = np.asarray(value)
        if np.iscomplexobj(raw):
            raise TypeError("complex entries")
        array = np.array(raw, dtype=float)
    except (TypeError, ValueError) as exc:
        problems.append(f"{key}: expected {n} real numbers ({exc})")
        return None
    if array.ndim == 2 and 1 in array.shape:
        array = array.reshape(-1)
    if array.shape != (n,):
        problems.append(f"{key}: expected a vector of length {n}, got shape {raw.shape}")
        return None
    if not np.all(np.isfinite(array)):
        problems.append(f"{key}: has non-finite entries")
        return None
    return array


def _check_positive(value: object, key: str, problems: list[str]) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        problems.append(f"{key}: expected a positive number, got {value!r}")
        return None
    number = float(value)
    if not math.isfinite(number) or number <= 0.0:
        problems.append(f"{key}: expected a positive finite number, got {value!r}")
        return None
    return number


def _check_limit(u_max: object, m: int, problems: list[str]) -> np.ndarray | None:
    """The input limit as ``m`` positive numbers (one number applies to every input)."""
    if u_max is None:
        return None
    try:
        raw = np.asarray(u_max)
        if np.iscomplexobj(raw) or raw.dtype == bool:
            raise TypeError("not a real number")
        limit = np.broadcast_to(np.array(raw, dtype=float), (m,)).copy()
    except (TypeError, ValueError) as exc:
        problems.append(f"u_max: expected one positive number or {m} of them ({exc})")
        return None
    if not np.all(np.isfinite(limit)) or np.any(limit <= 0.0):
        problems.append(f"u_max: expected positive finite limits, got {u_max!r}")
        return None
    return limit


def _validate_run(
    model: LoopModel,
    reference: object,
    x0: object,
    xhat0: object,
    horizon: object,
    samples: object,
    u_max: object,
    use_observer: bool,
    name: object,
    slug: object,
) -> tuple[float, np.ndarray, np.ndarray | None, float | None, int, np.ndarray | None]:
    """The checked arguments of :func:`simulate_step`: ``(reference, x0, xhat0, horizon,
    samples, limit)``; one error listing every problem."""
    problems: list[str] = []
    if not isinstance(model, LoopModel):
        raise DesignFileError(f"expected a LoopModel, got {type(model).__name__}", key="model")
    n, m = model.n_states, model.n_inputs
    ref: float = 0.0
    if isinstance(reference, bool) or not isinstance(
        reference, int | float | np.integer | np.floating
    ):
        problems.append(f"reference: expected a real number, got {reference!r}")
    elif not math.isfinite(float(reference)):
        problems.append(f"reference: expected a finite number, got {reference!r}")
    else:
        ref = float(reference)
    x0_array = check_vector(x0, n, "x0", problems)
    xhat0_array = check_vector(xhat0, n, "xhat0", problems)
    if xhat0 is not None and not use_observer:
        problems.append("xhat0: an initial estimate needs use_observer=True")
    horizon_value = _check_positive(horizon, "horizon", problems)
    if isinstance(samples, bool) or not isinstance(samples, int | np.integer):
        problems.append(f"samples: expected an integer, got {samples!r}")
        sample_count = 0
    elif not 2 <= int(samples) <= MAX_SAMPLES:
        problems.append(f"samples: expected 2..{MAX_SAMPLES}, got {samples}")
        sample_count = 0
    else:
        sample_count = int(samples)
    limit = _check_limit(u_max, m, problems)
    if name is not None and (not isinstance(name, str) or not name.isprintable() or not name):
        problems.append(f"name: expected a non-empty printable string, got {name!r}")
    if slug is not None and (not isinstance(slug, str) or not _SLUG.match(slug)):
        problems.append(f"slug: expected lower-case letters, digits and underscores, got {slug!r}")
    if problems:
        key = problems[0].split(":", 1)[0] if len(problems) == 1 else None
        raise DesignFileError("simulation rejected: " + "; ".join(problems), key=key)
    x0_final = x0_array if x0_array is not None else np.zeros(n)
    return ref, x0_final, xhat0_array, horizon_value, sample_count, limit


# --------------------------------------------------------------------------------------------
# Simulation
# --------------------------------------------------------------------------------------------


def simulate_step(
    model: LoopModel,
    *,
    reference: float = 1.0,
    x0: Sequence[float] | np.ndarray | None = None,
    xhat0: Sequence[float] | np.ndarray | None = None,
    horizon: float | None = None,
    samples: int = 2001,
    use_observer: bool = True,
    u_max: float | Sequence[float] | np.ndarray | None = None,
    name: str | None = None,
    slug: str | None = None,
) -> Response:
    """Simulate the response of the loop to a step of the reference at ``t = 0``.

    Parameters
    ----------
    model : LoopModel
        The loop.
    reference : float, optional
        Height of the reference step (default 1).
    x0 : array_like, shape (n,), optional
        Initial plant state (default zero).
    xhat0 : array_like, shape (n,), optional
        Initial estimate (default ``x0``, a matched estimate); only with ``use_observer``.
    horizon : float, optional
        Simulated time (default :func:`~symbolic.verification.horizon.default_horizon`).
    samples : int, optional
        Number of samples on the uniform grid ``linspace(0, horizon, samples)`` (default 2001).
    use_observer : bool, optional
        Feed back the estimate (default) or the true state (``u = -K x + N r``).
    u_max : float or array_like, shape (m,), optional
        Limit ``|u_i| <= u_max_i`` on the applied input; None for the linear loop.
    name, slug : str, optional
        Labels of the result; by default chosen from the case (see :data:`CASE_NAMES`).

    Returns
    -------
    Response

    Raises
    ------
    DesignFileError
        For a bad argument (non-positive horizon, wrong vector length, too few samples, a
        non-positive limit ...), listing every problem at once.

    Warns
    -----
    GainsmithWarning
        The closed loop is not stable; the state passed :data:`STATE_LIMIT` and the run stopped;
        with a limit, holding the reference needs more than ``u_max``; the integrator failed.

    Notes
    -----
    The method (exact stepping, or LSODA with a limit), the divergence stop and the final
    value are described in the module docstring (Van Loan [1], Luenberger [2]).

    Examples
    --------
    A lightly damped positioning stage of our own (``x = [position, speed]``), closed-loop poles
    ``-2, -2``, observer poles ``-10, -10``:

    >>> import numpy as np
    >>> stage = LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                   K=[[2, 3.5]], L=[[19.5], [88.25]], reference_gain=[[4]])
    >>> response = simulate_step(stage, horizon=5.0, samples=501)
    >>> response.slug, response.stable, response.final_value
    ('observer_matched', True, 1.0)
    >>> float(np.round(response.tracked_output[-1], 4))  # 1 - 11 exp(-10)
    0.9995
    """
    checked = _validate_run(
        model, reference, x0, xhat0, horizon, samples, u_max, use_observer, name, slug
    )
    response = _simulate_checked(model, use_observer, name, slug, *checked)
    for note in response.notes:
        warnings.warn(f"{response.name}: {note}", GainsmithWarning, stacklevel=2)
    return response


def _simulate_checked(
    model: LoopModel,
    use_observer: bool,
    name: str | None,
    slug: str | None,
    ref: float,
    x0: np.ndarray,
    xhat0: np.ndarray | None,
    horizon: float | None,
    samples: int,
    limit: np.ndarray | None,
) -> Response:
    """The run of :func:`simulate_step` on checked arguments (its notes not yet warned)."""
    n = model.n_states
    loop = stacked_loop(model, use_observer)
    if horizon is None:
        horizon = horizon_from_eigenvalues(loop.eigenvalues)
    time = np.linspace(0.0, horizon, samples)
    z0, default_slug = _initial_state(x0, xhat0, use_observer)
    slug_value = slug if slug is not None else default_slug
    name_value = name if name is not None else CASE_NAMES.get(slug_value, slug_value)

    notes: list[str] = []
    stable = is_stable(loop.eigenvalues)
    if not stable:
        worst = float(np.max(loop.eigenvalues.real))
        notes.append(
            f"the closed loop is not stable (largest eigenvalue real part {worst:.4g}); "
            f"simulated over a bounded horizon of {horizon:.4g}"
        )
    trajectory, stopped, method = _trajectory(loop, ref, z0, time, limit, notes)

    kept = trajectory.shape[0]
    time = time[:kept]
    state = trajectory[:, :n]
    estimate = trajectory[:, n:] if use_observer else None
    control = trajectory @ loop.Ku.T + loop.N[:, 0] * ref
    if limit is not None:
        control = np.clip(control, -limit, limit)
    # y = C x + D u with the applied input (equals Cz z + Dz r for the linear loop).
    output = state @ model.C.T + control @ model.D.T
    final_value = _final_value(model, ref, limit, notes) if stable else None
    error_norm = None if estimate is None else np.linalg.norm(state - estimate, axis=1)
    return Response(
        name=name_value,
        slug=slug_value,
        time=frozen_array(time),
        output=frozen_array(output.reshape(kept, model.n_outputs)),
        tracked_output=frozen_array(output[:, model.tracked]),
        control=frozen_array(control.reshape(kept, model.n_inputs)),
        state=frozen_array(state),
        estimate=None if estimate is None else frozen_array(estimate),
        estimation_error_norm=None if error_norm is None else frozen_array(error_norm),
        saturated=limit is not None,
        reference=ref,
        stable=stable,
        final_value=final_value,
        horizon=float(horizon),
        method=method,
        stopped_early=stopped,
        u_max=None if limit is None else frozen_array(limit),
        notes=tuple(notes),
    )


def _initial_state(
    x0: np.ndarray, xhat0: np.ndarray | None, use_observer: bool
) -> tuple[np.ndarray, str]:
    """The stacked initial state ``z(0)`` and the slug of the case it makes."""
    if not use_observer:
        return x0.copy(), "state_feedback"
    estimate0 = x0 if xhat0 is None else xhat0
    matched = bool(np.array_equal(estimate0, x0))
    z0 = np.concatenate([x0, estimate0])
    return z0, "observer_matched" if matched else "observer_mismatched"


def _trajectory(
    loop: StackedLoop,
    ref: float,
    z0: np.ndarray,
    time: np.ndarray,
    limit: np.ndarray | None,
    notes: list[str],
) -> tuple[np.ndarray, bool, str]:
    """The stacked trajectory, whether it stopped early, and how it was computed.

    Exact stepping of the linear loop, or the integration of the loop with the limited input;
    an integrator failure or a stop at the state limit adds a note.
    """
    failure = ""
    if limit is None:
        trajectory, stopped = step_linear(loop.F, loop.G, ref, z0, time)
        method = (
            "exact zero-order-hold stepping of the linear closed loop "
            "(one matrix exponential, Van Loan 1978)"
        )
    else:
        trajectory, stopped, failure = integrate_saturated(
            loop.F0, loop.Bz, loop.Ku, loop.N[:, 0] * ref, None, z0, time, limit, ref
        )
        method = (
            "scipy.integrate.solve_ivp, LSODA with the piecewise Jacobian, "
            f"rtol={SATURATED_RTOL:g}, atol={SATURATED_ATOL:g} x state scale, "
            "input limited to +/-u_max"
        )
        if failure:
            notes.append(failure)
    if stopped and not failure:
        reached = float(time[trajectory.shape[0] - 1]) if trajectory.shape[0] else 0.0
        notes.append(
            f"the run stopped at t = {reached:.4g} because the state passed {STATE_LIMIT:g}"
        )
    return trajectory, stopped, method


def _final_value(
    model: LoopModel, ref: float, limit: np.ndarray | None, notes: list[str]
) -> float | None:
    """The exact steady state of the tracked output of a stable loop (module docstring).

    None, with a note, when holding the reference needs more than the limit.
    """
    _, y_ss, u_ss = steady_state(model, ref)
    if limit is not None and np.any(np.abs(u_ss) > limit * (1 + 1e-12)):
        notes.append(
            "holding the reference needs |u| = "
            + ", ".join(f"{abs(value):.4g}" for value in u_ss)
            + " beyond the limit; no final value"
        )
        return None
    return float(y_ss[model.tracked])
