"""The gains in z: Ackermann's formula on the ZOH model, in closed form and in floating point.

The controller gain K places ``e^{sT}`` of the continuous controller poles on ``(Φ, Γ)`` and
the predictor observer gain ``L_p`` those of the observer poles on the dual pair
``(Φᵀ, Cᵀ)`` (Ackermann [4]).  In closed form, Φ, Γ (:mod:`symbolic.derivation.zoh`) and then
K and ``L_p`` are successive steps of one bounded child (:func:`start_closed_forms`), since
the exponential of a symbolic matrix can run for minutes.

References
----------
.. [4] J. Ackermann, "Der Entwurf linearer Regelungssysteme im Zustandsraum",
   *Regelungstechnik* 20(7):297-300, 1972.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
import sympy as sp

from ..runtime.budget import BoundedChild
from ..runtime.errors import StructureError
from . import closed_form as cf
from . import zoh
from .numeric import numeric_ackermann, scipy_placement

__all__ = [
    "CLOSED_FORM_SECONDS",
    "GAIN_CLOSED_FORM_LIMIT",
    "ClosedFormsInZ",
    "ackermann_in_z",
    "collect_closed_forms",
    "discrete_feedback_gain",
    "exact_sample_time",
    "start_closed_forms",
]

#: Wall-clock seconds for the symbolic matrix exponential and the gains in z; the exponential
#: of a symbolic matrix needs its eigenvalues and can run for minutes, so it is always bounded.
CLOSED_FORM_SECONDS = 5.0

#: The gains in z are derived in closed form only when Φ and Γ together have at most this many
#: operations (a damped oscillator's Φ has about 250, and its K in z runs for minutes to
#: 20 000 operations).
GAIN_CLOSED_FORM_LIMIT = 120


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
class ClosedFormsInZ:
    """Φ, Γ and how they were found, and K and L_p in z in closed form (None: not derived)."""

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
    Phi, Gamma, method = zoh.zero_order_hold_and_method(A, B, T_exact)
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
        zoh.discrete_coefficients(controller_poles, T_exact),
        zoh.discrete_coefficients(observer_poles, T_exact),
    )


_ZOH_STEP = "the closed-form ZOH model (symbolic matrix exponential)"
_GAIN_STEP = "the closed-form gains in z"


def exact_sample_time(sample_time) -> sp.Rational:
    """The sample time as an exact rational (a float from its shortest repr)."""
    return (
        sp.Rational(sample_time)
        if not isinstance(sample_time, float)
        else sp.Rational(repr(sample_time))
    )


def start_closed_forms(
    design, controller_poles, observer_poles, *, sample_time=None, budget: float | None = None
) -> BoundedChild | None:
    """Start Φ, Γ and the gains in z in closed form, in a bounded child (None when there is
    no valid sample time: :func:`~symbolic.derivation.digital.digital_controller` then
    reports it).

    :func:`symbolic.derive` starts it beside its own symbolic stage and hands it to
    :func:`~symbolic.derivation.digital.digital_controller` (``pending``), so that the two run
    at the same time.
    """
    if sample_time is None:
        if design.discrete is None:
            return None
        sample_time = design.discrete.sample_time
    try:
        T_exact = exact_sample_time(sample_time)
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


def collect_closed_forms(pending: BoundedChild, notes: list[str]) -> ClosedFormsInZ | None:
    """The steps of :func:`_closed_form_steps` as a :class:`ClosedFormsInZ`, with a note for what is
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
        return ClosedFormsInZ(Phi, Gamma, None, None, method)
    if isinstance(results[1], str):
        notes.append(
            f"discrete: K and L_p are not given in closed form ({results[1]}); numbers only"
        )
        return ClosedFormsInZ(Phi, Gamma, None, None, method)
    K, L = results[1]
    return ClosedFormsInZ(Phi, Gamma, K, L, method)


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
