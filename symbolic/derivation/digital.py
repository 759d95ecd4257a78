"""Digital implementation: zero-order-hold model, gains in z, sample-rate guidance, C99 code.

A computer samples y every T seconds and holds u constant between samples (zero-order hold,
ZOH).  At the sample instants the plant is then exactly

.. math::  x[k+1] = \\Phi x[k] + \\Gamma u[k],\\qquad y[k] = C x[k] + D u[k],\\qquad
           \\Phi = e^{AT},\\quad \\Gamma = \\int_0^T e^{A\\tau}\\,d\\tau\\, B,

both read from one exponential, ``expm([[A, B], [0, 0]] T) = [[Φ, Γ], [0, I]]`` (Van Loan [3]).
A continuous pole s maps to ``z = e^{sT}`` [1].  The discrete gains place these z-poles:
``K`` by Ackermann's formula on ``(Φ, Γ)`` and the predictor observer gain ``L_p`` on the dual
pair ``(Φᵀ, Cᵀ)`` [4]; the current-estimator gain is ``L_c = Φ⁻¹ L_p`` [1].  Two observer forms
are offered (Franklin, Powell and Workman [1] Sec. 8.2):

* predictor: ``x̂[k+1] = Φ x̂[k] + Γ u[k] + L_p (y[k] - C x̂[k] - D u[k])``,
  ``u[k] = -K x̂[k] + N r[k]`` (one sample of computation time is available);
* current estimator: ``x̂[k] = x̄[k] + L_c (y[k] - C x̄[k] - D u[k])``,
  ``x̄[k+1] = Φ x̂[k] + Γ u[k]``, ``u[k] = -K x̂[k] + N r[k]`` (uses the newest sample;
  the computation must be short compared with T).

The reference gain gives unit DC gain in discrete time:
``N = 1 / ((C_t - D_t K)(I - Φ + Γ K)⁻¹ Γ + D_t)``.

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
.. [5] E. J. Putzer, "Avoiding the Jordan canonical form in the discussion of linear systems
   with constant coefficients", *The American Mathematical Monthly* 73(1):2-7, 1966.
   doi:10.2307/2313914
"""

from __future__ import annotations

import dataclasses
import math
import re
import time
import warnings
from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..model.numbers import format_pole
from ..model.results import Check, Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime.budget import BoundedChild
from ..runtime.errors import GainsmithWarning, RenderError, StructureError
from . import closed_form as cf
from .numeric import (
    closed_loop_bandwidth,
    evaluate_matrix,
    numeric_ackermann,
    relative_difference,
    sampled_plant,
    scipy_placement,
)
from .pipeline import eigenvalue_check

__all__ = [
    "CLOSED_FORM_SECONDS",
    "NEAR_UNIT_CIRCLE",
    "OBSERVER_FORMS",
    "SAMPLE_RATE_RANGE",
    "ControllerRunner",
    "DifferenceEquations",
    "DigitalController",
    "SampledDataStudy",
    "ackermann_in_z",
    "DIGITAL_FORMS",
    "DiscreteIntegral",
    "DiscreteReduced",
    "c_controller_files",
    "closed_loop_bandwidth",
    "continuous_equations",
    "controller_equations",
    "loop_matrices",
    "matched_state",
    "python_controller_source",
    "digital_controller",
    "discrete_feedback_gain",
    "discrete_coefficients",
    "numeric_zero_order_hold",
    "sampled_data_study",
    "zero_order_hold",
]

#: Sampling frequency over closed-loop bandwidth, ω_s/ω_bw, outside which a note is given.
#: Rule of thumb (common practice, no source); Franklin, Powell and Workman [1] Ch. 11 discuss
#: ratios of about 20 to 40 for a smooth response (from memory).
SAMPLE_RATE_RANGE = (10.0, 30.0)

#: A mapped pole with |z| above this sits within 1 % of the unit circle: a note is given.
NEAR_UNIT_CIRCLE = 0.99

#: Wall-clock seconds for the symbolic matrix exponential and the gains in z; the exponential
#: of a symbolic matrix needs its eigenvalues and can run for minutes, so it is always bounded.
CLOSED_FORM_SECONDS = 5.0

#: The two full-order observer forms of the digital controller.
OBSERVER_FORMS = ("current", "predictor")

#: Every implementation form: the full-order ones and Luenberger's reduced-order observer
#: (present only when the design asks for ``[observer] kind = "reduced"``).
DIGITAL_FORMS = ("current", "predictor", "reduced")

DISCRETISATION_TOLERANCE = 1e-9
#: Entries of the closed-form Φ, Γ with more operations than this are left unsimplified.
SIMPLIFY_LIMIT = 60
#: The gains in z are derived in closed form only when Φ and Γ together have at most this many
#: operations (a damped oscillator's Φ has about 250, and its K in z runs for minutes to
#: 20 000 operations).
GAIN_CLOSED_FORM_LIMIT = 120

z = sp.Symbol("z")


# --------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DifferenceEquations:
    """The digital controller as difference equations, ready to implement.

    ``u[k] = C_c ξ[k] + D_cy y[k] + D_cr r[k]`` (then limited to ``|u| <= u_max`` if there is a
    limit), ``ξ[k+1] = A_o ξ[k] + B_oy y[k] + B_ou u[k]`` with the *applied* u.  The state ξ is
    the estimate ``x̂`` (predictor) or the prediction ``x̄`` (current estimator).
    """

    form: str
    state_matrix: np.ndarray  # A_o
    measurement_matrix: np.ndarray  # B_oy
    control_matrix: np.ndarray  # B_ou
    output_state: np.ndarray  # C_c
    output_measurement: np.ndarray  # D_cy
    output_reference: np.ndarray  # D_cr
    sample_time: float
    description: str
    #: B_or of ``ξ[k+1] = … + B_or r[k]`` (the integrator's ``−T r``); None: no such term
    reference_input: np.ndarray | None = None
    #: B_aw of ``ξ[k+1] = … + B_aw (u_demanded[k] − u[k])`` (back-calculation anti-windup of
    #: the integrator, active only while the input is limited); None: no integrator
    anti_windup: np.ndarray | None = None
    #: Index of the integrator in ξ (None without integral action)
    integrator_index: int | None = None
    #: Names of the entries of ξ, for the generated code's comments
    state_names: tuple[str, ...] = ()
    #: The estimate the controller forms, ``x̂ = E_ξ ξ + E_y y + E_u u`` (E_ξ has a zero column
    #: for the integrator); None when not recorded
    estimate_state: np.ndarray | None = None
    estimate_measurement: np.ndarray | None = None
    estimate_control: np.ndarray | None = None


@dataclass(frozen=True)
class DiscreteIntegral:
    """Integral action in the digital controller.

    The integrator is the running sum ``x_I[k+1] = x_I[k] + T (y_t[k] − r[k])`` (the
    tracked output as measured), so ``k_i`` is comparable with the continuous design's.  The
    sampled plant augmented with it, ``Φ_a = [[Φ, 0], [T C_t, 1]]``, ``Γ_a = [[Γ], [T D_t]]``,
    gets the gain ``[K, k_i]`` that places ``e^{sT}`` of the n controller poles and of the
    integral pole; ``u[k] = −K x̂[k] − k_i x_I[k]``.  With an input limit the integrator is
    corrected by back-calculation, ``x_I[k+1] += T (u_d[k] − u[k]) / (k_i T_t)``, the
    sampled form of the continuous scheme of :mod:`symbolic.derivation.integral` (same ``T_t``).
    """

    Phi_augmented: np.ndarray
    Gamma_augmented: np.ndarray
    K: np.ndarray  # (m, n)
    integral_gain: np.ndarray  # (m, 1)
    K_augmented: np.ndarray  # (m, n + 1)
    integral_pole: complex  # continuous, s-plane
    integral_pole_z: complex
    pole_rule: str
    tracking_time: float  # T_t of the back-calculation
    back_calculation: np.ndarray  # (1, m): x_I[k+1] += T · this @ (u_d − u)
    method: str


