"""The nonlinear plant of a ``[model]`` as NumPy functions, with the shipped controller.

Shared by the continuous study (:mod:`symbolic.analysis.nonlinear_study`) and the digital one
(:mod:`symbolic.analysis.nonlinear_digital`).  The functions are compiled by ``lambdify`` from
the parsed expression trees with the parameters at their nominal values: code printed by
SymPy (names are checked identifiers, and ``dummify`` replaces them), never text of the
design file.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..verification.shipped import ShippedController

__all__ = [
    "AxisReach",
    "BLOW_UP",
    "NonlinearLoop",
    "NonlinearStep",
    "NonlinearStudy",
    "step_result",
]

#: A run is stopped as divergent past this many times a state's scale.
BLOW_UP = 1e6


class NonlinearLoop:
    """``f(x, u)``, ``h(x, u)`` at the nominal parameters, the operating point and the
    controller; ``f``/``h`` take one state, ``f_batch``/``h_batch`` rows of states."""

    def __init__(self, d, ctrl: ShippedController):
        model = d.design.model
        point = model.operating_point
        values = d.design.values
        self.x_star = np.array([float(v.xreplace(values)) for v in point.states])
        self.u_star = np.array([float(v.xreplace(values)) for v in point.inputs])
        self.y_star = np.array([float(v.xreplace(values)) for v in point.outputs])
        args = (sp.Matrix(model.state_symbols), sp.Matrix(model.input_symbols))

        def compiled(exprs):
            body = [e.xreplace(values) for e in exprs]
            return sp.lambdify(args, body, "numpy", dummify=True)

        self._f = compiled(model.state_equations)
        self._h = compiled(model.output_equations)
        self.ctrl = ctrl
        self.n = self.x_star.size
        self.ranges = model.state_ranges

    @staticmethod
    def _evaluate(function, X: np.ndarray, U: np.ndarray) -> np.ndarray:
        """Rows of states and inputs (B × n, B × m) to rows of values (B × outputs): one call,
        each entry (an array over the batch, or a constant) broadcast to the batch."""
        rows = X.shape[0]
        values = function(X.T[:, None, :], U.T[:, None, :])  # a column of batch rows each
        return np.stack(
            [np.broadcast_to(np.asarray(v, dtype=float).reshape(-1), (rows,)) for v in values],
            axis=1,
        )

    def f_batch(self, X, U):
        return self._evaluate(self._f, X, U)

    def h_batch(self, X, U):
        return self._evaluate(self._h, X, U)

    def f(self, x, u):
        return self.f_batch(x[None, :], u[None, :])[0]

    def h(self, x, u):
        return self.h_batch(x[None, :], u[None, :])[0]


@dataclass(frozen=True)
class NonlinearStep:
    """One reference step on the nonlinear plant, beside the linear prediction."""

    size: float
    time: np.ndarray
    output: np.ndarray  # tracked output, deviation from y*
    linear_output: np.ndarray  # the linear loop's prediction, on the same times
    control: np.ndarray  # applied input deviation u − u* (first input)
    settled: bool
    final_error: float  # |y(T) − y* − r| / |r|
    largest_difference: float  # max |y − y_linear| / |r| over the run
    note: str = ""


@dataclass(frozen=True)
class AxisReach:
    """The estimated reach of the loop along one state axis, each side of ``x*``."""

    state: str
    unit: str
    below: float  # largest offset below x* that returns (a magnitude)
    above: float
    bound_below: float  # the search bound on each side
    bound_above: float
    required: float | None
    note: str = ""

    @property
    def reach(self) -> float:
        """The smaller side: offsets of either sign up to this return."""
        return min(self.below, self.above)

    @property
    def passed(self) -> bool:
        return self.required is None or self.reach >= self.required * (1 - 1e-9)


@dataclass(frozen=True)
class NonlinearStudy:
    steps: tuple[NonlinearStep, ...]
    reach: tuple[AxisReach, ...]
    horizon: float
    u_max: float | None
    method: str
    #: why a part was not run ('' when all ran)
    skipped: str = ""
    #: how the reach was searched (a sentence for the memo and the requirements table)
    reach_method: str = ""
    #: each state's scale (its size at the operating point or its peak in the linear steps):
    #: the unit in which the return of a perturbed start is judged
    scales: tuple[float, ...] = ()

    @property
    def steps_passed(self) -> bool:
        return not self.skipped and all(s.settled for s in self.steps)

    @property
    def reach_passed(self) -> bool:
        return not self.skipped and all(r.passed for r in self.reach)


def step_result(size, t, y, y_linear, u, why: str, horizon: float, band: float) -> NonlinearStep:
    """One reference step judged: it settles when it ran to the end of the horizon and ends
    within ``band`` of the step (the continuous and the digital runs alike)."""
    final = abs(y[-1] - size) / abs(size) if not why else float("inf")
    settled = not why and t[-1] >= horizon * (1 - 1e-12) and final <= band
    return NonlinearStep(
        size=float(size),
        time=t,
        output=y,
        linear_output=y_linear,
        control=u,
        settled=bool(settled),
        final_error=float(final),
        largest_difference=float(np.nanmax(np.abs(y - y_linear)) / abs(size)),
        note=str(why),
    )
