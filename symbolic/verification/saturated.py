"""Integration of a loop whose input is limited, ``|u_i| <= u_max_i``.

With a limit on the input the loop is nonlinear, so it is integrated with
:func:`scipy.integrate.solve_ivp` (LSODA [1]) on the grid of the run, in pieces, within a budget
of right-hand-side evaluations; a run stops when the state passes
:data:`~symbolic.verification.linear_stepping.STATE_LIMIT`.

References
----------
.. [1] L. R. Petzold, "Automatic selection of methods for solving stiff and nonstiff systems of
   ordinary differential equations", SIAM Journal on Scientific and Statistical Computing
   4(1):136-148, 1983 (LSODA, as wrapped by ``scipy.integrate.solve_ivp``).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import scipy.integrate

from .linear_stepping import STATE_LIMIT, first_over_limit

__all__ = [
    "SATURATED_ATOL",
    "SATURATED_BUDGET",
    "SATURATED_RTOL",
    "SATURATED_SEGMENTS",
    "integrate_saturated",
]

#: Tolerances of the saturated (nonlinear) integration; the absolute one is multiplied by
#: ``max(1, |r|, max |z(0)|)``.
SATURATED_RTOL = 1e-9
SATURATED_ATOL = 1e-12

#: Right-hand-side evaluations allowed for one saturated run (2-5 s here), and the
#: number of pieces the run is split into so that a spent budget keeps what was done.
SATURATED_BUDGET = 50_000
SATURATED_SEGMENTS = 16


class _OverBudget(Exception):
    """Raised inside the right-hand side when the evaluation budget is spent."""


def integrate_saturated(
    F0: np.ndarray,
    Bz: np.ndarray,
    Ku: np.ndarray,
    feedforward: np.ndarray,
    drive: np.ndarray | None,
    z0: np.ndarray,
    time: np.ndarray,
    limit: np.ndarray,
    reference: float = 0.0,
) -> tuple[np.ndarray, bool, str]:
    """Integrate ``z' = F0 z + Bz clip(Ku z + feedforward) + drive`` with LSODA.

    The loop with a limited input, in any stacked state (plant and observer or controller
    states).  ``reference`` only sets the scale of the absolute tolerance.  Returns the
    trajectory, whether it stopped early, and a note ('' when none).

    Notes
    -----
    :func:`scipy.integrate.solve_ivp`, ``method="LSODA"`` (Adams or BDF, switched
    automatically on stiffness [1]) with the piecewise-constant Jacobian
    ``F0 + Bz diag(free) Ku``, ``rtol = 1e-9``, ``atol = 1e-12 max(1, |r|, max |z(0)|)``,
    reported on the same grid.  A fast observer makes the loop stiff, which an explicit method
    such as RK45 pays for with a very small step; at most :data:`SATURATED_BUDGET` right-hand
    sides are evaluated, after which the run stops with a note.

    The run is split into :data:`SATURATED_SEGMENTS` consecutive ``solve_ivp`` calls on the
    grid, each starting from the last state of the previous one, so that a spent evaluation
    budget or a runaway state still leaves the part already done.
    """
    constant = np.zeros(z0.size) if drive is None else np.asarray(drive, dtype=float)
    rhs, jacobian, runaway = _saturated_system(F0, Bz, Ku, feedforward, constant, limit)
    scale = max(1.0, abs(reference), float(np.max(np.abs(z0))))
    edges = np.unique(np.linspace(0, time.size - 1, SATURATED_SEGMENTS + 1).astype(int))
    pieces = [z0[np.newaxis, :]]
    z = z0
    for first, last in zip(edges[:-1], edges[1:], strict=True):
        grid = time[first : last + 1]
        try:
            solution = scipy.integrate.solve_ivp(
                rhs,
                (float(grid[0]), float(grid[-1])),
                z,
                method="LSODA",
                t_eval=grid,
                events=runaway,
                jac=jacobian,
                rtol=SATURATED_RTOL,
                atol=SATURATED_ATOL * scale,
            )
        except _OverBudget:
            note = (
                f"the integrator spent its budget of {SATURATED_BUDGET} evaluations at "
                f"t = {grid[0]:.4g} (a very stiff loop); the run stops there"
            )
            return np.vstack(pieces), True, note
        values = solution.y.T[1:]
        if values.size:
            pieces.append(values)
        if solution.status != 0 or values.shape[0] < grid.size - 1:
            note = "" if solution.status >= 0 else f"the integrator failed: {solution.message}"
            return _within_limit(np.vstack(pieces))[0], True, note
        z = values[-1]
    trajectory, stopped = _within_limit(np.vstack(pieces))
    return trajectory, stopped, ""


def _saturated_system(
    F0: np.ndarray,
    Bz: np.ndarray,
    Ku: np.ndarray,
    feedforward: np.ndarray,
    constant: np.ndarray,
    limit: np.ndarray,
) -> tuple[Callable, Callable, Callable]:
    """Right-hand side (counting its calls against the budget), Jacobian and runaway event."""
    calls = [0]

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        calls[0] += 1
        if calls[0] > SATURATED_BUDGET:
            raise _OverBudget
        u = np.clip(Ku @ z + feedforward, -limit, limit)
        return F0 @ z + Bz @ u + constant

    def jacobian(_t: float, z: np.ndarray) -> np.ndarray:
        # Piecewise: an input inside its limits passes Ku on, a clipped one contributes zero.
        free = (np.abs(Ku @ z + feedforward) < limit).astype(float)
        return F0 + (Bz * free) @ Ku

    def runaway(_t: float, z: np.ndarray) -> float:
        return STATE_LIMIT - float(np.max(np.abs(z)))

    runaway.terminal = True  # type: ignore[attr-defined]
    return rhs, jacobian, runaway


def _within_limit(trajectory: np.ndarray) -> tuple[np.ndarray, bool]:
    """The trajectory up to the first sample past the state limit, and whether it was cut."""
    over = first_over_limit(trajectory)
    if over is not None:
        return trajectory[:over], True
    return trajectory, False
