"""Digital implementation: the sampled-data design at one sample time, checked.

A computer samples y every T seconds and holds u constant between samples (zero-order hold,
ZOH); at the sample instants the plant is then exactly ``x[k+1] = Φ x[k] + Γ u[k]``
(:mod:`symbolic.derivation.zoh`).  A continuous pole s maps to ``z = e^{sT}`` [1].  The
discrete gains place these z-poles: ``K`` by Ackermann's formula on ``(Φ, Γ)`` and the
predictor observer gain ``L_p`` on the dual pair ``(Φᵀ, Cᵀ)`` [4]
(:mod:`symbolic.derivation.gains_in_z`); the current-estimator gain is ``L_c = Φ⁻¹ L_p`` [1].
Two observer forms are offered (Franklin, Powell and Workman [1] Sec. 8.2), and the
reduced-order observer when the design asks for it; each is written as difference equations
(:mod:`symbolic.derivation.difference_equations`).

The reference gain gives unit DC gain in discrete time:
``N = 1 / ((C_t - D_t K)(I - Φ + Γ K)⁻¹ Γ + D_t)``.

Method: ``Φ, Γ`` in closed form (:func:`symbolic.derivation.zoh.zero_order_hold`) within the
budget, otherwise by ``scipy.linalg.expm`` of the augmented matrix (note), and always
compared with ``scipy.signal.cont2discrete(..., method="zoh")``.  K and ``L_p`` by
Ackermann's formula in z (closed form when Φ, Γ have one; floating point otherwise), compared
with ``scipy.signal.place_poles`` and with the eigenvalues of ``Φ − ΓK`` and ``Φ − L_p C``.

Caution: a digital controller for a machine that moves, heats or flies must also handle what
this model leaves out: the computation delay, quantisation of the converters, actuator
limits, and a sensor or computer fault.  Run the generated code on the target against the
Python simulation first, then on the machine with reduced limits and an independent stop.

References
----------
.. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998: Sec. 4.3 (ZOH equivalent, discrete state equations),
   Sec. 8.2 (prediction and current estimators), Ch. 11 (sample-rate selection) -- section
   numbers from memory.
.. [2] K. Ogata, *Discrete-Time Control Systems*, 2nd ed., Prentice Hall, 1995, Sec. 5-5
   (discretisation of continuous-time state-space equations) -- from memory.
.. [3] C. F. Van Loan, "Computing integrals involving the matrix exponential", *IEEE
   Transactions on Automatic Control* 23(3):395-404, 1978. doi:10.1109/TAC.1978.1101743
.. [4] J. Ackermann, "Der Entwurf linearer Regelungssysteme im Zustandsraum",
   *Regelungstechnik* 20(7):297-300, 1972.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..model.results import Check, Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime.budget import BoundedChild
from ..runtime.errors import GainsmithWarning, StructureError
from .checks import eigenvalue_check
from .difference_equations import DifferenceEquations, implementation_forms
from .extensions_in_z import DiscreteIntegral, DiscreteReduced, integral_in_z, reduced_in_z
from .gains_in_z import (
    ClosedFormsInZ,
    collect_closed_forms,
    discrete_feedback_gain,
    exact_sample_time,
    start_closed_forms,
)
from .numeric import evaluate_matrix, relative_difference, scipy_placement
from .sample_rate import refuse_aliasing, sample_rate_guidance
from .systems import sampled_plant

__all__ = [
    "DISCRETISATION_TOLERANCE",
    "DigitalController",
    "digital_controller",
]

#: Largest relative difference between two computations of Φ, Γ.
DISCRETISATION_TOLERANCE = 1e-9


@dataclass(frozen=True)
class DigitalController:
    """The sampled-data design at one sample time, checked.

    Attributes
    ----------
    sample_time : float
    sample_time_exact : sympy.Rational
    Phi, Gamma : ndarray
        ZOH model at the evaluated values.
    Phi_closed_form, Gamma_closed_form : sympy.Matrix or None
        In the parameters (None past
        :data:`~symbolic.derivation.gains_in_z.CLOSED_FORM_SECONDS`).
    controller_poles_z, observer_poles_z : ndarray
        ``e^{sT}`` of the continuous controller and observer poles.
    K : ndarray
    K_closed_form : sympy.Matrix or None
    L_predictor, L_current : ndarray
    L_closed_form : sympy.Matrix or None
        Predictor gain in the parameters.
    reference_gain : ndarray or None
    bandwidth : float or None
        −3 dB bandwidth of the continuous closed loop from r to the tracked output (rad/s).
    sampling_ratio : float or None
        ω_s/ω_bw with ω_s = 2π/T.
    hold_phase_lag : float or None
        Phase lag of the hold at the bandwidth, ω_bw T/2 (rad).
    equations : dict of str to DifferenceEquations
        Both observer forms ("current", "predictor").
    method : str
    checks, notes : tuple
    """

    sample_time: float
    sample_time_exact: sp.Rational
    Phi: np.ndarray
    Gamma: np.ndarray
    Phi_closed_form: sp.Matrix | None
    Gamma_closed_form: sp.Matrix | None
    controller_poles_z: np.ndarray
    observer_poles_z: np.ndarray
    K: np.ndarray
    K_closed_form: sp.Matrix | None
    L_predictor: np.ndarray
    L_current: np.ndarray
    L_closed_form: sp.Matrix | None
    reference_gain: np.ndarray | None
    tracked_index: int
    bandwidth: float | None
    sampling_ratio: float | None
    hold_phase_lag: float | None
    equations: dict[str, DifferenceEquations]
    method: str
    checks: tuple[Check, ...]
    notes: tuple[str, ...]
    #: Integral action in z (``[tracking] method = "integral"``), else None
    integral: DiscreteIntegral | None = None
    #: The reduced-order observer in z (``[observer] kind = "reduced"``), else None
    reduced: DiscreteReduced | None = None

    @property
    def poles_z(self) -> np.ndarray:
        """Closed-loop z-plane poles: controller then observer."""
        return np.concatenate([self.controller_poles_z, self.observer_poles_z])

    @property
    def forms(self) -> tuple[str, ...]:
        """The implementation forms available (keys of :attr:`equations`)."""
        return tuple(self.equations)

    @property
    def default_form(self) -> str:
        """The form the design asks for: "reduced" with a reduced-order observer, else
        "current"."""
        return "reduced" if "reduced" in self.equations else "current"


def digital_controller(
    d: Derivation,
    *,
    sample_time=None,
    budget: float | None = None,
    closed_form: bool = True,
    pending: BoundedChild | None = None,
) -> DigitalController:
    """Discretise the plant (ZOH), place the mapped poles in z, and check everything.

    Parameters
    ----------
    d : Derivation
        The continuous design (its controller and observer poles are mapped by z = e^{sT}).
    sample_time : number, optional
        Seconds; default ``[discrete] sample_time`` of the design.
    budget : float, optional
        Seconds for the closed forms; never more than
        :data:`~symbolic.derivation.gains_in_z.CLOSED_FORM_SECONDS`, and that limit also
        applies when the design's budget is zero (the exponential of a symbolic matrix may
        not finish).
    closed_form : bool, optional
        False skips the symbolic stages (numbers only, no child process).
    pending : BoundedChild, optional
        The closed forms already started by
        :func:`~symbolic.derivation.gains_in_z.start_closed_forms` for the same design, poles
        and sample time (default: started here).

    Returns
    -------
    DigitalController

    Raises
    ------
    StructureError
        Naming ``discrete.sample_time`` when a controller or observer pole aliases,
        ``|Im s|·T ≥ π`` (two poles would map to the same z), or the sample time is not
        positive.

    Warns
    -----
    GainsmithWarning
        A mapped pole within 1 % of the unit circle; a sampling ratio ω_s/ω_bw outside
        :data:`~symbolic.derivation.sample_rate.SAMPLE_RATE_RANGE`; a plant pole that aliases.

    Notes
    -----
    The method and the references [1]-[4] are in the module notes.

    Examples
    --------
    >>> import symbolic
    >>> design = symbolic.parse_design(b'''
    ... [parameters.m]
    ... value = 2.0
    ... [plant]
    ... A = [[0, 1], [0, 0]]
    ... B = [[0], ["1/m"]]
    ... C = [[1, 0]]
    ... [controller]
    ... poles = [-2, -3]
    ... [discrete]
    ... sample_time = 0.2
    ... ''')
    >>> dc = digital_controller(symbolic.derive(design, budget=0))
    >>> dc.Phi_closed_form
    Matrix([
    [1, 1/5],
    [0,   1]])
    >>> dc.Gamma_closed_form.T      # [T^2/(2m), T/m]
    Matrix([[1/(50*m), 1/(5*m)]])
    """
    sample_time, T_exact = _sample_time(d.design, sample_time)
    return _design(d, sample_time, T_exact, budget, closed_form, pending)


def _sample_time(design, sample_time) -> tuple[object, sp.Rational]:
    """The sample time asked for (default the design's) and its exact value, refused when it
    is missing or not positive."""
    if sample_time is None:
        if design.discrete is None:
            raise StructureError(
                "no sample time: add a [discrete] table with sample_time",
                design.path,
                "discrete.sample_time",
            )
        sample_time = design.discrete.sample_time
    T_exact = exact_sample_time(sample_time)
    T = float(T_exact)
    if not (T > 0 and math.isfinite(T)):
        raise StructureError(
            f"the sample time must be positive, got {sample_time}",
            design.path,
            "discrete.sample_time",
        )
    return sample_time, T_exact


def _design(
    d: Derivation,
    sample_time,
    T_exact: sp.Rational,
    budget: float | None,
    closed_form: bool,
    pending: BoundedChild | None,
) -> DigitalController:
    """:func:`digital_controller` at a valid sample time."""
    design = d.design
    T = float(T_exact)
    notes: list[str] = []
    checks: list[Check] = []
    C, D = d.plant.C, d.plant.D
    soft = refuse_aliasing(d, T)
    zc, zo = np.exp(d.controller_poles.values * T), np.exp(d.observer_poles.values * T)
    model = _sampled_model(d, sample_time, T, budget, closed_form, pending, checks, notes)
    Phi, Gamma = model.Phi, model.Gamma
    K, K_cf = _gain_in_z(d, "K", model.K, Phi, Gamma, zc, checks)
    Lt, L_cf = _gain_in_z(d, "L", model.L, Phi.T, C.T, zo, checks)
    Lp = Lt.T
    Lc = np.linalg.solve(Phi, Lp)
    _loop_checks(Phi, Gamma, C, K, Lp, Lc, zc, zo, checks)
    idx = d.reference.tracked_index if d.reference is not None else design.tracking.output
    N = _reference_gain_in_z(Phi, Gamma, C, D, K, idx, checks, notes)
    integral = reduced = None
    if design.tracking.method == "integral":
        integral = integral_in_z(d, Phi, Gamma, C, D, T, idx, zc, checks)
    if design.observer.kind == "reduced":
        reduced = reduced_in_z(d, Phi, Gamma, C, T, checks, notes)
    Nv = N if N is not None else np.zeros((Gamma.shape[1], 1))
    equations = implementation_forms(
        Phi, Gamma, C, D, K, Lp, Lc, Nv, T, idx, zc, zo, integral, reduced, checks
    )
    bandwidth, ratio, lag = sample_rate_guidance(d, zc, zo, T, idx, soft, notes)
    for text in soft:
        warnings.warn(text, GainsmithWarning, stacklevel=3)
    notes.extend(f"discrete: {t}" for t in soft)
    return DigitalController(
        sample_time=T,
        sample_time_exact=T_exact,
        Phi=Phi,
        Gamma=Gamma,
        Phi_closed_form=model.Phi_closed_form,
        Gamma_closed_form=model.Gamma_closed_form,
        controller_poles_z=zc,
        observer_poles_z=zo,
        K=K,
        K_closed_form=K_cf,
        L_predictor=Lp,
        L_current=Lc,
        L_closed_form=L_cf,
        reference_gain=N,
        tracked_index=idx,
        bandwidth=bandwidth,
        sampling_ratio=ratio,
        hold_phase_lag=lag,
        equations=equations,
        method=_method(model, K_cf, L_cf, Gamma.shape[1], C.shape[0]),
        checks=tuple(checks),
        notes=tuple(notes),
        integral=integral,
        reduced=reduced,
    )


@dataclass(frozen=True)
class _SampledModel:
    """Φ, Γ (numbers) and, where they agree with SciPy, their closed forms and those of K and
    L_p in z; ``zoh_method`` says how Φ, Γ were found."""

    Phi: np.ndarray
    Gamma: np.ndarray
    Phi_closed_form: sp.Matrix | None
    Gamma_closed_form: sp.Matrix | None
    K: sp.Matrix | None
    L: sp.Matrix | None
    zoh_method: str


def _sampled_model(
    d: Derivation, sample_time, T: float, budget, closed_form: bool, pending, checks, notes
) -> _SampledModel:
    """The ZOH model, checked against ``scipy.signal.cont2discrete``."""
    design = d.design
    values = design.values
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    forms: ClosedFormsInZ | None = None
    if closed_form:
        if pending is None:
            pending = start_closed_forms(
                design,
                d.controller_poles.poles,
                d.observer_poles.poles,
                sample_time=sample_time,
                budget=budget,
            )
        forms = collect_closed_forms(pending, notes) if pending is not None else None
    elif pending is not None:
        pending.cancel()
    Phi, Gamma, *ref = sampled_plant(A, B, C, D, T)
    diff = max(relative_difference(Phi, ref[0]), relative_difference(Gamma, ref[1]))
    checks.append(
        Check(
            "discrete: expm of [[A, B], [0, 0]]·T vs scipy.signal.cont2discrete (zoh, relative)",
            diff,
            DISCRETISATION_TOLERANCE,
            diff <= DISCRETISATION_TOLERANCE,
        )
    )
    Phi_cf = Gamma_cf = K_cf = L_cf = None
    zoh_method = "scipy.linalg.expm of [[A, B], [0, 0]]·T"
    if forms is not None:
        P_val = evaluate_matrix(forms.Phi, values)
        G_val = evaluate_matrix(forms.Gamma, values)
        diff = max(relative_difference(P_val, ref[0]), relative_difference(G_val, ref[1]))
        ok = bool(np.all(np.isfinite(P_val)) and np.all(np.isfinite(G_val))) and (
            diff <= DISCRETISATION_TOLERANCE
        )
        checks.append(
            Check(
                "discrete: closed-form Φ, Γ vs scipy.signal.cont2discrete (zoh, relative)",
                diff,
                DISCRETISATION_TOLERANCE,
                ok,
            )
        )
        if ok:
            Phi_cf, Gamma_cf = forms.Phi, forms.Gamma
            K_cf, L_cf = forms.K, forms.L
            zoh_method = forms.zoh_method
        else:
            notes.append("discrete: the closed-form Φ, Γ disagree with SciPy; not used")
    return _SampledModel(Phi, Gamma, Phi_cf, Gamma_cf, K_cf, L_cf, zoh_method)


def _gain_in_z(d: Derivation, name: str, closed, M, G, poles, checks: list[Check]):
    """K (``name`` "K", on ``(Φ, Γ)``) or ``L_pᵀ`` (on the dual pair) placing ``poles``:
    the closed form evaluated when it is finite, else :func:`discrete_feedback_gain`; and
    its comparison with ``scipy.signal.place_poles`` (one column of ``G``)."""
    design = d.design
    values = design.values
    reference, how = scipy_placement(M, G, poles)
    label = "K" if name == "K" else "L_pᵀ (dual pair)"
    value = None
    if closed is not None:
        value = evaluate_matrix(closed if name == "K" else closed.T, values)
        if not np.all(np.isfinite(value)):
            value = None
            closed = None
    if value is None:
        try:
            value = discrete_feedback_gain(M, G, poles)
        except StructureError as exc:
            raise StructureError(
                f"the discrete {'controller' if name == 'K' else 'observer'}: {exc.problem}",
                design.path,
                "discrete.sample_time",
            ) from exc
    if G.shape[1] == 1:
        if reference is not None:
            diff = relative_difference(value, reference)
            checks.append(
                Check(
                    f"discrete: {label} by Ackermann in z vs scipy.signal.place_poles (relative)",
                    diff,
                    GAIN_TOLERANCE,
                    diff <= GAIN_TOLERANCE,
                )
            )
        else:
            checks.append(
                Check(f"discrete: {label} vs scipy.signal.place_poles", None, None, None, how)
            )
    return value, closed


def _loop_checks(Phi, Gamma, C, K, Lp, Lc, zc, zo, checks: list[Check]) -> None:
    """The eigenvalues of ``Φ − ΓK`` and ``Φ − L_p C`` against ``e^{sT}``, and ``Φ L_c = L_p``."""
    for label, (F, G), poles in (("Φ − ΓK", (Gamma, K), zc), ("Φ − L_p C", (Lp, C), zo)):
        checks.append(
            eigenvalue_check(
                f"discrete: eigenvalues of {label} vs e^(sT) of the poles",
                Phi - F @ G,
                poles,
                terms=(Phi, (F, G)),
                weights=np.abs(Phi) + np.abs(F) @ np.abs(G),
            )
        )
    res = relative_difference(Phi @ Lc, Lp)
    checks.append(Check("discrete: Φ L_c = L_p (current-estimator gain)", res, 1e-12, res <= 1e-12))


def _reference_gain_in_z(Phi, Gamma, C, D, K, idx: int, checks, notes) -> np.ndarray | None:
    """N with unit DC gain in discrete time from r to the tracked output (None: zero DC gain)."""
    n, m = Gamma.shape
    Ct, Dt = C[idx : idx + 1, :], D[idx : idx + 1, :]
    N = None
    try:
        Mdc = (Ct - Dt @ K) @ np.linalg.solve(np.eye(n) - Phi + Gamma @ K, Gamma) + Dt
    except np.linalg.LinAlgError:
        Mdc = np.full((1, m), np.nan)
    if np.all(np.isfinite(Mdc)) and np.linalg.norm(Mdc) > 1e-12:
        N = Mdc.T / (Mdc @ Mdc.T).item()
        dc = (Mdc @ N).item()
        checks.append(
            Check(
                "discrete: steady-state gain from r to the tracked output equals 1",
                abs(dc - 1.0),
                GAIN_TOLERANCE,
                abs(dc - 1.0) <= GAIN_TOLERANCE,
            )
        )
    else:
        notes.append("discrete: no reference gain exists (zero DC gain); N = 0 is used")
    return N


def _method(model: _SampledModel, K_cf, L_cf, m: int, p: int) -> str:
    """How Φ, Γ, K and L_p were found, in one line."""
    zoh_method, Phi_cf = model.zoh_method, model.Phi_closed_form
    return (
        (f"ZOH by {zoh_method}" + (" (closed form)" if Phi_cf is not None else ""))
        + "; K "
        + (
            "by Ackermann's formula in z" + (" (closed form)" if K_cf is not None else "")
            if m == 1
            else "by scipy.signal.place_poles (several inputs: not unique)"
        )
        + "; L_p "
        + (
            "by Ackermann's formula in z on the dual pair"
            + (" (closed form)" if L_cf is not None else "")
            if p == 1
            else "by scipy.signal.place_poles on the dual pair (several outputs: not unique)"
        )
    )