@dataclass(frozen=True)
class DiscreteReduced:
    """Luenberger's minimum-order observer in discrete time (same coordinates as in s).

    With ``x̄ = T x``, ``T Φ T⁻¹`` and ``T Γ`` partitioned after the p measured states, the
    unmeasured part is estimated by ``x̂_b[k] = η[k] + L_r ȳ[k]`` with
    ``η[k+1] = Â η[k] + B̂ ȳ[k] + F̂ u[k]``, ``Â = Φ_bb − L_r Φ_ab``,
    ``B̂ = Â L_r + Φ_ba − L_r Φ_aa``, ``F̂ = Γ_b − L_r Γ_a`` and ``ȳ = y − D u``; the error
    obeys ``e_b[k+1] = (Φ_bb − L_r Φ_ab) e_b[k]`` (Franklin, Powell and Workman [1] Sec. 8.2,
    reduced-order estimators -- from memory).  Like the current estimator it uses ``y[k]``
    for ``u[k]``: the computation must be short compared with T.
    """

    T: np.ndarray
    T_inverse: np.ndarray
    Phi_aa: np.ndarray
    Phi_ab: np.ndarray
    Phi_ba: np.ndarray
    Phi_bb: np.ndarray
    Gamma_a: np.ndarray
    Gamma_b: np.ndarray
    L: np.ndarray  # (n − p, p)
    poles: tuple[complex, ...]  # s-plane
    poles_z: np.ndarray
    pole_rule: str
    observer_matrix: np.ndarray  # Â
    output_input: np.ndarray  # B̂
    control_input: np.ndarray  # F̂
    estimate_from_state: np.ndarray  # T⁻¹ Ĉ
    estimate_from_output: np.ndarray  # T⁻¹ D̂


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
        In the parameters (None past :data:`CLOSED_FORM_SECONDS`).
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


# --------------------------------------------------------------------------------------------
# Formulas
# --------------------------------------------------------------------------------------------
def _split_roots(M: sp.Matrix) -> list[sp.Expr] | None:
    """Eigenvalues of ``M`` with multiplicity, equal ones adjacent, when its characteristic
    polynomial splits into linear factors over the field of its entries (None otherwise)."""
    charpoly = M.charpoly()
    x = charpoly.gens[0]
    numerator, _ = sp.fraction(sp.together(charpoly.as_expr()))
    try:
        factors = sp.factor_list(numerator)[1]
    except (sp.PolynomialError, NotImplementedError):  # not a polynomial SymPy can factor
        return None
    roots: list[sp.Expr] = []
    for factor, multiplicity in factors:
        if not factor.has(x):
            continue
        poly = sp.Poly(factor, x)
        if poly.degree() != 1:
            return None
        lead, const = poly.all_coeffs()
        roots.extend([sp.cancel(-const / lead)] * multiplicity)
    return roots if len(roots) == M.shape[0] else None


def _exponential_by_divided_differences(M: sp.Matrix, roots: list[sp.Expr]) -> sp.Matrix:
    """``e^M = Σ_k f[λ_1, …, λ_{k+1}] Π_{j≤k} (M − λ_j I)`` with ``f(λ) = e^λ`` (Newton's
    interpolation of the exponential at the eigenvalues, Putzer's algorithm [5]).

    ``roots`` are the eigenvalues with equal ones adjacent; a divided difference over ``k + 1``
    equal points is the derivative ``e^λ / k!``.  Distinct factors of the characteristic
    polynomial have generically distinct roots: where they meet at particular parameter values
    the closed form is 0/0 there, which the numeric comparison then reports.
    """
    n = M.shape[0]
    memo: dict[tuple[int, int], sp.Expr] = {}

    def divided(i: int, j: int) -> sp.Expr:
        if (i, j) not in memo:
            if roots[i] == roots[j]:  # the group of equal roots is contiguous
                memo[i, j] = sp.exp(roots[i]) / sp.factorial(j - i)
            else:
                memo[i, j] = (divided(i + 1, j) - divided(i, j - 1)) / (roots[j] - roots[i])
        return memo[i, j]

    product = sp.eye(n)
    E = sp.zeros(n, n)
    for k in range(n):
        E += divided(0, k) * product
        product = product * (M - roots[k] * sp.eye(n))
    return E


def _tidy_exponential_entry(e: sp.Expr) -> sp.Expr:
    """Gather the terms of each exponential over one factored coefficient:
    ``(1 − e^{−aT})/a`` comes out as ``1/a − e^{−aT}/a`` rather than over a common
    denominator with ``e^{aT}`` in it."""
    atoms = sorted(e.atoms(sp.exp), key=sp.default_sort_key)
    if not atoms:
        return sp.factor(e)
    marks = sp.symbols(f"_e0:{len(atoms)}", cls=sp.Dummy)
    numerator, denominator = sp.fraction(sp.cancel(e.xreplace(dict(zip(atoms, marks)))))
    if denominator.has(*marks):  # not a sum of exponentials over a polynomial
        return e
    terms = sp.Poly(numerator, *marks).terms()
    return sp.Add(
        *(
            sp.factor(coeff / denominator)
            * sp.powsimp(sp.Mul(*(a**k for a, k in zip(atoms, powers))))
            for powers, coeff in terms
        )
    )


def zero_order_hold(A, B, T) -> tuple[sp.Matrix, sp.Matrix]:
    """ZOH equivalent in closed form: ``Φ = e^{AT}``, ``Γ = ∫₀ᵀ e^{Aτ} dτ B``.

    Parameters
    ----------
    A, B : sympy.Matrix
        May contain parameters.
    T : sympy.Expr
        The sample time, a positive number or symbol.

    Returns
    -------
    (Phi, Gamma) : sympy.Matrix
        From ``exp([[A, B], [0, 0]] T)`` (Van Loan [3]).  When the characteristic polynomial
        of that matrix splits into linear factors over the parameters (real poles given by
        rational expressions: integrators, lags), by Newton's interpolation of the exponential
        at its eigenvalues (Putzer [5]), tens of milliseconds; otherwise by SymPy's matrix
        exponential (Jordan form, seconds), complex exponentials rewritten as sines and
        cosines.  Unbounded: run it under :func:`symbolic.runtime.budget.run_bounded`.

    References
    ----------
    Franklin, Powell and Workman [1] Sec. 4.3; Putzer [5].

    Examples
    --------
    >>> T = sp.Symbol("T", positive=True)
    >>> zero_order_hold(sp.Matrix([[0, 1], [0, 0]]), sp.Matrix([0, 1]), T)
    (Matrix([
    [1, T],
    [0, 1]]), Matrix([
    [T**2/2],
    [     T]]))
    """
    Phi, Gamma, _ = _zero_order_hold_and_method(A, B, T)
    return Phi, Gamma


#: How :func:`zero_order_hold` found the exponential, as the digital controller reports it.
ZOH_BY_INTERPOLATION = "Putzer's method"  # the exponential interpolated at the eigenvalues
ZOH_BY_JORDAN_FORM = "SymPy's matrix exponential"  # by the Jordan form


def _zero_order_hold_and_method(A, B, T) -> tuple[sp.Matrix, sp.Matrix, str]:
    A, B = sp.Matrix(A), sp.Matrix(B)
    n, m = A.shape[0], B.shape[1]
    M = A.row_join(B).col_join(sp.zeros(m, n + m)) * T
    roots = _split_roots(M)
    if roots is not None:
        E = _exponential_by_divided_differences(M, roots)
        tidy_entries = E.applyfunc(_tidy_exponential_entry)
        return tidy_entries[:n, :n], tidy_entries[:n, n:], ZOH_BY_INTERPOLATION
    E = M.exp()

    def tidy(e: sp.Expr) -> sp.Expr:
        if e.has(sp.I):
            e = e.rewrite(sp.cos)
        # simplify is cheap on the short entries of simple plants and slow (seconds) on the
        # long ones of a damped oscillator, where it hardly shortens them
        return sp.simplify(e) if sp.count_ops(e) <= SIMPLIFY_LIMIT else e

    return E[:n, :n].applyfunc(tidy), E[:n, n:].applyfunc(tidy), ZOH_BY_JORDAN_FORM


