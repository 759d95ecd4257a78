"""Integral action and the reduced-order observer of the digital controller, in z.

Both are the continuous constructions (:mod:`symbolic.derivation.integral`,
:mod:`symbolic.derivation.reduced`) on the ZOH model: the integrator becomes the running sum
of the tracking error and the reduced-order observer is built on the partition of ``T Φ T⁻¹``
and ``T Γ``; their poles are ``e^{sT}`` of the continuous ones.

References
----------
.. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998, Sec. 8.2 (reduced-order estimators) -- section numbers
   from memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..model.numbers import format_pole
from ..model.results import Check, Derivation
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime.errors import StructureError
from .checks import eigenvalue_check
from .gains_in_z import discrete_feedback_gain
from .numeric import relative_difference, scipy_placement
from .pole_rules import integral_pole_for, reduced_poles_for
from .reduced_coordinates import coordinate_change, observer_matrices

__all__ = ["DiscreteIntegral", "DiscreteReduced", "integral_in_z", "reduced_in_z"]


@dataclass(frozen=True)
class DiscreteIntegral:
    """Integral action in the digital controller.

    The integrator is the running sum ``x_I[k+1] = x_I[k] + T (y_t[k] − r[k])`` (the
    tracked output as measured), so ``k_i`` is comparable with the continuous design's.  The
    sampled plant augmented with it, ``Φ_a = [[Φ, 0], [T C_t, 1]]``, ``Γ_a = [[Γ], [T D_t]]``,
    gets the gain ``[K, k_i]`` that places ``e^{sT}`` of the n controller poles and of the
    integral pole; ``u[k] = −K x̂[k] − k_i x_I[k]``.  With an input limit the integrator is
    corrected by back-calculation, ``x_I[k+1] += T (u_d[k] − u[k]) / (k_i T_t)``, the
    sampled form of the continuous scheme of :mod:`symbolic.derivation.integral_study` (same
    ``T_t``).
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


def integral_in_z(d: Derivation, Phi, Gamma, C, D, T, idx, zc, checks) -> DiscreteIntegral:
    """``[K, k_i]`` placing e^{sT} of the controller poles and the integral pole."""
    design = d.design
    n, m = Gamma.shape
    expr, rule = integral_pole_for(design, d.controller_poles.poles)
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


def reduced_in_z(d: Derivation, Phi, Gamma, C, T, checks, notes) -> DiscreteReduced | None:
    """The minimum-order observer of the sampled plant (poles e^{sT} of the reduced ones)."""
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
    chosen, rule = reduced_poles_for(design, d.observer_poles.poles)
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
    Lr = _reduced_gain_in_z(design, Pbb, Pab, zr, T, checks)
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


def _reduced_gain_in_z(design, Pbb, Pab, zr, T: float, checks: list[Check]) -> np.ndarray:
    """``L_r`` with eig(Φ_bb − L_r Φ_ab) at ``zr``, and its checks."""
    p = Pab.shape[0]
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
    return Lr
