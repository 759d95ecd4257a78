"""The numeric gains of a derivation and their checks: K, L, the reference gain, the loop.

Each gain is the closed form evaluated at the design's parameter values when there is one
(Ackermann's formula in floating point, or ``scipy.signal.place_poles`` for several inputs,
otherwise), cross-checked against ``scipy.signal.place_poles``; the eigenvalues and the
characteristic polynomial of the loops they make are checked against the requested poles.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import sympy as sp

from ..model.results import (
    Check,
    CompensatorResult,
    GainResult,
    PoleChoice,
    ReferenceGainResult,
    SeparatedLoop,
)
from ..model.tolerances import COMPENSATOR_TOLERANCE, GAIN_TOLERANCE, POLYNOMIAL_TOLERANCE
from ..runtime.errors import StructureError
from . import closed_form as cf
from .checks import (
    check_frequencies,
    eigenvalue_check,
    frequency_response_difference,
    gain_tolerance,
)
from .numeric import (
    eigenvector_condition,
    evaluate_matrix,
    numeric_ackermann,
    polynomial_residual,
    relative_difference,
    scipy_placement,
)
from .systems import transfer_function

if TYPE_CHECKING:
    from ..model.design import Design
    from ..model.results import NumericPlant

__all__ = [
    "compensator",
    "feedback_gains",
    "pole_checks",
    "reference_gain",
    "separated_loop",
]


def feedback_gains(
    design: Design,
    forms: cf.ClosedForms | None,
    num: NumericPlant,
    ctrl: PoleChoice,
    obs: PoleChoice,
    notes: list[str],
    checks: list[Check],
) -> tuple[GainResult, GainResult]:
    """K and L (L as Lᵀ on the dual pair (Aᵀ, Cᵀ)), with the exact identity checks of their
    closed forms."""
    A, B, C = num.A, num.B, num.C
    values = design.values
    try:
        K = _gain("K", forms.controller if forms else None, A, B, ctrl, values, notes, checks)
        Lt = _gain("L", forms.observer if forms else None, A.T, C.T, obs, values, notes, checks)
    except StructureError as exc:
        if exc.path is not None:
            raise
        raise StructureError(exc.problem, design.path, exc.key) from exc
    L = GainResult(
        name="L",
        value=Lt.value.T.copy(),
        closed_form=Lt.closed_form.T if Lt.closed_form is not None else None,
        method=Lt.method + " on the dual pair (Aᵀ, Cᵀ)",
        unique=Lt.unique,
        steps=Lt.steps,
        charpoly=forms.observer_charpoly if forms else None,
    )
    K = GainResult(
        K.name,
        K.value,
        K.closed_form,
        K.method,
        K.unique,
        K.steps,
        forms.controller_charpoly if forms else None,
    )
    if forms is not None:
        for label, ok in (
            (
                "det(sI − (A − BK)) equals the desired controller polynomial identically (exact, symbolic)",
                forms.controller_identity_holds,
            ),
            (
                "det(sI − (A − LC)) equals the desired observer polynomial identically (exact, symbolic)",
                forms.observer_identity_holds,
            ),
        ):
            if ok is not None:
                checks.append(Check(label, None, None, bool(ok)))
    return K, L


def pole_checks(
    num: NumericPlant,
    K: GainResult,
    L: GainResult,
    ctrl: PoleChoice,
    obs: PoleChoice,
    notes: list[str],
    checks: list[Check],
) -> None:
    """The eigenvalues and characteristic polynomials of A − BK and A − LC against the
    requested poles."""
    A, B, C = num.A, num.B, num.C
    Acl = A - B @ K.value
    Aobs = A - L.value @ C
    for label, M, choice, (F, G) in (
        ("A − BK", Acl, ctrl, (B, K.value)),
        ("A − LC", Aobs, obs, (L.value, C)),
    ):
        check = eigenvalue_check(
            f"eigenvalues of {label} vs requested poles (relative)",
            M,
            choice.values,
            terms=(A, (F, G)),
            weights=np.abs(A) + np.abs(F) @ np.abs(G),
        )
        checks.append(check)
        if not check.passed:
            notes.append(
                f"the eigenvalues of {label} miss the requested poles by {check.value:.1e}"
                " (relative) even when computed in 50-digit arithmetic from the same matrix,"
                " beyond what rounding its entries to double precision explains; its"
                f" eigenvector matrix has condition number {eigenvector_condition(M):.1e}:"
                " the design is numerically fragile: consider slower or less"
                " clustered poles, or a better-scaled model"
            )
        coeffs = [complex(c).real for c in choice.coefficients]
        pres = polynomial_residual(M, coeffs)
        checks.append(
            Check(
                f"characteristic polynomial of {label} vs desired (relative, coefficients)",
                pres,
                POLYNOMIAL_TOLERANCE,
                pres <= POLYNOMIAL_TOLERANCE,
            )
        )


def separated_loop(
    num: NumericPlant,
    K: GainResult,
    L: GainResult,
    ctrl: PoleChoice,
    obs: PoleChoice,
    sep_forms: cf.SeparatedForms | None,
    checks: list[Check],
) -> SeparatedLoop:
    """The 2n loop in error coordinates, ``[[A − BK, BK], [0, A − LC]]``, and its checks."""
    A, B, C = num.A, num.B, num.C
    n = A.shape[0]
    Acl = A - B @ K.value
    Aobs = A - L.value @ C
    BK = B @ K.value
    sep_value = np.block([[Acl, BK], [np.zeros((n, n)), Aobs]])
    sep_poles = np.linalg.eigvals(sep_value)
    union = np.concatenate([ctrl.values, obs.values])
    checks.append(
        eigenvalue_check(
            "eigenvalues of the 2n separated loop vs controller ∪ observer poles",
            sep_value,
            union,
            terms=(A, (B, K.value), (B, K.value), (L.value, C)),
            achieved=sep_poles,
        )
    )
    if sep_forms is not None:
        checks.append(
            Check(
                "separated loop: det(sI − M) = α_c(s)·α_o(s) identically (exact, symbolic)",
                None,
                None,
                bool(sep_forms.factors_as_expected),
            )
        )
    separated = SeparatedLoop(
        value=sep_value,
        closed_form=sep_forms.matrix if sep_forms else None,
        charpoly=sep_forms.charpoly if sep_forms else None,
        factors_as_expected=sep_forms.factors_as_expected if sep_forms else None,
        poles=sep_poles,
    )
    return separated


def _gain(
    name: str,
    steps: cf.AckermannSteps | None,
    A: np.ndarray,
    B: np.ndarray,
    choice: PoleChoice,
    values: dict,
    notes: list[str],
    checks: list[Check],
) -> GainResult:
    """Numeric value of K (or Lᵀ on the dual pair) and its cross-check against SciPy."""
    poles = choice.values
    single = B.shape[1] == 1
    label = "K" if name == "K" else "Lᵀ (dual pair)"
    reference, how = scipy_placement(A, B, poles)
    if steps is not None:
        value = evaluate_matrix(steps.gain, values)
        method = "Ackermann's formula, closed form"
        closed = steps.gain
    elif single:
        value = numeric_ackermann(A, B, poles)
        method = "Ackermann's formula, floating point (closed form over budget)"
        closed = None
    else:
        if reference is None:
            raise StructureError(
                f"cannot place the {'controller' if name == 'K' else 'observer'} poles: {how}",
                key="controller.poles" if name == "K" else "observer.poles",
            )
        value = reference
        method = "scipy.signal.place_poles (numeric; several inputs, so not unique)"
        closed = None
    if single:
        if reference is not None:
            diff = relative_difference(value, reference)
            tolerance = gain_tolerance(reference, numeric_ackermann(A, B, poles))
            checks.append(
                Check(
                    f"{label}: {method.split(',')[0]} vs scipy.signal.place_poles (relative)",
                    diff,
                    tolerance,
                    diff <= tolerance,
                )
            )
        else:
            checks.append(Check(f"{label}: vs scipy.signal.place_poles", None, None, None, how))
            notes.append(f"{label}: {how}; the eigenvalue checks below are the reference")
            if closed is not None:
                alt = numeric_ackermann(A, B, poles)
                diff = relative_difference(value, alt)
                checks.append(
                    Check(
                        f"{label}: closed form vs floating-point Ackermann (relative)",
                        diff,
                        GAIN_TOLERANCE,
                        diff <= GAIN_TOLERANCE,
                    )
                )
    return GainResult(name, value, closed, method, single, steps)


def reference_gain(
    design: Design,
    forms: cf.ClosedForms | None,
    A,
    B,
    C,
    D,
    K,
    values,
    checks: list[Check],
    notes: list[str],
) -> ReferenceGainResult | None:
    """N with unit DC gain from r to the tracked output (zero steady-state step error)."""
    idx = design.tracking.output
    signal = design.plant.outputs[idx]
    Ct, Dt = C[idx : idx + 1, :], D[idx : idx + 1, :]
    Acl = A - B @ K
    # DC gain of the closed loop from u_ff to y: (Ct − Dt K)(−Acl)⁻¹B + Dt
    try:
        X = np.linalg.solve(-Acl, B)
        M = (Ct - Dt @ K) @ X + Dt
        # scale of the terms that make up the DC gain: a zero at s = 0 cancels them exactly,
        # fast poles merely make them small (a relative test, not an absolute one)
        scale = np.linalg.norm(Ct - Dt @ K) * np.linalg.norm(X) + np.linalg.norm(Dt)
    except np.linalg.LinAlgError:
        M = np.full((1, B.shape[1]), np.nan)
        scale = 1.0
    zero_at_origin = not np.all(np.isfinite(M)) or np.linalg.norm(M) <= 1e-10 * scale
    if forms is not None and forms.zero_polynomial is not None:
        z0 = forms.zero_polynomial[-1].xreplace(values)  # exact at the evaluated values
        if z0.is_Rational:
            zero_at_origin = z0 == 0
    if zero_at_origin:
        notes.append(
            f"no reference gain exists for output '{signal.name}': the plant has a zero at s = 0"
            " (its steady-state gain is zero); use integral action instead"
        )
        return None
    N_numeric = M.T / (M @ M.T).item()  # least-norm solution of M N = 1; exact for one input
    closed = forms.reference_gain if forms is not None else None
    zero_poly = forms.zero_polynomial if forms is not None else None
    if closed is not None:
        value = np.array([[float(sp.N(closed.xreplace(values), 30))]])
        diff = relative_difference(value, N_numeric)
        checks.append(
            Check(
                "reference gain: closed form vs numeric DC-gain inverse (relative)",
                diff,
                GAIN_TOLERANCE,
                diff <= GAIN_TOLERANCE,
            )
        )
        method = "N = α_c(0)/z(0), closed form"
    else:
        value = N_numeric
        method = "N = 1/(DC gain of the closed loop), numeric" + (
            " (least-norm: several inputs, not unique)" if B.shape[1] > 1 else ""
        )
    dc = (((Ct - Dt @ K) @ np.linalg.solve(-Acl, B) + Dt) @ value).item()
    checks.append(
        Check(
            f"steady-state gain from r to {signal.name} equals 1",
            abs(dc - 1.0),
            GAIN_TOLERANCE,
            abs(dc - 1.0) <= GAIN_TOLERANCE,
        )
    )
    return ReferenceGainResult(value, closed, zero_poly, signal, idx, method)


def compensator(A, B, C, D, K, L, sep_forms, values, checks) -> CompensatorResult | None:
    F = A - B @ K - L @ C + L @ D @ K
    if B.shape[1] != 1 or C.shape[0] != 1:
        return CompensatorResult(None, None, None, None, F)
    # independent numeric transfer function of u/y = −K (sI − F)⁻¹ L
    num, den = transfer_function(F, L, K, np.zeros((1, 1)))
    num_cf = den_cf = None
    if sep_forms is not None and sep_forms.compensator_numerator is not None:
        num_cf = sep_forms.compensator_numerator
        den_cf = sep_forms.compensator_denominator
        n_val = np.array([float(sp.N(c.xreplace(values), 30)) for c in num_cf])
        d_val = np.array([float(sp.N(c.xreplace(values), 30)) for c in den_cf])
        diff = frequency_response_difference(n_val, d_val, F, L, K)
        checks.append(
            Check(
                "compensator transfer function: closed form vs K(sI − F)⁻¹L at"
                f" {len(check_frequencies(F))} frequencies (relative)",
                diff,
                COMPENSATOR_TOLERANCE,
                diff <= COMPENSATOR_TOLERANCE,
            )
        )
    return CompensatorResult(num, den, num_cf, den_cf, F)