def discrete_coefficients(poles, T) -> tuple[sp.Expr, ...]:
    """Exact coefficients ``[1, …, a_0]`` of Π (z − e^{s_i T}), real by construction.

    A conjugate pair σ ± jω gives ``z² − 2 e^{σT} cos(ωT) z + e^{2σT}``.

    Examples
    --------
    >>> discrete_coefficients((-1 + 2*sp.I, -1 - 2*sp.I), sp.Rational(1, 10))
    (1, -2*exp(-1/10)*cos(1/5), exp(-1/5))
    """
    factors = []
    remaining = list(poles)
    while remaining:
        p = remaining.pop(0)
        re_, im_ = sp.re(p), sp.im(p)
        if im_ == 0:
            factors.append(z - sp.exp(re_ * T))
            continue
        conj = sp.conjugate(p)
        for i, q in enumerate(remaining):
            if sp.simplify(q - conj) == 0:
                remaining.pop(i)
                break
        else:
            raise StructureError(f"pole {format_pole(p, None)} has no conjugate", key="poles")
        w = abs(im_)
        factors.append(z**2 - 2 * sp.exp(re_ * T) * sp.cos(w * T) * z + sp.exp(2 * re_ * T))
    poly = sp.Poly(sp.expand(sp.Mul(*factors)), z)
    return tuple(poly.all_coeffs())


def _opaque(M: sp.Matrix) -> tuple[sp.Matrix, dict]:
    """Replace functions and fractional powers by symbols so that DomainMatrix sees a field
    of rational functions; returns the matrix and the map back."""
    atoms = set()
    for e in M:
        atoms |= e.atoms(sp.Function)
        atoms |= {a for a in e.atoms(sp.Pow) if not a.exp.is_Integer}
    back = {}
    forward = {}
    for i, a in enumerate(sorted(atoms, key=sp.default_sort_key)):
        d = sp.Symbol(f"_zoh{i}")
        forward[a] = d
        back[d] = a
    return M.xreplace(forward), back


def ackermann_in_z(Phi: sp.Matrix, Gamma: sp.Matrix, coeffs) -> sp.Matrix:
    """``K = e_nᵀ 𝒞⁻¹ α(Φ)`` for transcendental Φ, Γ and coefficients.

    :func:`symbolic.derivation.closed_form.ackermann` gives ``wᵀ = e_nᵀ 𝒞⁻¹`` over a field of rational
    functions (exponentials replaced by symbols); ``α(Φ) = Σ a_i Φ^{n−i}`` is then summed with
    the exact coefficients, which are not in that field.
    """
    n = Phi.shape[0]
    both, back = _opaque(Phi.row_join(Gamma))
    P, G = both[:, :n], both[:, n:]
    steps = cf.ackermann(P, G, (1,) + (0,) * n)
    row = steps.last_row_of_inverse
    powers = [row]
    for _ in range(n):
        powers.append((powers[-1] * P).applyfunc(sp.cancel))
    K = sp.zeros(1, n)
    for i, c in enumerate(coeffs):
        K += c * powers[n - i]
    return K.xreplace(back)


@dataclass(frozen=True)
class _Forms:
    Phi: sp.Matrix
    Gamma: sp.Matrix
    K: sp.Matrix | None
    L: sp.Matrix | None
    zoh_method: str


def _gain_stage(Phi, Gamma, C, ctrl_coeffs, obs_coeffs) -> tuple[sp.Matrix | None, ...]:
    K = L = None
    if Gamma.shape[1] == 1:
        K = ackermann_in_z(Phi, Gamma, ctrl_coeffs)
    if C.shape[0] == 1:
        L = ackermann_in_z(Phi.T, C.T, obs_coeffs).T
    return K, L


def _closed_form_steps(A, B, C, T_exact, controller_poles, observer_poles, seconds: float):
    """Φ, Γ (and how), then K and L_p in z or the reason they are skipped: successive steps
    of one bounded child (:class:`symbolic.runtime.budget.BoundedChild`), sharing its deadline."""
    start = time.monotonic()
    Phi, Gamma, method = _zero_order_hold_and_method(A, B, T_exact)
    yield Phi, Gamma, method
    size = sum(sp.count_ops(e) for e in Phi) + sum(sp.count_ops(e) for e in Gamma)
    if size > GAIN_CLOSED_FORM_LIMIT:
        yield f"Φ and Γ have {size} operations (limit {GAIN_CLOSED_FORM_LIMIT})"
        return
    if seconds - (time.monotonic() - start) < 0.1:
        yield "the time budget is used up"
        return
    yield _gain_stage(
        Phi,
        Gamma,
        C,
        discrete_coefficients(controller_poles, T_exact),
        discrete_coefficients(observer_poles, T_exact),
    )


_ZOH_STEP = "the closed-form ZOH model (symbolic matrix exponential)"
_GAIN_STEP = "the closed-form gains in z"


def _exact_sample_time(sample_time) -> sp.Rational:
    return (
        sp.Rational(sample_time)
        if not isinstance(sample_time, float)
        else sp.Rational(repr(sample_time))
    )


def start_closed_forms(
    design, controller_poles, observer_poles, *, sample_time=None, budget: float | None = None
) -> BoundedChild | None:
    """Start Φ, Γ and the gains in z in closed form, in a bounded child (None when there is
    no valid sample time: :func:`digital_controller` then reports it).

    :func:`symbolic.derive` starts it beside its own symbolic stage and hands it to
    :func:`digital_controller` (``pending``), so that the two run at the same time.
    """
    if sample_time is None:
        if design.discrete is None:
            return None
        sample_time = design.discrete.sample_time
    try:
        T_exact = _exact_sample_time(sample_time)
    except (TypeError, ValueError):
        return None
    if not (T_exact > 0 and math.isfinite(float(T_exact))):
        return None
    plant = design.plant
    return BoundedChild(
        _closed_form_steps,
        (
            sp.Matrix(plant.A),
            sp.Matrix(plant.B),
            sp.Matrix(plant.C),
            T_exact,
            tuple(controller_poles),
            tuple(observer_poles),
            _seconds(design, budget),
        ),
        seconds=_seconds(design, budget),
        what=_ZOH_STEP,
    )


def _collect_closed_forms(pending: BoundedChild, notes: list[str]) -> _Forms | None:
    """The steps of :func:`_closed_form_steps` as a ``_Forms``, with a note for what is
    missing."""
    results, _, stopped = pending.steps()
    if not results:
        notes.append(
            f"discrete: {stopped}; Φ and Γ are computed with scipy.linalg.expm of the augmented"
            " matrix [[A, B], [0, 0]]·T instead"
        )
        return None
    Phi, Gamma, method = results[0]
    if len(results) < 2:
        reason = str(stopped).replace(_ZOH_STEP, _GAIN_STEP)
        notes.append(f"discrete: {reason}; K and L_p are given as numbers only")
        return _Forms(Phi, Gamma, None, None, method)
    if isinstance(results[1], str):
        notes.append(
            f"discrete: K and L_p are not given in closed form ({results[1]}); numbers only"
        )
        return _Forms(Phi, Gamma, None, None, method)
    K, L = results[1]
    return _Forms(Phi, Gamma, K, L, method)


def numeric_zero_order_hold(
    A: np.ndarray, B: np.ndarray, T: float
) -> tuple[np.ndarray, np.ndarray]:
    """Φ and Γ from one ``scipy.linalg.expm`` of the augmented matrix (Van Loan [3])."""
    import scipy.linalg  # not at the top: derive leaves SciPy to the sidecar

    n, m = B.shape
    M = np.zeros((n + m, n + m))
    M[:n, :n] = A * T
    M[:n, n:] = B * T
    E = scipy.linalg.expm(M)
    return E[:n, :n], E[:n, n:]


