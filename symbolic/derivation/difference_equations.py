"""The digital controller as difference equations, ready to implement, and its sampled loop.

Every observer form (Franklin, Powell and Workman [1] Sec. 8.2) is written as an estimate map
and an observer update, ``x̂ = E_ξ ξ_o + E_y y + E_u u`` and
``ξ_o[k+1] = O_ξ ξ_o + O_y y + O_u u``:

* predictor: ``x̂[k+1] = Φ x̂[k] + Γ u[k] + L_p (y[k] - C x̂[k] - D u[k])``,
  ``u[k] = -K x̂[k] + N r[k]`` (one sample of computation time is available);
* current estimator: ``x̂[k] = x̄[k] + L_c (y[k] - C x̄[k] - D u[k])``,
  ``x̄[k+1] = Φ x̂[k] + Γ u[k]``, ``u[k] = -K x̂[k] + N r[k]`` (uses the newest sample;
  the computation must be short compared with T);
* reduced-order observer: ``x̂[k] = T⁻¹ [ȳ[k]; η[k] + L_r ȳ[k]]`` with ``ȳ = y − D u``.

With A, B in place of Φ, Γ the same layout describes the continuous design.

References
----------
.. [1] G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of Dynamic Systems*,
   3rd ed., Addison-Wesley, 1998, Sec. 8.2 (prediction and current estimators) -- section
   numbers from memory.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .checks import eigenvalue_check

if TYPE_CHECKING:
    from .extensions_in_z import DiscreteIntegral, DiscreteReduced

__all__ = [
    "DIGITAL_FORMS",
    "OBSERVER_FORMS",
    "DifferenceEquations",
    "controller_equations",
    "implementation_forms",
    "loop_matrices",
]

#: The two full-order observer forms of the digital controller.
OBSERVER_FORMS = ("current", "predictor")

#: Every implementation form: the full-order ones and Luenberger's reduced-order observer
#: (present only when the design asks for ``[observer] kind = "reduced"``).
DIGITAL_FORMS = ("current", "predictor", "reduced")


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
    m = Gamma.shape[1]
    (E_xi, E_y, E_u), (O_xi, O_y, O_u), names, text = _observer_form(
        form, Phi, Gamma, C, D, Lp, Lc, reduced
    )
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
    return _with_integrator(
        form, (E_xi, E_y, E_u), (O_xi, O_y, O_u), names, text, Mi, integral, C, T, tracked
    )


def _observer_form(form: str, Phi, Gamma, C, D, Lp, Lc, reduced):
    """``((E_ξ, E_y, E_u), (O_ξ, O_y, O_u), state names, description)`` of one form."""
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
    return (E_xi, E_y, E_u), (O_xi, O_y, O_u), names, text


def _with_integrator(form, estimate, update, names, text, Mi, integral, C, T, tracked):
    """The equations of one form with the integrator appended to the state."""
    E_xi, E_y, E_u = estimate
    O_xi, O_y, O_u = update
    m, p = Mi.shape[0], C.shape[0]
    Kx = integral.K
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
    Φ, Γ and continuous controller equations
    (:func:`symbolic.verification.sampled_data.continuous_equations`); the anti-windup term is
    inactive in the linear loop.
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


def implementation_forms(
    Phi, Gamma, C, D, K, Lp, Lc, Nv, T, idx, zc, zo, integral, reduced, checks
):
    """Every implementation form as difference equations, each checked in the sampled loop."""
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
    return equations
