"""How long a step simulation runs: the default horizon from the closed-loop poles.

One rule (common practice, no source; stated in :func:`default_horizon`) for the loops of a
:class:`~symbolic.verification.step_results.LoopModel` and, through :func:`horizon_from_poles`,
for any closed-loop poles, s-plane or z-plane.
"""

from __future__ import annotations

import math

import numpy as np

from .stacked_loop import stability_tolerance, stacked_loop
from .step_results import LoopModel

__all__ = ["default_horizon", "horizon_from_eigenvalues", "horizon_from_poles"]


def horizon_from_eigenvalues(eigenvalues: np.ndarray) -> float:
    """The default-horizon rule of :func:`default_horizon`, on given eigenvalues."""
    magnitude = np.abs(eigenvalues)
    tol = stability_tolerance(eigenvalues)
    largest = float(np.max(magnitude))
    growth = float(np.max(eigenvalues.real))
    if growth < -tol:
        sigma = -growth
        horizon = 10.0 / sigma
        dominant = eigenvalues[eigenvalues.real >= growth - 0.01 * sigma]
        omega_d = float(np.max(np.abs(dominant.imag)))
        if omega_d > tol:
            peak_time = math.pi / omega_d
            horizon = max(horizon, min(1.5 * peak_time, 40.0 / sigma))
        return horizon
    if growth > tol:
        horizon = 10.0 / growth
    else:
        nonzero = magnitude[magnitude > tol]
        horizon = 20.0 / float(np.min(nonzero)) if nonzero.size else 10.0
    if largest > tol:
        horizon = min(horizon, 1000.0 / largest)
    return horizon


def horizon_from_poles(poles: np.ndarray, sample_time: float | None = None) -> float:
    """The default horizon (rule of :func:`default_horizon`) for closed-loop poles.

    z-plane poles of a digital loop (``sample_time`` given) are mapped to ``s = ln(z)/T``
    (a pole at z = 0 counts as very fast).
    """
    poles = np.asarray(poles, dtype=complex).ravel()
    if sample_time is not None:
        T = float(sample_time)
        tiny = np.abs(poles) < 1e-300
        safe = np.where(tiny, 1e-300, poles)
        poles = np.where(tiny, -700.0 / T, np.log(safe) / T)
    return horizon_from_eigenvalues(poles)


def default_horizon(model: LoopModel, *, use_observer: bool = True) -> float:
    """Default length of a step simulation.

    Parameters
    ----------
    model : LoopModel
        The loop.
    use_observer : bool, optional
        Use the eigenvalues of the whole ``2n`` loop (``A - B K`` and ``A - L C``, default) or
        only those of ``A - B K``.

    Returns
    -------
    float
        Simulated time, in the time unit of the plant matrices.

    Notes
    -----
    Rule (common practice, no source), with ``lambda_i`` the closed-loop eigenvalues:

    * stable loop, slowest decay rate ``sigma = min(-Re lambda_i)``: ten slowest time constants,
      ``10 / sigma`` (the slowest mode has then decayed to ``exp(-10)``, 4.5e-5 of its start);
      when the slowest poles are complex with damped frequency ``omega_d``, at least
      1.5 peak times ``1.5 pi / omega_d``, but never more than ``40 / sigma``;
    * unstable loop, largest growth rate ``g = max Re lambda_i > 0``: ``10 / g`` (the unstable
      mode has grown by ``exp(10)``, about 2.2e4, enough to show it);
    * marginal loop (largest real part zero): ``20 / min |lambda_i|`` over the non-zero
      eigenvalues (about three periods of the slowest oscillation), 10 when all are zero;
    * unstable and marginal horizons are capped at ``1000 / max |lambda_i|``.

    A real part counts as zero within ``1e-10 max(1, max |lambda_i|)``.

    Examples
    --------
    >>> import numpy as np
    >>> loop = LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                  K=[[2, 3.5]], L=[[19.5], [88.25]], reference_gain=[[4]])
    >>> round(default_horizon(loop), 6)   # slowest poles -2 +/- 0j (double): 10 / 2
    5.0
    """
    return horizon_from_eigenvalues(stacked_loop(model, use_observer).eigenvalues)