def discrete_feedback_gain(Phi: np.ndarray, Gamma: np.ndarray, poles_z) -> np.ndarray:
    """Numeric K with eig(Φ − ΓK) at the given z-plane poles.

    One input: Ackermann's formula in floating point [4] (repeated poles allowed); several
    inputs: ``scipy.signal.place_poles`` (not unique), refused when it misses the poles.  The
    observer gain is the dual: ``discrete_feedback_gain(Φᵀ, Cᵀ, poles).T``.

    Raises
    ------
    StructureError
        Several inputs and ``place_poles`` cannot place these poles.

    Examples
    --------
    >>> Phi = np.array([[1.0, 0.1], [0.0, 1.0]]); Gamma = np.array([[0.005], [0.1]])
    >>> K = discrete_feedback_gain(Phi, Gamma, [0.5, 0.6])
    >>> np.sort(np.linalg.eigvals(Phi - Gamma @ K).real).round(12)
    array([0.5, 0.6])
    """
    poles_z = np.asarray(poles_z, dtype=complex)
    if Gamma.shape[1] == 1:
        return numeric_ackermann(Phi, Gamma, poles_z)
    K, how = scipy_placement(Phi, Gamma, poles_z)
    if K is None:
        raise StructureError(f"cannot place the discrete poles: {how}", key="discrete.sample_time")
    return K


def _seconds(design, budget: float | None) -> float:
    seconds = design.symbolic_budget_seconds if budget is None else budget
    return CLOSED_FORM_SECONDS if seconds <= 0 else min(seconds, CLOSED_FORM_SECONDS)


def controller_equations(
    form: str,
    Phi,
    Gamma,
    C,
    D,
    K,
    Lp,
    Lc,
    N,
    T: float,
    *,
    reduced: DiscreteReduced | None = None,
    integral: DiscreteIntegral | None = None,
    tracked: int = 0,
) -> DifferenceEquations:
    """The controller of one form as difference equations (see :class:`DifferenceEquations`).

    Every form is written as an estimate map and an observer update,
    ``x̂ = E_ξ ξ_o + E_y y + E_u u`` and ``ξ_o[k+1] = O_ξ ξ_o + O_y y + O_u u``; the control
    ``u = −K x̂ + N r`` (or ``u = −K x̂ − k_i x_I`` with integral action) is solved for u, which
    enters the estimate only through D: ``(I + K E_u) u = …``.
    """
    n, m = Gamma.shape
    p = C.shape[0]
    if form == "predictor":
        # x̂ = ξ;  x̂⁺ = (Φ − L_p C) x̂ + (Γ − L_p D) u + L_p y
        E_xi, E_y, E_u = np.eye(n), np.zeros((n, p)), np.zeros((n, m))
        O_xi, O_y, O_u = Phi - Lp @ C, Lp.copy(), Gamma - Lp @ D
        names = tuple(f"x_hat[{i}]" for i in range(n))
        text = (
            "predictor observer: u[k] = −K x̂[k] + N r[k];"
            " x̂[k+1] = (Φ − L_p C) x̂[k] + (Γ − L_p D) u[k] + L_p y[k]"
        )
    elif form == "current":
        # x̂ = (I − L_c C) x̄ + L_c y − L_c D u;  x̄⁺ = Φ x̂ + Γ u
        E_xi, E_y, E_u = np.eye(n) - Lc @ C, Lc, -Lc @ D
        O_xi, O_y, O_u = Phi @ E_xi, Phi @ Lc, Gamma - Phi @ Lc @ D
        names = tuple(f"x_bar[{i}]" for i in range(n))
        text = (
            "current estimator: x̂[k] = x̄[k] + L_c (y[k] − C x̄[k] − D u[k]);"
            " u[k] = −K x̂[k] + N r[k]; x̄[k+1] = Φ x̂[k] + Γ u[k]"
        )
    elif form == "reduced" and reduced is not None:
        # x̂ = T⁻¹Ĉ η + T⁻¹D̂ ȳ, ȳ = y − D u;  η⁺ = Â η + B̂ ȳ + F̂ u
        E_xi, E_y = reduced.estimate_from_state, reduced.estimate_from_output
        E_u = -E_y @ D
        O_xi, O_y = reduced.observer_matrix, reduced.output_input
        O_u = reduced.control_input - reduced.output_input @ D
        names = tuple(f"eta[{i}]" for i in range(O_xi.shape[0]))
        text = (
            "reduced-order observer: x̂[k] = T⁻¹ [ȳ[k]; η[k] + L_r ȳ[k]] with ȳ = y − D u;"
            " u[k] = −K x̂[k] + N r[k]; η[k+1] = Â η[k] + B̂ ȳ[k] + F̂ u[k]"
        )
    else:
        raise ValueError(f"unknown or unavailable form {form!r}")
    Kx = K if integral is None else integral.K
    Mi = np.linalg.inv(np.eye(m) + Kx @ E_u)
    if integral is None:
        return DifferenceEquations(
            estimate_state=E_xi,
            estimate_measurement=E_y,
            estimate_control=E_u,
            form=form,
            state_matrix=O_xi,
            measurement_matrix=O_y,
            control_matrix=O_u,
            output_state=-Mi @ Kx @ E_xi,
            output_measurement=-Mi @ Kx @ E_y,
            output_reference=Mi @ N,
            sample_time=T,
            description=text,
            state_names=names,
        )
    # integral action: ξ = [ξ_o; x_I], x_I⁺ = x_I + T (y_t − r), u = −K x̂ − k_i x_I
    no = O_xi.shape[0]
    e_t = np.zeros((1, p))
    e_t[0, tracked] = 1.0
    Ao = np.block([[O_xi, np.zeros((no, 1))], [np.zeros((1, no)), np.ones((1, 1))]])
    Boy = np.vstack([O_y, T * e_t])
    Bou = np.vstack([O_u, np.zeros((1, m))])
    Bor = np.vstack([np.zeros((no, 1)), [[-T]]])
    Baw = np.vstack([np.zeros((no, m)), T * integral.back_calculation])
    text = (
        text.replace("u[k] = −K x̂[k] + N r[k]", "u[k] = −K x̂[k] − k_i x_I[k]")
        + "; x_I[k+1] = x_I[k] + T (y_t[k] − r[k])"
        + " + T (u_d[k] − u[k])/(k_i T_t) while the input is limited"
    )
    return DifferenceEquations(
        form=form,
        state_matrix=Ao,
        measurement_matrix=Boy,
        control_matrix=Bou,
        output_state=Mi @ np.hstack([-Kx @ E_xi, -integral.integral_gain]),
        output_measurement=-Mi @ Kx @ E_y,
        output_reference=np.zeros((m, 1)),
        sample_time=T,
        description=text,
        reference_input=Bor,
        anti_windup=Baw,
        integrator_index=no,
        state_names=names + ("x_I",),
        estimate_state=np.hstack([E_xi, np.zeros((E_xi.shape[0], 1))]),
        estimate_measurement=E_y,
        estimate_control=E_u,
    )


def loop_matrices(eq: DifferenceEquations, Phi, Gamma, C, D) -> tuple[np.ndarray, np.ndarray]:
    """Plant and controller at the samples, state [x; ξ]: ``w⁺ = F w + G r``.

    The same interconnection in continuous time (``w' = F w + G r``) with A, B in place of
    Φ, Γ and continuous controller equations (:func:`continuous_equations`); the
    anti-windup term is inactive in the linear loop.
    """
    m = Gamma.shape[1]
    Mi = np.linalg.inv(np.eye(m) - eq.output_measurement @ D)
    Ux = Mi @ eq.output_measurement @ C
    Uxi = Mi @ eq.output_state
    Ur = Mi @ eq.output_reference
    Bxi = eq.measurement_matrix @ D + eq.control_matrix
    F = np.block(
        [
            [Phi + Gamma @ Ux, Gamma @ Uxi],
            [eq.measurement_matrix @ C + Bxi @ Ux, eq.state_matrix + Bxi @ Uxi],
        ]
    )
    Gxi = Bxi @ Ur
    if eq.reference_input is not None:
        Gxi = Gxi + eq.reference_input
    G = np.vstack([Gamma @ Ur, Gxi])
    return F, G


