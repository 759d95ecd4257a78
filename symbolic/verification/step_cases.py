"""The three standard step responses of an observer-based loop, on one time grid.

Feedback of the true state; the observer with a matched initial estimate; the observer with a
mismatched one (by default off by a tenth of the reference in every state).  Without a limit
the first two agree to rounding (the separation principle, Luenberger [1]).

References
----------
.. [1] D. G. Luenberger, "An introduction to observers", IEEE Transactions on Automatic Control
   16(6):596-602, 1971. doi:10.1109/TAC.1971.1099826
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..runtime.errors import DesignFileError
from .horizon import default_horizon
from .step_results import LoopModel, Response
from .stepping import check_vector, simulate_step

__all__ = ["MISMATCH_FRACTION", "default_mismatch", "simulate_cases"]

#: Default size of the initial estimation error of the mismatched case, as a fraction of the
#: reference (or of 1 when the reference is zero), in every state.  Common practice, no source.
MISMATCH_FRACTION = 0.1


def default_mismatch(model: LoopModel, x0: np.ndarray | None, reference: float) -> np.ndarray:
    """Initial estimate of the mismatched case when none is given.

    ``x_hat(0) = x(0) + 0.1 |r| (1, ..., 1)`` (``0.1 (1, ..., 1)`` when ``r = 0``): every state
    estimate starts off by a tenth of the reference step.  Common practice, no source; pass
    ``xhat0_mismatch`` when the states have very different scales.
    """
    start = np.zeros(model.n_states) if x0 is None else np.asarray(x0, dtype=float).reshape(-1)
    scale = abs(reference) if reference != 0 else 1.0
    return start + MISMATCH_FRACTION * scale * np.ones(model.n_states)


def simulate_cases(
    model: LoopModel,
    *,
    reference: float = 1.0,
    x0: Sequence[float] | np.ndarray | None = None,
    xhat0_mismatch: Sequence[float] | np.ndarray | None = None,
    horizon: float | None = None,
    samples: int = 2001,
    u_max: float | Sequence[float] | np.ndarray | None = None,
) -> tuple[Response, Response, Response]:
    """The three standard step responses on one time grid.

    Parameters
    ----------
    model : LoopModel
        The loop.
    reference : float, optional
        Height of the reference step.
    x0 : array_like, shape (n,), optional
        Initial plant state of all three cases (default zero).
    xhat0_mismatch : array_like, shape (n,), optional
        Initial *estimate* of the mismatched case (default :func:`default_mismatch`:
        ``x0 + 0.1 |r|`` in every state).
    horizon : float, optional
        Simulated time; by default :func:`~symbolic.verification.horizon.default_horizon` of
        the whole ``2n`` loop, the same for the three cases.
    samples : int, optional
        Number of samples.
    u_max : float or array_like, optional
        Input limit applied in all three cases (None: the linear loop).

    Returns
    -------
    tuple of Response
        ``(state_feedback, observer_matched, observer_mismatched)``: feedback of the true state;
        observer with ``x_hat(0) = x(0)``; observer with ``x_hat(0) = xhat0_mismatch``.

    Raises
    ------
    DesignFileError
        For a bad argument (see :func:`~symbolic.verification.stepping.simulate_step`).

    Notes
    -----
    Without a limit the first two outputs agree to rounding (the separation principle,
    Luenberger 1971 [1]): with a matched start the estimation error stays zero.
    """
    if not isinstance(model, LoopModel):
        raise DesignFileError(f"expected a LoopModel, got {type(model).__name__}", key="model")
    if horizon is None:
        horizon = default_horizon(model)
    if xhat0_mismatch is None:
        problems: list[str] = []
        start = check_vector(x0, model.n_states, "x0", problems)
        if not problems and isinstance(reference, int | float | np.integer | np.floating):
            xhat0_mismatch = default_mismatch(model, start, float(reference))
    cases = [
        ("state_feedback", False, None),
        ("observer_matched", True, None),
        ("observer_mismatched", True, xhat0_mismatch),
    ]
    true_state, matched, mismatched = (
        simulate_step(
            model,
            reference=reference,
            x0=x0,
            xhat0=estimate,
            horizon=horizon,
            samples=samples,
            use_observer=observer,
            u_max=u_max,
            slug=slug,
        )
        for slug, observer, estimate in cases
    )
    return true_state, matched, mismatched
