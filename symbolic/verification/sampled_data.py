"""The digital controller verified on the continuous plant: the sampled-data study.

:class:`ControllerRunner` steps the difference equations of
:mod:`symbolic.derivation.difference_equations` one sample at a time, exactly as the
generated code does; :func:`sampled_data_study` runs them against the continuous plant
(stepped exactly between samples with the held input) and compares the response with the
continuous design's (:func:`continuous_equations`, in the same layout).
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..derivation.difference_equations import (
    DifferenceEquations,
    controller_equations,
    loop_matrices,
)
from ..derivation.digital import DigitalController, digital_controller
from ..derivation.extensions_in_z import DiscreteIntegral
from ..derivation.zoh import numeric_zero_order_hold
from ..model.results import Derivation
from ..runtime.errors import GainsmithWarning
from .loop import loop_model

if TYPE_CHECKING:  # the simulator loads SciPy: imported where a run needs it
    from .step_results import Response

__all__ = [
    "ControllerRunner",
    "SampledDataStudy",
    "continuous_equations",
    "matched_state",
    "sampled_data_study",
]


@dataclass(frozen=True)
class SampledDataStudy:
    """The digital controller on the continuous plant, against the continuous design."""

    form: str
    time: np.ndarray  # fine grid, ``substeps`` points per sample
    tracked_output: np.ndarray
    control: np.ndarray  # (N, m), piecewise constant
    sample_times: np.ndarray
    sampled_output: np.ndarray  # (K, p) y[k] as the controller saw it
    controls: np.ndarray  # (K, m) u[k]
    continuous_time: np.ndarray
    continuous_output: np.ndarray
    metrics: object  # StepMetrics of the sampled-data loop
    continuous_metrics: object  # StepMetrics of the continuous design
    closed_loop_poles: np.ndarray  # of the sampled loop (plant + controller), z-plane
    final_value: float | None
    substeps: int
    notes: tuple[str, ...]

    def comparison(self) -> list[tuple[str, float | None, float | None]]:
        """(figure, continuous, sampled) rows for the memo."""
        rows = []
        for key, label in (
            ("overshoot_percent", "overshoot [%]"),
            ("rise_time", "rise time 10-90 % [s]"),
            ("settling_time_2pct", "settling time 2 % [s]"),
            ("peak_control", "peak input"),
            ("steady_state_error", "steady-state error"),
        ):
            rows.append((label, getattr(self.continuous_metrics, key), getattr(self.metrics, key)))
        return rows


class ControllerRunner:
    """The difference equations stepped one sample at a time, exactly as the C code does.

    The arithmetic is done in the same order as in the generated ``step`` function (plain
    double-precision sums, no fused operations), so the two agree to the last bit or nearly.

    Examples
    --------
    >>> eq = DifferenceEquations("predictor", np.array([[0.5]]), np.array([[0.1]]),
    ...                          np.array([[1.0]]), np.array([[-2.0]]), np.zeros((1, 1)),
    ...                          np.array([[3.0]]), 0.1, "")
    >>> runner = ControllerRunner(eq)
    >>> runner.step([1.0], 1.0), runner.step([1.0], 1.0)
    (array([3.]), array([-3.2]))
    """

    def __init__(self, equations: DifferenceEquations, u_max: float | None = None):
        self.eq = equations
        self.u_max = u_max
        self._A = equations.state_matrix.tolist()
        self._By = equations.measurement_matrix.tolist()
        self._Bu = equations.control_matrix.tolist()
        self._C = equations.output_state.tolist()
        self._Dy = equations.output_measurement.tolist()
        self._Dr = equations.output_reference[:, 0].tolist()
        self._Br = (
            None if equations.reference_input is None else equations.reference_input[:, 0].tolist()
        )
        self._Baw = (
            None
            if equations.anti_windup is None or u_max is None
            else equations.anti_windup.tolist()
        )
        self.state = [0.0] * equations.state_matrix.shape[0]

    def reset(self, state=None) -> None:
        n = len(self.state)
        self.state = [0.0] * n if state is None else [float(v) for v in state]

    def step(self, y, r: float) -> np.ndarray:
        """One sample: returns u[k] and advances the controller state."""
        x = self.state
        y = [float(v) for v in np.atleast_1d(y)]
        r = float(r)
        u = []
        excess = []  # demanded minus applied input, for the anti-windup
        for i in range(len(self._C)):
            acc = self._Dr[i] * r
            for j, c in enumerate(self._C[i]):
                acc += c * x[j]
            for j, c in enumerate(self._Dy[i]):
                acc += c * y[j]
            demanded = acc
            if self.u_max is not None:
                if acc > self.u_max:
                    acc = self.u_max
                elif acc < -self.u_max:
                    acc = -self.u_max
            u.append(acc)
            excess.append(demanded - acc)
        nxt = []
        for i in range(len(x)):
            acc = 0.0
            for j, c in enumerate(self._A[i]):
                acc += c * x[j]
            for j, c in enumerate(self._By[i]):
                acc += c * y[j]
            for j, c in enumerate(self._Bu[i]):
                acc += c * u[j]
            if self._Br is not None:
                acc += self._Br[i] * r
            if self._Baw is not None:
                for j, c in enumerate(self._Baw[i]):
                    acc += c * excess[j]
            nxt.append(acc)
        self.state = nxt
        return np.array(u)


def sampled_data_study(
    d: Derivation,
    digital: DigitalController | None = None,
    *,
    form: str = "current",
    substeps: int = 20,
    horizon: float | None = None,
    u_max: float | None = None,
) -> SampledDataStudy:
    """Run the digital controller on the continuous plant and compare with the continuous loop.

    The plant is stepped exactly between samples with the held input (matrix exponential over
    ``T/substeps``), so the inter-sample behaviour is shown; the controller sees
    ``y[k] = C x(kT) + D u[k]``.  Both loops start at ``[simulation] initial_state`` (default
    zero) with a matched estimate and a step of ``[simulation] reference`` at t = 0; the
    continuous loop is :func:`symbolic.verification.stepping.simulate_step` with the observer.  Metrics by
    :func:`symbolic.verification.stepping.step_metrics` on both.

    Parameters
    ----------
    form : {"current", "predictor"}
    substeps : int
        Plant steps per sample (inter-sample resolution).
    horizon : float, optional
        Default ``[simulation] horizon``, else the continuous study's default, at least 20 T.
    u_max : float, optional
        Limit applied inside the controller (default none: the linear designs are compared).
    """
    from .horizon import default_horizon
    from .metrics import step_metrics

    if digital is None:
        digital = getattr(d, "discrete", None) or digital_controller(d)
    if form not in digital.equations:
        raise ValueError(f"form must be one of {tuple(digital.equations)}, got {form!r}")
    design = d.design
    n, m, p = d.plant.A.shape[0], d.plant.B.shape[1], d.plant.C.shape[0]
    T = digital.sample_time
    r = float(design.simulation.reference)
    x0 = np.array(design.simulation.initial_state or [0.0] * n, dtype=float)
    model = loop_model(d)
    if horizon is None:
        horizon = design.simulation.horizon or default_horizon(model)
    count = max(20, int(math.ceil(horizon / T)))
    count = min(count, 200_000)
    run = _run_sampled_loop(d, digital, form, x0, r, count, substeps, u_max)
    sampled, poles = _sampled_response(d, digital, form, run, r, substeps, u_max)
    cont = _continuous_response(d, digital, form, model, x0, r, run.time)
    return SampledDataStudy(
        form=form,
        time=run.time,
        tracked_output=run.output[:, digital.tracked_index],
        control=run.control,
        sample_times=run.sample_times,
        sampled_output=run.sampled_output.reshape(len(run.sample_times), p),
        controls=run.controls.reshape(len(run.sample_times), m),
        continuous_time=cont.time,
        continuous_output=cont.tracked_output,
        metrics=step_metrics(sampled),
        continuous_metrics=step_metrics(cont),
        closed_loop_poles=poles,
        final_value=sampled.final_value,
        substeps=substeps,
        notes=tuple(run.notes),
    )


@dataclass(frozen=True)
class _SampledRun:
    """The sampled-data loop stepped: the fine grid and the samples the controller saw."""

    time: np.ndarray
    output: np.ndarray  # (N, p)
    control: np.ndarray  # (N, m)
    state: np.ndarray  # (N, n)
    sample_times: np.ndarray
    sampled_output: np.ndarray
    controls: np.ndarray
    notes: list[str]


def _run_sampled_loop(d, digital, form, x0, r, count, substeps, u_max) -> _SampledRun:
    """The controller on the plant stepped exactly (matrix exponential over ``T/substeps``)
    between samples, with the held input; stopped when the state diverges."""
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    m = B.shape[1]
    T = digital.sample_time
    eq = digital.equations[form]
    h = T / substeps
    Ph, Gh = numeric_zero_order_hold(A, B, h)
    runner = ControllerRunner(eq, u_max=u_max)
    runner.reset(matched_state(digital, form, x0))
    Mi = np.linalg.inv(np.eye(m) - eq.output_measurement @ D)
    x = x0.copy()
    fine_t, fine_y, fine_u, fine_x = [], [], [], []
    ks, ys, us = [], [], []
    notes: list[str] = []
    for k in range(count):
        # the measurement depends on u[k] only through D (algebraic loop solved once)
        u_guess = Mi @ (
            eq.output_state @ np.array(runner.state)
            + eq.output_measurement @ (C @ x)
            + eq.output_reference[:, 0] * r
        )
        y = C @ x + D @ u_guess
        u = runner.step(y, r)
        ks.append(k * T)
        ys.append(y)
        us.append(u)
        for j in range(substeps):
            fine_t.append(k * T + j * h)
            fine_x.append(x.copy())
            fine_y.append(C @ x + D @ u)
            fine_u.append(u)
            x = Ph @ x + Gh @ u
        if not np.all(np.abs(x) < 1e12):
            notes.append(f"the sampled-data loop diverged at t = {(k + 1) * T:.4g}; run stopped")
            break
    fine_t.append(len(ks) * T)
    fine_x.append(x.copy())
    fine_y.append(C @ x + D @ fine_u[-1])
    fine_u.append(fine_u[-1])
    return _SampledRun(
        time=np.array(fine_t),
        output=np.array(fine_y),
        control=np.array(fine_u).reshape(len(fine_t), m),
        state=np.array(fine_x),
        sample_times=np.array(ks),
        sampled_output=np.array(ys),
        controls=np.array(us),
        notes=notes,
    )


def _sampled_response(d, digital, form, run: _SampledRun, r, substeps, u_max):
    """The run as a :class:`~symbolic.verification.stepping.Response`, with its exact final
    value (linear loop only), and the poles of the sampled loop."""
    from .step_results import Response

    C, D = d.plant.C, d.plant.D
    n, m = d.plant.A.shape[0], d.plant.B.shape[1]
    eq = digital.equations[form]
    idx = digital.tracked_index
    Mi = np.linalg.inv(np.eye(m) - eq.output_measurement @ D)
    F, G = loop_matrices(eq, digital.Phi, digital.Gamma, C, D)
    poles = np.linalg.eigvals(F)
    final = None
    if np.max(np.abs(poles)) < 1 - 1e-12 and u_max is None:
        w = np.linalg.solve(np.eye(F.shape[0]) - F, G[:, 0] * r)
        xs, xis = w[:n], w[n:]
        us_ = Mi @ (
            eq.output_state @ xis + eq.output_measurement @ (C @ xs) + eq.output_reference[:, 0] * r
        )
        final = float((C @ xs + D @ us_)[idx])
    grid, Y = run.time, run.output
    sampled = Response(
        name=f"sampled-data loop ({form})",
        slug=f"sampled_{form}",
        time=grid,
        output=Y,
        tracked_output=Y[:, idx],
        control=run.control,
        state=run.state,
        estimate=None,
        estimation_error_norm=None,
        saturated=u_max is not None,
        reference=r,
        stable=bool(np.max(np.abs(poles)) < 1),
        final_value=final,
        horizon=float(grid[-1]),
        method=f"exact plant stepping, {substeps} steps per sample, ZOH input",
    )
    return sampled, poles


def _continuous_response(d, digital, form, model, x0, r, grid) -> Response:
    """The continuous design on the same horizon: the reference-gain loop with the full-order
    observer by :func:`~symbolic.verification.stepping.simulate_step`, else (integral action
    or the reduced observer) stepped exactly by :func:`_continuous_design_response`."""
    if digital.integral is None and form != "reduced":
        from .stepping import simulate_step

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", GainsmithWarning)
            return simulate_step(
                model,
                reference=r,
                x0=x0,
                horizon=float(grid[-1]),
                samples=min(20001, max(2001, grid.size)),
            )
    return _continuous_design_response(d, digital, form, x0, r, grid)


def matched_state(digital: DigitalController, form: str, x0) -> np.ndarray:
    """The controller state ξ whose estimate equals the plant state ``x0`` (integrator at 0).

    Predictor and current forms: ``x̂ = x̄ = x0``; reduced form: ``η = (T x0)_b − L_r C x0``.
    """
    x0 = np.asarray(x0, dtype=float)
    eq = digital.equations[form]
    if form == "reduced" and digital.reduced is not None:
        red = digital.reduced
        p = red.L.shape[1]
        xb = red.T @ x0
        xi = xb[p:] - red.L @ xb[:p]
    else:
        xi = x0.copy()
    if eq.integrator_index is not None:
        xi = np.append(xi, 0.0)
    return xi


def continuous_equations(d: Derivation, form: str) -> DifferenceEquations:
    """The continuous design as asked, in the same layout: ``ξ' = A_o ξ + B_oy y + …``.

    Full-order observer (``form`` "current" or "predictor") or the reduced-order observer
    (``form`` "reduced", from ``d.reduced_observer``); integral action from ``d.integral``
    (``x_I' = y_t − r``), else the reference gain.  Used to draw the continuous design next to
    the sampled-data loop.
    """
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    n, m = B.shape
    N = d.reference.value if d.reference is not None else np.zeros((m, 1))
    idx = d.reference.tracked_index if d.reference is not None else d.design.tracking.output
    ia = getattr(d, "integral", None)
    integral = None
    if ia is not None:
        integral = DiscreteIntegral(
            Phi_augmented=ia.A_augmented,
            Gamma_augmented=ia.B_augmented,
            K=ia.K,
            integral_gain=ia.integral_gain,
            K_augmented=ia.K_augmented,
            integral_pole=complex(ia.integral_pole),
            integral_pole_z=complex(ia.integral_pole),
            pole_rule=ia.pole_rule,
            tracking_time=1.0 / abs(complex(ia.integral_pole)),
            # back-calculation x_I' += (u_d − u)/(k_i T_t), T_t = 1/|p_I| (as in _integral)
            back_calculation=np.linalg.pinv(ia.integral_gain) * abs(complex(ia.integral_pole)),
            method=ia.method,
        )
    eq = controller_equations(
        "predictor" if form != "reduced" else "reduced",
        A,
        B,
        C,
        D,
        d.K.value,
        d.L.value,
        None,
        N,
        1.0,
        reduced=getattr(d, "reduced_observer", None) if form == "reduced" else None,
        integral=integral,
        tracked=idx,
    )
    if eq.integrator_index is not None:  # x_I' = y_t − r: no "x_I +" of the running sum
        Ao = eq.state_matrix.copy()
        Ao[eq.integrator_index, eq.integrator_index] = 0.0
        eq = dataclasses.replace(eq, state_matrix=Ao)
    return dataclasses.replace(eq, sample_time=0.0)


def _continuous_design_response(d, digital, form, x0, r, grid):
    """The continuous design (integral action and/or reduced observer) on the same grid."""
    from .step_results import Response

    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    m = B.shape[1]
    eq = continuous_equations(d, form)
    F, G = loop_matrices(eq, A, B, C, D)
    Mi = np.linalg.inv(np.eye(m) - eq.output_measurement @ D)
    n = A.shape[0]
    h = float(grid[1] - grid[0])
    nz = F.shape[0]
    M = np.zeros((nz + 1, nz + 1))
    M[:nz, :nz] = F * h
    M[:nz, nz:] = G * h
    import scipy.linalg  # the memo's simulation, not derive

    E = scipy.linalg.expm(M)
    Ph, Gh = E[:nz, :nz], E[:nz, nz:]
    w = np.concatenate([x0, matched_state(digital, form, x0)])
    W = np.empty((grid.size, nz))
    for k in range(grid.size):
        W[k] = w
        w = Ph @ w + Gh[:, 0] * r
        if not np.all(np.abs(w) < 1e12):
            W = W[: k + 1]
            break
    X, XI = W[:, :n], W[:, n:]
    U = (
        X @ (eq.output_measurement @ C).T + XI @ eq.output_state.T + r * eq.output_reference[:, 0]
    ) @ Mi.T
    Y = X @ C.T + U @ D.T
    idx = digital.tracked_index
    poles = np.linalg.eigvals(F)
    return Response(
        name="continuous design",
        slug="continuous",
        time=grid[: W.shape[0]],
        output=Y,
        tracked_output=Y[:, idx],
        control=U,
        state=X,
        estimate=None,
        estimation_error_norm=None,
        saturated=False,
        reference=r,
        stable=bool(np.max(poles.real) < 0),
        final_value=r if digital.integral is not None else None,
        horizon=float(grid[W.shape[0] - 1]),
        method="exact stepping of the continuous loop (matrix exponential)",
    )