# --------------------------------------------------------------------------------------------
# The design
# --------------------------------------------------------------------------------------------
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
        Seconds for the closed forms; never more than :data:`CLOSED_FORM_SECONDS`, and that
        limit also applies when the design's budget is zero (the exponential of a symbolic
        matrix may not finish).
    closed_form : bool, optional
        False skips the symbolic stages (numbers only, no child process).
    pending : BoundedChild, optional
        The closed forms already started by :func:`start_closed_forms` for the same design,
        poles and sample time (default: started here).

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
        :data:`SAMPLE_RATE_RANGE`; a plant pole that aliases.

    Notes
    -----
    ``Φ, Γ`` in closed form (:func:`zero_order_hold`) within the budget, otherwise by
    ``scipy.linalg.expm`` of the augmented matrix (note), and always compared with
    ``scipy.signal.cont2discrete(..., method="zoh")``.  K and ``L_p`` by Ackermann's formula in
    z (closed form when Φ, Γ have one; floating point otherwise), compared with
    ``scipy.signal.place_poles`` and with the eigenvalues of ``Φ − ΓK`` and ``Φ − L_p C``.

    References
    ----------
    See the module references [1]-[4].

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
    design = d.design
    values = design.values
    if sample_time is None:
        if design.discrete is None:
            raise StructureError(
                "no sample time: add a [discrete] table with sample_time",
                design.path,
                "discrete.sample_time",
            )
        sample_time = design.discrete.sample_time
    T_exact = _exact_sample_time(sample_time)
    T = float(T_exact)
    if not (T > 0 and math.isfinite(T)):
        raise StructureError(
            f"the sample time must be positive, got {sample_time}",
            design.path,
            "discrete.sample_time",
        )
    notes: list[str] = []
    checks: list[Check] = []
    soft: list[str] = []
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    n, m = A.shape[0], B.shape[1]
    sc, so = d.controller_poles.values, d.observer_poles.values

    # ---- aliasing -----------------------------------------------------------------------
    for label, poles in (("controller", sc), ("observer", so)):
        worst = max(poles, key=lambda s: abs(s.imag))
        if abs(worst.imag) * T >= math.pi:
            raise StructureError(
                f"the sample time {T:g} s is too long for the {label} pole"
                f" {format_pole(worst)}: |Im s|·T = {abs(worst.imag) * T:.4g} ≥ π,"
                " so the pole aliases (a different pole would give the same z = e^{sT});"
                f" choose T < π/|Im s| = {math.pi / abs(worst.imag):.4g} s, and in practice"
                " much shorter",
                design.path,
                "discrete.sample_time",
            )
    plant_poles = np.linalg.eigvals(A)
    if plant_poles.size and np.max(np.abs(plant_poles.imag)) * T >= math.pi:
        soft.append(
            f"a plant pole aliases at T = {T:g} s (|Im s|·T ≥ π): the sampled model cannot tell"
            " that mode from a slower one; sample faster"
        )

    # ---- ZOH --------------------------------------------------------------------------------
    zc, zo = np.exp(sc * T), np.exp(so * T)
    forms = None
    if closed_form:
        if pending is None:
            pending = start_closed_forms(
                design,
                d.controller_poles.poles,
                d.observer_poles.poles,
                sample_time=sample_time,
                budget=budget,
            )
        forms = _collect_closed_forms(pending, notes) if pending is not None else None
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

    # ---- gains in z ---------------------------------------------------------------------------
    def gain(name, closed, M, G, poles):
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
                        f"discrete: {label} by Ackermann in z vs scipy.signal.place_poles"
                        " (relative)",
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

    K, K_cf = gain("K", K_cf, Phi, Gamma, zc)
    Lt, L_cf = gain("L", L_cf, Phi.T, C.T, zo)
    Lp = Lt.T
    Lc = np.linalg.solve(Phi, Lp)
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

    # ---- reference gain -----------------------------------------------------------------------
    idx = d.reference.tracked_index if d.reference is not None else design.tracking.output
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
    Nv = N if N is not None else np.zeros((m, 1))

    # ---- integral action and the reduced-order observer in z ----------------------------
    integral = reduced = None
    if design.tracking.method == "integral":
        integral = _integral_in_z(d, Phi, Gamma, C, D, T, idx, zc, checks)
    if design.observer.kind == "reduced":
        reduced = _reduced_in_z(d, Phi, Gamma, C, T, checks, notes)

    # ---- every implementation form, in the sampled loop -----------------------------------
    equations = {}
    forms = OBSERVER_FORMS + (("reduced",) if reduced is not None else ())
    loop_controller = zc if integral is None else np.append(zc, integral.integral_pole_z)
    for form in forms:
        eq = controller_equations(
            form,
            Phi,
            Gamma,
            C,
            D,
            K,
            Lp,
            Lc,
            Nv,
            T,
            reduced=reduced,
            integral=integral,
            tracked=idx,
        )
        equations[form] = eq
        F, _G = loop_matrices(eq, Phi, Gamma, C, D)
        observer_z = reduced.poles_z if form == "reduced" else zo
        union = np.concatenate([loop_controller, observer_z])
        what = {
            "current": "current estimator",
            "predictor": "predictor observer",
            "reduced": "reduced-order observer",
        }[form]
        extra = " and the integrator" if integral is not None else ""
        checks.append(
            eigenvalue_check(
                f"discrete: sampled loop with the {what}{extra} has poles e^(sT) of controller"
                f"{' (with the integral pole)' if integral is not None else ''} ∪ observer",
                F,
                union,
                terms=(Phi, (Gamma, K), (Lp, C)),
            )
        )

    # ---- guidance ------------------------------------------------------------------------------
    for label, zs in (("controller", zc), ("observer", zo)):
        near = zs[np.abs(zs) > NEAR_UNIT_CIRCLE]
        if near.size:
            soft.append(
                f"{near.size} {label} pole(s) map within 1 % of the unit circle (|z| up to"
                f" {np.max(np.abs(near)):.5f}): T is very short against their time constants, so"
                " the difference-equation coefficients need many digits (fixed-point or single"
                " precision will move these poles)"
            )
    bandwidth = ratio = lag = None
    if d.reference is not None:
        bandwidth = closed_loop_bandwidth(A, B, C, D, d.K.value, d.reference.value, idx)
    if bandwidth is not None:
        ratio = (2 * math.pi / T) / bandwidth
        lag = bandwidth * T / 2
        lo, hi = SAMPLE_RATE_RANGE
        if ratio < lo:
            soft.append(
                f"sampling at {ratio:.3g} times the closed-loop bandwidth ({bandwidth:.4g} rad/s);"
                f" rule of thumb (common practice, no source): {lo:g} to {hi:g} times. The hold"
                f" alone lags {math.degrees(lag):.3g}° at the bandwidth: expect more overshoot"
                " than the continuous design"
            )
        elif ratio > hi:
            soft.append(
                f"sampling at {ratio:.3g} times the closed-loop bandwidth ({bandwidth:.4g} rad/s),"
                f" above the {lo:g} to {hi:g} times of the rule of thumb (common practice, no"
                " source): fine for the response, but the poles crowd towards z = 1"
            )
    else:
        notes.append("discrete: no closed-loop bandwidth found; no sample-rate guidance")
    for text in soft:
        warnings.warn(text, GainsmithWarning, stacklevel=2)
    notes.extend(f"discrete: {t}" for t in soft)
    method = (
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
            if C.shape[0] == 1
            else "by scipy.signal.place_poles on the dual pair (several outputs: not unique)"
        )
    )
    return DigitalController(
        sample_time=T,
        sample_time_exact=T_exact,
        Phi=Phi,
        Gamma=Gamma,
        Phi_closed_form=Phi_cf,
        Gamma_closed_form=Gamma_cf,
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
        method=method,
        checks=tuple(checks),
        notes=tuple(notes),
        integral=integral,
        reduced=reduced,
    )


