"""The optimal pole rules: poles from the algebraic Riccati equation, made exact, and their checks.

``[controller] method = "optimal"`` chooses the controller poles as the eigenvalues of
``A − BK_opt``, where ``K_opt = R⁻¹BᵀP`` is the linear-quadratic regulator of the design's
weights at the nominal parameter values; ``[observer] method = "optimal"`` chooses the
observer poles as those of ``A − L_opt C`` for the steady-state Kalman–Bucy gain of the
design's noise intensities (:mod:`symbolic.derivation.riccati`).  The poles are rounded to
:data:`OPTIMAL_POLE_DIGITS` significant digits, or more where the gain is sensitive to them
(:func:`rounding_for`), written as exact rationals, and then go through the same closed-form
derivation (Ackermann's formula) as any other pole choice, so the gains are exact functions
of the parameters that place those poles.

With one input the gain that places a set of poles is unique, so at the nominal values the
closed-form K *is* the optimal gain, up to the rounding of the poles: :func:`optimal_checks`
checks that, and the residual of the Riccati equation.  Away from the nominal values the
closed-form gain keeps the poles and is no longer the optimal gain of the plant there.

References
----------
.. [1] B. D. O. Anderson and J. B. Moore, *Optimal Control: Linear Quadratic Methods*,
   Prentice Hall, 1990, Ch. 2 and 3 -- from memory.
.. [2] R. E. Kalman and R. S. Bucy, "New results in linear filtering and prediction theory",
   Journal of Basic Engineering 83(1):95-108, 1961.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import sympy as sp

from ..model.results import Check, OptimalPoles, PoleChoice
from ..model.tolerances import GAIN_TOLERANCE
from ..runtime import sidecar as _sidecar
from ..runtime.errors import DesignFileError
from . import closed_form as cf
from .numeric import evaluate_matrix, numeric_ackermann, relative_difference
from .riccati import riccati_gain

if TYPE_CHECKING:
    from ..model.design import Design
    from ..model.results import GainResult, NumericPlant

__all__ = [
    "MAX_POLE_DIGITS",
    "OPTIMAL_POLE_DIGITS",
    "RICCATI_TOLERANCE",
    "ROUNDING_TOLERANCE",
    "entrywise_difference",
    "optimal_checks",
    "optimal_controller_choice",
    "optimal_observer_choice",
    "rounded_poles",
    "rounding_for",
]

#: The optimal poles are rounded to at least this many significant digits (real and imaginary
#: parts separately) before the closed forms are derived: few enough that the formulas stay
#: readable (common practice, no source).
OPTIMAL_POLE_DIGITS = 6
#: ... and to as many more (up to :data:`MAX_POLE_DIGITS`) as it takes to keep every entry of
#: the gain that places the rounded poles within this relative distance of the gain for the
#: unrounded ones: a pole next to a nearly uncontrollable mode moves the gain a lot.
ROUNDING_TOLERANCE = 1e-7
#: The most significant digits a rounded pole keeps (about what a double holds).
MAX_POLE_DIGITS = 16
#: Entries of a gain below this fraction of its largest entry are compared with that fraction
#: of the largest entry rather than with themselves.
SMALL_ENTRY = 1e-6
#: Largest relative residual of the Riccati equation accepted (common practice, no source).
RICCATI_TOLERANCE = 1e-9


def _rounded(x: float, digits: int) -> sp.Rational:
    """``x`` rounded to ``digits`` significant digits, exactly (a decimal as a rational)."""
    return sp.Rational(f"{x:.{digits - 1}e}") if x != 0 else sp.Integer(0)


def rounded_poles(poles: np.ndarray, digits: int = OPTIMAL_POLE_DIGITS) -> tuple[sp.Expr, ...]:
    """Poles rounded to ``digits`` significant digits as exact numbers, conjugates paired.

    Real poles first (in decreasing order), then each pair ``a + bj, a − bj`` with b > 0.

    Examples
    --------
    >>> rounded_poles(np.array([-(1 + 1j) / 2**0.5, -(1 - 1j) / 2**0.5]))
    (-707107/1000000 + 707107*I/1000000, -707107/1000000 - 707107*I/1000000)
    """
    z = np.asarray(poles, dtype=complex)
    real = sorted((float(p.real) for p in z if p.imag == 0), reverse=True)
    upper = sorted((p for p in z if p.imag > 0), key=lambda p: (-p.real, p.imag))
    out: list[sp.Expr] = [_rounded(x, digits) for x in real]
    for p in upper:
        re, im = _rounded(float(p.real), digits), _rounded(float(p.imag), digits)
        out.extend([re + sp.I * im, re - sp.I * im])
    return tuple(out)


def entrywise_difference(a: np.ndarray, b: np.ndarray) -> float:
    """max_i |a_i − b_i| / max(|b_i|, SMALL_ENTRY · max|b|): every entry relative to itself."""
    a, b = np.ravel(a), np.ravel(b)
    scale = float(np.max(np.abs(b))) if b.size else 0.0
    if scale == 0.0:
        return float(np.max(np.abs(a))) if a.size else 0.0
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), SMALL_ENTRY * scale)))


def rounding_for(A: np.ndarray, B: np.ndarray, poles: np.ndarray) -> tuple[tuple, int, float]:
    """The rounded poles, their digits and what the rounding does to the gain of (A, B).

    The fewest digits from :data:`OPTIMAL_POLE_DIGITS` up to :data:`MAX_POLE_DIGITS` for
    which the gain that places the rounded poles (Ackermann's formula in floating point) is
    within :data:`ROUNDING_TOLERANCE` of the gain for the unrounded ones, entry by entry
    (:func:`entrywise_difference`); the last value is that difference.
    """
    exact = numeric_ackermann(A, B, poles)
    for digits in range(OPTIMAL_POLE_DIGITS, MAX_POLE_DIGITS + 1):
        rounded = rounded_poles(poles, digits)
        effect = entrywise_difference(numeric_ackermann(A, B, [complex(p) for p in rounded]), exact)
        if effect <= ROUNDING_TOLERANCE:
            break
    return rounded, digits, effect


def _nominal(design: Design, name: str) -> np.ndarray:
    """A plant matrix at the nominal values; finite, or a one-line error naming it."""
    M = getattr(design.plant, name)
    value = evaluate_matrix(M, design.values)
    bad = np.argwhere(~np.isfinite(value))
    if bad.size:
        i, j = bad[0]
        raise DesignFileError(
            f"'{M[i, j]}' is not a finite real number at the nominal parameter values",
            design.path,
            f"plant.{name}[{i}][{j}]",
        )
    return value


def _solve(design: Design, kind: str, A, B, Q, R, key: str) -> tuple[OptimalPoles, tuple]:
    """The Riccati solution of the pair (A, B) and the rounded poles, or a one-line error."""
    solution = _sidecar.call(riccati_gain, A, B, Q, R)
    if solution.gain is None:
        pair = "(A, B)" if kind == "controller" else "(Aᵀ, Cᵀ)"
        raise DesignFileError(
            f"the algebraic Riccati equation has no stabilising solution at the nominal values:"
            f" {solution.reason}; {pair} must be stabilisable and every mode on or right of"
            " the imaginary axis must show in these weights",
            design.path,
            key,
        )
    poles, digits, effect = rounding_for(A, B, solution.poles)
    optimal = OptimalPoles(
        kind=kind,
        weight=np.asarray(Q, dtype=float),
        input_weight=np.asarray(R, dtype=float),
        riccati=solution.riccati,
        gain=solution.gain if kind == "controller" else solution.gain.T,
        poles=solution.poles,
        residual=solution.residual,
        digits=digits,
        rounding=effect,
    )
    return optimal, poles


def _digits_text(optimal: OptimalPoles) -> str:
    return (
        f"rounded to {optimal.digits} significant digits (the fewest from"
        f" {OPTIMAL_POLE_DIGITS} that keep every entry of the gain within"
        f" {ROUNDING_TOLERANCE:g} of the optimal gain's)"
    )


def _digital_note(design: Design) -> str:
    if design.discrete is None:
        return ""
    return (
        "; the digital controller places z = e^{sT} of these continuous poles (the continuous"
        " rule, not the discrete Riccati equation)"
    )


def optimal_controller_choice(design: Design) -> PoleChoice:
    """The controller poles of the linear-quadratic regulator of ``controller.state_weights``
    and ``controller.input_weights`` at the nominal values, rounded and exact."""
    req = design.controller
    A, B = _nominal(design, "A"), _nominal(design, "B")
    Q, R = np.array(req.state_weights, dtype=float), np.array(req.input_weights, dtype=float)
    optimal, poles = _solve(design, "controller", A, B, Q, R, "controller.state_weights")
    rule = (
        "optimal state feedback: the poles of A − BK for the gain K = R⁻¹BᵀP that minimises"
        " the integral of xᵀQx + uᵀRu over time, with Q = controller.state_weights and"
        " R = controller.input_weights, P from the algebraic Riccati equation"
        " AᵀP + PA − PBR⁻¹BᵀP + Q = 0 solved at the nominal parameter values"
        " (scipy.linalg.solve_continuous_are; Anderson and Moore 1990), " + _digits_text(optimal)
    )
    rule += _digital_note(design)
    return PoleChoice(poles, "optimal", rule, cf.desired_coefficients(poles), optimal=optimal)


def optimal_observer_choice(design: Design) -> PoleChoice:
    """The observer poles of the steady-state Kalman–Bucy filter of ``observer.process_noise``
    and ``observer.measurement_noise`` at the nominal values, rounded and exact."""
    req = design.observer
    A, C = _nominal(design, "A"), _nominal(design, "C")
    W = np.array(req.process_noise, dtype=float)
    V = np.array(req.measurement_noise, dtype=float)
    optimal, poles = _solve(design, "observer", A.T, C.T, W, V, "observer.process_noise")
    rule = (
        "optimal (Kalman–Bucy) observer: the poles of A − LC for the steady-state gain"
        " L = PCᵀV⁻¹ of white process noise of intensity W = observer.process_noise on dx/dt and"
        " measurement noise of intensity V = observer.measurement_noise, P from the algebraic"
        " Riccati equation AP + PAᵀ − PCᵀV⁻¹CP + W = 0 solved at the nominal parameter values"
        " (scipy.linalg.solve_continuous_are on the dual pair; Kalman and Bucy 1961), "
        + _digits_text(optimal)
    )
    rule += _digital_note(design)
    return PoleChoice(poles, "optimal", rule, cf.desired_coefficients(poles), optimal=optimal)


def _residual_check(what: str, optimal: OptimalPoles) -> Check:
    return Check(
        f"{what}: residual of the algebraic Riccati equation (relative, scipy.linalg)",
        float(optimal.residual),
        RICCATI_TOLERANCE,
        bool(optimal.residual <= RICCATI_TOLERANCE),
    )


def _controllability_condition(A: np.ndarray, B: np.ndarray) -> float:
    cols = [B[:, 0]]
    for _ in range(A.shape[0] - 1):
        cols.append(A @ cols[-1])
    return float(np.linalg.cond(np.column_stack(cols)))


def _gain_checks(label: str, A, B, shipped: np.ndarray, optimal: OptimalPoles):
    """The gain placing the unrounded optimal poles, and the shipped gain, against the optimal
    gain (``A, B`` the pair, ``shipped`` and ``optimal.gain`` in its orientation)."""
    reference = optimal.gain if optimal.kind == "controller" else optimal.gain.T
    exact = numeric_ackermann(A, B, optimal.poles)
    diff = relative_difference(exact, reference)
    # Ackermann's formula in floating point loses about cond(𝒞) units of round-off
    floor = float(
        max(GAIN_TOLERANCE, 10.0 * np.finfo(float).eps * _controllability_condition(A, B))
    )
    # every entry: the rounding of the poles and the floating point of the evaluation allow
    tolerance = float(10.0 * max(optimal.rounding, floor))
    shipped_diff = entrywise_difference(shipped, reference)
    return [
        Check(
            f"{label}: Ackermann's formula at the unrounded Riccati poles vs the optimal gain"
            " (relative; a single-input pair, so the gain that places them is unique)",
            float(diff),
            floor,
            bool(diff <= floor),
        ),
        Check(
            f"{label}: the derived gain at the evaluated values vs the optimal gain (relative,"
            f" entry by entry; ten times what rounding the poles to {optimal.digits} digits"
            " does)",
            float(shipped_diff),
            tolerance,
            bool(shipped_diff <= tolerance),
        ),
    ]


def optimal_checks(
    num: NumericPlant, K: GainResult, L: GainResult, ctrl: PoleChoice, obs: PoleChoice
) -> list[Check]:
    """The checks of the optimal pole choices of a derivation (none for the other rules):
    the Riccati residual, and the gains against the optimal gains."""
    checks: list[Check] = []
    if ctrl.optimal is not None:
        checks.append(_residual_check("controller", ctrl.optimal))
        checks += _gain_checks("K", num.A, num.B, K.value, ctrl.optimal)
    if obs.optimal is not None:
        checks.append(_residual_check("observer", obs.optimal))
        checks += _gain_checks("Lᵀ (dual pair)", num.A.T, num.C.T, L.value.T, obs.optimal)
    return checks
