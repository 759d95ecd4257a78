"""How the speed of the observer shows in the step response: a study over speed factors.

For each factor the caller supplies a loop (typically observer poles = factor x controller
poles); the mismatched-estimate step of each loop is simulated and measured.  With a matched
estimate the output does not depend on the observer at all, by the separation principle
(Luenberger [1]), so only the mismatched case is simulated.

References
----------
.. [1] D. G. Luenberger, "An introduction to observers", IEEE Transactions on Automatic Control
   16(6):596-602, 1971. doi:10.1109/TAC.1971.1099826
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

from ..runtime.errors import DesignFileError
from .metrics import step_metrics
from .step_cases import default_mismatch
from .step_results import LoopModel, StepMetrics
from .stepping import check_vector, simulate_step

__all__ = ["observer_speed_study"]

#: The keywords :func:`observer_speed_study` passes on to the simulation.
_SIMULATION_KEYWORDS = {"reference", "x0", "xhat0_mismatch", "horizon", "samples", "u_max"}


def observer_speed_study(
    model_for_factor: Callable[[float], LoopModel],
    factors: Sequence[float],
    **sim_kwargs: object,
) -> list[tuple[float, StepMetrics]]:
    """Step figures of the mismatched-estimate case for a range of observer speeds.

    Parameters
    ----------
    model_for_factor : callable
        Returns the loop for a factor (typically: observer poles = factor x controller poles;
        the meaning of the factor is the caller's).
    factors : sequence of float
        The factors to study, in the order given; finite numbers.
    **sim_kwargs
        Passed on: ``reference``, ``x0``, ``xhat0_mismatch`` (the initial estimate, default
        :func:`~symbolic.verification.step_cases.default_mismatch`), ``horizon``, ``samples``, ``u_max``.

    Returns
    -------
    list of (float, StepMetrics)
        One pair per factor.

    Raises
    ------
    DesignFileError
        No factors, a non-finite factor, an unknown keyword, or a model that is not a
        :class:`LoopModel`.

    Notes
    -----
    Without ``horizon`` each loop gets its own :func:`~symbolic.verification.horizon.default_horizon`; the figures do not depend
    on the grid beyond the interpolation error.  Only the mismatched case is simulated (with a
    matched estimate the output does not depend on the observer at all, by the separation
    principle [1]).

    Examples
    --------
    >>> def stage(factor):
    ...     p = 2.0 * factor                 # observer poles -p, -p; controller poles -2, -2
    ...     return LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                      K=[[2, 3.5]], L=[[2 * p - 0.5], [p * p - p - 1.75]],
    ...                      reference_gain=[[4]])
    >>> study = observer_speed_study(stage, [2.0, 5.0])
    >>> [factor for factor, _ in study]
    [2.0, 5.0]
    >>> study[0][1].estimation_settling_time > study[1][1].estimation_settling_time
    True
    """
    values = _checked_factors(factors, sim_kwargs)
    reference = sim_kwargs.get("reference", 1.0)
    x0 = sim_kwargs.get("x0")
    xhat0 = sim_kwargs.get("xhat0_mismatch")
    results: list[tuple[float, StepMetrics]] = []
    for factor in values:
        model = model_for_factor(factor)
        if not isinstance(model, LoopModel):
            raise DesignFileError(
                f"model_for_factor({factor}) returned {type(model).__name__}, not a LoopModel",
                key="model_for_factor",
            )
        estimate0 = xhat0
        if estimate0 is None:
            start = check_vector(x0, model.n_states, "x0", [])
            ref_value = float(reference) if isinstance(reference, int | float) else 1.0
            estimate0 = default_mismatch(model, start, ref_value)
        response = simulate_step(
            model,
            reference=reference,  # type: ignore[arg-type]  # checked by simulate_step
            x0=x0,  # type: ignore[arg-type]
            xhat0=estimate0,  # type: ignore[arg-type]
            horizon=sim_kwargs.get("horizon"),  # type: ignore[arg-type]
            samples=sim_kwargs.get("samples", 2001),  # type: ignore[arg-type]
            u_max=sim_kwargs.get("u_max"),  # type: ignore[arg-type]
            slug="observer_mismatched",
        )
        results.append((factor, step_metrics(response)))
    return results


def _checked_factors(factors: Sequence[float], sim_kwargs: dict[str, object]) -> list[float]:
    """The factors as floats; one error listing every problem (factors and keywords)."""
    unknown = sorted(set(sim_kwargs) - _SIMULATION_KEYWORDS)
    problems: list[str] = []
    if unknown:
        problems.append(
            f"unknown keyword(s) {', '.join(unknown)}; allowed: {sorted(_SIMULATION_KEYWORDS)}"
        )
    values: list[float] = []
    for factor in factors:
        if isinstance(factor, bool) or not isinstance(
            factor, int | float | np.integer | np.floating
        ):
            problems.append(f"factor {factor!r} is not a number")
        elif not math.isfinite(float(factor)):
            problems.append(f"factor {factor!r} is not finite")
        else:
            values.append(float(factor))
    if not problems and not values:
        problems.append("expected at least one factor")
    if problems:
        raise DesignFileError(
            "observer speed study rejected: " + "; ".join(problems), key="factors"
        )
    return values