def _integral_in_z(d, Phi, Gamma, C, D, T, idx, zc, checks) -> DiscreteIntegral:
    """``[K, k_i]`` placing e^{sT} of the controller poles and the integral pole."""
    from .integral import default_integral_pole

    design = d.design
    n, m = Gamma.shape
    if design.tracking.integral_pole is not None:
        pole = complex(design.tracking.integral_pole)
        rule = "integral pole as given in the design file (tracking.integral_pole)"
    else:
        expr, rule = default_integral_pole(d.controller_poles.poles)
        pole = complex(expr)
    zi = complex(np.exp(pole * T))
    Ct, Dt = C[idx : idx + 1, :], D[idx : idx + 1, :]
    Pa = np.block([[Phi, np.zeros((n, 1))], [T * Ct, np.ones((1, 1))]])
    Ga = np.vstack([Gamma, T * Dt])
    poles = np.append(zc, zi)
    try:
        Ka = discrete_feedback_gain(Pa, Ga, poles)
    except (StructureError, np.linalg.LinAlgError) as exc:
        raise StructureError(
            "the discrete integral loop cannot be placed: the sampled plant with the running"
            f" sum of the tracking error is uncontrollable at T = {T:g} s ({exc})",
            design.path,
            "tracking.method",
        ) from exc
    how = "by Ackermann's formula in z on the augmented pair"
    if m == 1:
        reference, why = scipy_placement(Pa, Ga, poles)
        if reference is not None:
            diff = relative_difference(Ka, reference)
            checks.append(
                Check(
                    "discrete: [K, k_i] by Ackermann in z vs scipy.signal.place_poles on"
                    " (Φ_a, Γ_a) (relative)",
                    diff,
                    GAIN_TOLERANCE,
                    diff <= GAIN_TOLERANCE,
                )
            )
        else:
            checks.append(
                Check("discrete: [K, k_i] vs scipy.signal.place_poles", None, None, None, why)
            )
    else:
        how = "by scipy.signal.place_poles on the augmented pair (several inputs: not unique)"
    checks.append(
        eigenvalue_check(
            "discrete: eigenvalues of Φ_a − Γ_a[K, k_i] vs e^(sT) of the poles",
            Pa - Ga @ Ka,
            poles,
            terms=(Pa, (Ga, Ka)),
            weights=np.abs(Pa) + np.abs(Ga) @ np.abs(Ka),
        )
    )
    ki = Ka[:, n:]
    tracking = 1.0 / abs(pole)
    back = np.linalg.pinv(ki) / tracking  # (1, m)
    return DiscreteIntegral(
        Phi_augmented=Pa,
        Gamma_augmented=Ga,
        K=Ka[:, :n],
        integral_gain=ki,
        K_augmented=Ka,
        integral_pole=pole,
        integral_pole_z=zi,
        pole_rule=rule,
        tracking_time=tracking,
        back_calculation=back,
        method=how,
    )


def _reduced_in_z(d, Phi, Gamma, C, T, checks, notes) -> DiscreteReduced | None:
    """The minimum-order observer of the sampled plant (poles e^{sT} of the reduced ones)."""
    from .reduced import coordinate_change, observer_matrices, reduced_observer_poles

    design = d.design
    n, p = Phi.shape[0], C.shape[0]
    rest = n - p
    if rest == 0:
        notes.append("discrete: every state is measured; no reduced-order observer form")
        return None
    try:
        rows = coordinate_change(C)
    except StructureError as exc:
        raise StructureError(exc.problem, design.path, "plant.C") from exc
    if design.observer.reduced_poles is not None:
        poles = tuple(complex(z) for z in design.observer.reduced_poles)
        rule = "reduced observer poles as given in the design file (observer.poles)"
    else:
        chosen, rule = reduced_observer_poles(tuple(d.observer_poles.poles), rest)
        poles = tuple(complex(z) for z in chosen)
    for s_ in poles:
        if abs(s_.imag) * T >= math.pi:
            raise StructureError(
                f"the sample time {T:g} s is too long for the reduced observer pole"
                f" {format_pole(s_)}: |Im s|·T ≥ π, so the pole aliases",
                design.path,
                "discrete.sample_time",
            )
    zr = np.exp(np.array(poles) * T)
    Tm = np.vstack([C] + [np.eye(n)[j : j + 1] for j in rows])
    Ti = np.linalg.inv(Tm)
    Pb, Gb = Tm @ Phi @ Ti, Tm @ Gamma
    Paa, Pab, Pba, Pbb = Pb[:p, :p], Pb[:p, p:], Pb[p:, :p], Pb[p:, p:]
    Ga_, Gb_ = Gb[:p, :], Gb[p:, :]
    try:
        Lr = discrete_feedback_gain(Pbb.T, Pab.T, zr).T
    except (StructureError, np.linalg.LinAlgError) as exc:
        raise StructureError(
            f"the discrete reduced-order observer cannot be placed at T = {T:g} s ({exc})",
            design.path,
            "discrete.sample_time",
        ) from exc
    if p == 1:
        reference, why = scipy_placement(Pbb.T, Pab.T, zr)
        if reference is not None:
            diff = relative_difference(Lr, reference.T)
            checks.append(
                Check(
                    "discrete: L_r by Ackermann in z vs scipy.signal.place_poles on"
                    " (Φ_bbᵀ, Φ_abᵀ) (relative)",
                    diff,
                    GAIN_TOLERANCE,
                    diff <= GAIN_TOLERANCE,
                )
            )
        else:
            checks.append(Check("discrete: L_r vs scipy.signal.place_poles", None, None, None, why))
    checks.append(
        eigenvalue_check(
            "discrete: eigenvalues of Φ_bb − L_r Φ_ab vs e^(sT) of the reduced observer poles",
            Pbb - Lr @ Pab,
            zr,
            terms=(Pbb, (Lr, Pab)),
            weights=np.abs(Pbb) + np.abs(Lr) @ np.abs(Pab),
        )
    )
    Ahat, Bhat, Fhat, Chat, Dhat = observer_matrices(Paa, Pab, Pba, Pbb, Ga_, Gb_, Lr)
    return DiscreteReduced(
        T=Tm,
        T_inverse=Ti,
        Phi_aa=Paa,
        Phi_ab=Pab,
        Phi_ba=Pba,
        Phi_bb=Pbb,
        Gamma_a=Ga_,
        Gamma_b=Gb_,
        L=Lr,
        poles=poles,
        poles_z=zr,
        pole_rule=rule,
        observer_matrix=Ahat,
        output_input=Bhat,
        control_input=Fhat,
        estimate_from_state=Ti @ Chat,
        estimate_from_output=Ti @ Dhat,
    )


# --------------------------------------------------------------------------------------------
# Running the difference equations
# --------------------------------------------------------------------------------------------
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
    :func:`symbolic.verification.metrics.step_metrics` on both.

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
    from ..analysis.study import loop_model
    from ..verification.horizon import default_horizon
    from ..verification.metrics import step_metrics
    from ..verification.step_results import Response
    from ..verification.stepping import simulate_step

    if digital is None:
        digital = getattr(d, "discrete", None) or digital_controller(d)
    if form not in digital.equations:
        raise ValueError(f"form must be one of {tuple(digital.equations)}, got {form!r}")
    design = d.design
    A, B, C, D = d.plant.A, d.plant.B, d.plant.C, d.plant.D
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    T = digital.sample_time
    eq = digital.equations[form]
    r = float(design.simulation.reference)
    x0 = np.array(design.simulation.initial_state or [0.0] * n, dtype=float)
    model = loop_model(d)
    if horizon is None:
        horizon = design.simulation.horizon or default_horizon(model)
    count = max(20, int(math.ceil(horizon / T)))
    count = min(count, 200_000)
    h = T / substeps
    Ph, Gh = numeric_zero_order_hold(A, B, h)

    runner = ControllerRunner(eq, u_max=u_max)
    runner.reset(matched_state(digital, form, x0))
    Mi = np.linalg.inv(np.eye(m) - eq.output_measurement @ D)
    x = x0.copy()
    fine_t, fine_y, fine_u, fine_x = [], [], [], []
    ks, ys, us = [], [], []
    idx = digital.tracked_index
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
    grid = np.array(fine_t)
    Y = np.array(fine_y)
    U = np.array(fine_u).reshape(len(fine_t), m)

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
    sampled = Response(
        name=f"sampled-data loop ({form})",
        slug=f"sampled_{form}",
        time=grid,
        output=Y,
        tracked_output=Y[:, idx],
        control=U,
        state=np.array(fine_x),
        estimate=None,
        estimation_error_norm=None,
        saturated=u_max is not None,
        reference=r,
        stable=bool(np.max(np.abs(poles)) < 1),
        final_value=final,
        horizon=float(grid[-1]),
        method=f"exact plant stepping, {substeps} steps per sample, ZOH input",
    )
    if digital.integral is None and form != "reduced":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", GainsmithWarning)
            cont = simulate_step(
                model,
                reference=r,
                x0=x0,
                horizon=float(grid[-1]),
                samples=min(20001, max(2001, grid.size)),
            )
    else:
        cont = _continuous_design_response(d, digital, form, x0, r, grid)
    return SampledDataStudy(
        form=form,
        time=grid,
        tracked_output=Y[:, idx],
        control=U,
        sample_times=np.array(ks),
        sampled_output=np.array(ys).reshape(len(ks), p),
        controls=np.array(us).reshape(len(ks), m),
        continuous_time=cont.time,
        continuous_output=cont.tracked_output,
        metrics=step_metrics(sampled),
        continuous_metrics=step_metrics(cont),
        closed_loop_poles=poles,
        final_value=final,
        substeps=substeps,
        notes=tuple(notes),
    )


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
    from ..verification.step_results import Response

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


# --------------------------------------------------------------------------------------------
# C99 export
# --------------------------------------------------------------------------------------------
_C_NAME = re.compile(r"[^A-Za-z0-9_]+")


def _c_prefix(name: str) -> str:
    text = _C_NAME.sub("_", name).strip("_").lower() or "controller"
    if not text[0].isalpha():
        text = "c_" + text
    return text[:40]


def _comment_text(text: str) -> str:
    """Printable ASCII only, and no comment terminator."""
    clean = "".join(ch if 32 <= ord(ch) < 127 else "?" for ch in text)
    return clean.replace("*/", "* /").replace("/*", "/ *")


def _c_number(x: float) -> str:
    text = repr(float(x))
    return text if any(ch in text for ch in ".en") else text + ".0"


def _c_matrix(name: str, M: np.ndarray) -> str:
    rows = ["    {" + ", ".join(_c_number(v) for v in row) + "}" for row in np.atleast_2d(M)]
    r, c = np.atleast_2d(M).shape
    return f"static const double {name}[{r}][{c}] = {{\n" + ",\n".join(rows) + "\n};\n"


_FORM_WORDS = {
    "current": "current estimator",
    "predictor": "predictor observer",
    "reduced": "reduced-order observer",
}


def _ascii_equations(digital: DigitalController, form: str, anti_windup: bool) -> list[str]:
    """The controller's equations in plain ASCII, one per line, for comments and docstrings."""
    law = "u[k] = -K x_hat[k] + N r[k]"
    if digital.integral is not None:
        law = "u[k] = -K x_hat[k] - k_i x_I[k]"
    if form == "predictor":
        lines = [
            law,
            "x_hat[k+1] = (Phi - Lp C) x_hat[k] + (Gamma - Lp D) u[k] + Lp y[k]",
        ]
    elif form == "current":
        lines = [
            "x_hat[k] = x_bar[k] + Lc (y[k] - C x_bar[k] - D u[k])",
            law,
            "x_bar[k+1] = Phi x_hat[k] + Gamma u[k]",
        ]
    else:
        lines = [
            "y_bar[k] = y[k] - D u[k]; x_hat[k] = inv(T) [y_bar[k]; eta[k] + Lr y_bar[k]]",
            law,
            "eta[k+1] = A_hat eta[k] + B_hat y_bar[k] + F_hat u[k]  (reduced-order observer)",
        ]
    if digital.integral is not None:
        line = "x_I[k+1] = x_I[k] + T (y_t[k] - r[k])"
        if anti_windup:
            line += " + T (u_d[k] - u[k]) / (k_i T_t)"
        lines.append(line)
        if anti_windup:
            lines.append(
                "  (back-calculation anti-windup: u_d is the demanded input before the limit,"
                f" T_t = {digital.integral.tracking_time!r} s)"
            )
    return lines


def _checked_form(digital: DigitalController, form: str | None) -> str:
    form = digital.default_form if form is None else form
    if form not in digital.equations:
        why = ' (the reduced form needs [observer] kind = "reduced")' if form == "reduced" else ""
        raise RenderError(
            f"unknown observer form {form!r}; expected one of {tuple(digital.equations)}{why}"
        )
    return form


def _state_lines(eq: DifferenceEquations) -> list[str]:
    names = eq.state_names or tuple(f"xi[{i}]" for i in range(eq.state_matrix.shape[0]))
    out = []
    for i, nm in enumerate(names):
        what = " (integral of y_t - r)" if i == eq.integrator_index else ""
        out.append(f"xi[{i}] = {nm}{what}")
    return out


def c_controller_files(
    digital: DigitalController,
    *,
    name: str = "controller",
    form: str | None = None,
    u_max: float | None = None,
    title: str = "",
) -> dict[str, bytes]:
    """The digital controller as C99: ``<prefix>.h`` and ``<prefix>.c``.

    The code has a fixed sample time, no allocation and no library calls: a state struct,
    ``<prefix>_reset(state)`` and ``double <prefix>_step(state, y, r)`` returning ``u[k]``
    (``y`` is a ``double`` for one output, ``const double y[P]`` otherwise).  With ``u_max``
    the output is limited inside ``step`` and the observer is fed the limited value; with
    integral action the integrator is then corrected by back-calculation (anti-windup, see
    :class:`DiscreteIntegral`).

    Parameters
    ----------
    form : {"current", "predictor", "reduced"}, optional
        Default :attr:`DigitalController.default_form`.

    Raises
    ------
    RenderError
        Several inputs (the C interface returns one u), or an unknown or unavailable form.
    """
    form = _checked_form(digital, form)
    eq = digital.equations[form]
    n = eq.state_matrix.shape[0]
    m = eq.output_state.shape[0]
    p = eq.measurement_matrix.shape[1]
    if m != 1:
        raise RenderError("the C export handles one input; this plant has several")
    pre = _c_prefix(name)
    PRE = pre.upper()
    guard = f"{PRE}_H"
    y_param = "double y" if p == 1 else f"const double y[{PRE}_OUTPUTS]"
    anti_windup = u_max is not None and eq.anti_windup is not None
    equations = "\n".join(f" *   {line}" for line in _ascii_equations(digital, form, anti_windup))
    states = "\n".join(f" *   {line}" for line in _state_lines(eq))
    extra_terms = ""
    if eq.reference_input is not None:
        extra_terms += " + Bor r[k]"
    if anti_windup:
        extra_terms += " + Baw (u_d[k] - u[k])"
    limit_macro = "" if u_max is None else f"#define {PRE}_U_MAX {_c_number(u_max)}\n"
    header = f"""/* {_comment_text(title or "gainsmith digital controller")}
 *
 * Generated by gainsmith.  Digital observer-based state feedback, {_FORM_WORDS[form]}:
{equations}
 * implemented as the difference equations
 *   u[k]     = Cc xi[k] + Dcy y[k] + Dcr r[k]          (limited to +/-U_MAX if defined)
 *   xi[k+1]  = Ao xi[k] + Boy y[k] + Bou u[k]{extra_terms}   (with the applied u)
 * with the controller state
{states}
 * Call {pre}_step exactly once every {PRE}_SAMPLE_TIME seconds, right after sampling y,
 * and apply the returned u through a zero-order hold until the next call.
 *
 * Caution: before this code drives a machine that moves, heats or flies, run it against the
 * simulation, then on the machine with reduced limits and an independent emergency stop.
 */
#ifndef {guard}
#define {guard}

#define {PRE}_SAMPLE_TIME {_c_number(digital.sample_time)}
#define {PRE}_STATES {n}
#define {PRE}_OUTPUTS {p}
{limit_macro}
typedef struct {{
    double xi[{PRE}_STATES];
}} {pre}_state;

/* Set the controller state to zero (estimate of a plant at rest, integrator empty). */
void {pre}_reset({pre}_state *state);

/* One sample: measurement y[k] and reference r[k] in, u[k] out. */
double {pre}_step({pre}_state *state, {y_param}, double r);

#endif /* {guard} */
"""
    y_at = "y" if p == 1 else "y[j]"
    limit = ""
    demanded_decl = ""
    demanded_set = ""
    if anti_windup:
        demanded_decl = "    double u_demanded;\n"
        demanded_set = "    u_demanded = u;\n"
    if u_max is not None:
        limit = (
            f"    if (u > {PRE}_U_MAX) {{\n        u = {PRE}_U_MAX;\n"
            f"    }} else if (u < -{PRE}_U_MAX) {{\n        u = -{PRE}_U_MAX;\n    }}\n"
        )
    loop_y_out = (
        f"    for (j = 0; j < {PRE}_OUTPUTS; ++j) {{\n        u += Dcy[0][j] * {y_at};\n    }}\n"
    )
    loop_y_state = (
        f"        for (j = 0; j < {PRE}_OUTPUTS; ++j) {{\n"
        f"            acc += Boy[i][j] * {y_at};\n        }}\n"
    )
    extra_state = ""
    tables = ""
    if eq.reference_input is not None:
        tables += _c_matrix("Bor", eq.reference_input) + "\n"
        extra_state += "        acc += Bor[i][0] * r;\n"
    if anti_windup:
        tables += _c_matrix("Baw", eq.anti_windup) + "\n"
        extra_state += "        acc += Baw[i][0] * (u_demanded - u);\n"
    source = f"""/* {_comment_text(title or "gainsmith digital controller")}: generated by gainsmith
 * ({_FORM_WORDS[form]}, sample time {digital.sample_time!r} s).  See {pre}.h.
 */
#include "{pre}.h"

{_c_matrix("Ao", eq.state_matrix)}
{_c_matrix("Boy", eq.measurement_matrix)}
{_c_matrix("Bou", eq.control_matrix)}
{tables}{_c_matrix("Cc", eq.output_state)}
{_c_matrix("Dcy", eq.output_measurement)}
static const double Dcr = {_c_number(eq.output_reference[0, 0])};

void {pre}_reset({pre}_state *state)
{{
    int i;
    for (i = 0; i < {PRE}_STATES; ++i) {{
        state->xi[i] = 0.0;
    }}
}}

double {pre}_step({pre}_state *state, {y_param}, double r)
{{
    double next[{PRE}_STATES];
    double u = Dcr * r;
{demanded_decl}    double acc;
    int i, j;
    for (j = 0; j < {PRE}_STATES; ++j) {{
        u += Cc[0][j] * state->xi[j];
    }}
{loop_y_out}{demanded_set}{limit}    for (i = 0; i < {PRE}_STATES; ++i) {{
        acc = 0.0;
        for (j = 0; j < {PRE}_STATES; ++j) {{
            acc += Ao[i][j] * state->xi[j];
        }}
{loop_y_state}        acc += Bou[i][0] * u;
{extra_state}        next[i] = acc;
    }}
    for (i = 0; i < {PRE}_STATES; ++i) {{
        state->xi[i] = next[i];
    }}
    return u;
}}
"""
    return {f"{pre}.h": header.encode("ascii"), f"{pre}.c": source.encode("ascii")}


def _py_tuple(M: np.ndarray) -> str:
    rows = ["(" + ", ".join(repr(float(v)) for v in row) + ",)" for row in np.atleast_2d(M)]
    return "(\n    " + ",\n    ".join(rows) + ",\n)"


def python_controller_source(
    digital: DigitalController,
    *,
    name: str = "controller",
    form: str | None = None,
    u_max: float | None = None,
    title: str = "",
) -> dict[str, bytes]:
    """The digital controller as a standalone Python module ``<prefix>.py`` (no imports).

    The Python counterpart of :func:`c_controller_files`: ``reset()`` returns a zero state
    (a list), ``step(state, y, r)`` returns ``u[k]`` and advances ``state`` in place, with the
    same arithmetic in the same order as the C code (and as :class:`ControllerRunner`).
    ``y`` is a number for one output, a sequence otherwise.

    Raises
    ------
    RenderError
        Several inputs, or an unknown or unavailable form.
    """
    form = _checked_form(digital, form)
    eq = digital.equations[form]
    m = eq.output_state.shape[0]
    p = eq.measurement_matrix.shape[1]
    if m != 1:
        raise RenderError("the Python controller export handles one input; this plant has several")
    pre = _c_prefix(name)
    anti_windup = u_max is not None and eq.anti_windup is not None
    doc = [
        f"{_comment_text(title or 'gainsmith digital controller')}: generated by gainsmith;"
        " do not edit.",
        "",
        f"Digital observer-based state feedback, {_FORM_WORDS[form]}:",
        *("    " + line for line in _ascii_equations(digital, form, anti_windup)),
        "implemented as the difference equations",
        "    u[k]    = Cc xi[k] + Dcy y[k] + Dcr r[k]   (limited to +/-U_MAX unless None)",
        "    xi[k+1] = Ao xi[k] + Boy y[k] + Bou u[k]"
        + (" + Bor r[k]" if eq.reference_input is not None else "")
        + (" + Baw (u_d[k] - u[k])" if anti_windup else ""),
        "with the controller state",
        *("    " + line for line in _state_lines(eq)),
        "",
        "Usage: state = reset(); then every SAMPLE_TIME seconds u = step(state, y, r).",
        "",
        "Caution: before this code drives a machine that moves, heats or flies, run it against",
        "the simulation, then on the machine with reduced limits and an independent emergency",
        "stop.",
    ]
    text = "\n".join(doc).replace("\\", "/").replace('"', "'")
    out = ['"""' + text + '\n"""', ""]
    out.append(f"SAMPLE_TIME = {digital.sample_time!r}")
    out.append(f"STATES = {eq.state_matrix.shape[0]}")
    out.append(f"OUTPUTS = {p}")
    out.append(f"U_MAX = {None if u_max is None else float(u_max)!r}")
    out.append(f"AO = {_py_tuple(eq.state_matrix)}")
    out.append(f"BOY = {_py_tuple(eq.measurement_matrix)}")
    out.append(f"BOU = {_py_tuple(eq.control_matrix)}")
    if eq.reference_input is not None:
        out.append(f"BOR = {_py_tuple(eq.reference_input)}")
    if anti_windup:
        out.append(f"BAW = {_py_tuple(eq.anti_windup)}")
    out.append(f"CC = {_py_tuple(eq.output_state)}")
    out.append(f"DCY = {_py_tuple(eq.output_measurement)}")
    out.append(f"DCR = {float(eq.output_reference[0, 0])!r}")
    out += [
        "",
        "",
        "def reset():",
        '    """A zero controller state (estimate of a plant at rest, integrator empty)."""',
        "    return [0.0] * STATES",
        "",
        "",
        "def step(state, y, r):",
        '    """One sample: returns u[k] and advances ``state`` (a list) in place."""',
        "    ys = [float(y)] if OUTPUTS == 1 else [float(v) for v in y]",
        "    r = float(r)",
        "    u = DCR * r",
        "    for j in range(STATES):",
        "        u += CC[0][j] * state[j]",
        "    for j in range(OUTPUTS):",
        "        u += DCY[0][j] * ys[j]",
    ]
    if anti_windup:
        out.append("    u_demanded = u")
    if u_max is not None:
        out += [
            "    if u > U_MAX:",
            "        u = U_MAX",
            "    elif u < -U_MAX:",
            "        u = -U_MAX",
        ]
    out += [
        "    nxt = []",
        "    for i in range(STATES):",
        "        acc = 0.0",
        "        for j in range(STATES):",
        "            acc += AO[i][j] * state[j]",
        "        for j in range(OUTPUTS):",
        "            acc += BOY[i][j] * ys[j]",
        "        acc += BOU[i][0] * u",
    ]
    if eq.reference_input is not None:
        out.append("        acc += BOR[i][0] * r")
    if anti_windup:
        out.append("        acc += BAW[i][0] * (u_demanded - u)")
    out += [
        "        nxt.append(acc)",
        "    state[:] = nxt",
        "    return u",
        "",
    ]
    return {f"{pre}.py": "\n".join(out).encode("ascii")}
