"""Memo context of the gains: their derivation, the compensator, the checks, what ships.

Each function turns finished result objects into the plain dicts the memo templates read;
formulas and numbers our own code typeset are :class:`~symbolic.render.mathvalues.OwnMath`.
"""

from __future__ import annotations

import numpy as np
import sympy as sp

from ..model.results import Derivation
from .mathtex import (
    LONG,
    equation_lines,
    expr_latex,
    lines_fit,
    matrix_latex,
    polynomial_latex,
    printed_width,
)
from .mathvalues import OwnMath, latex_matrix, latex_number, own_math
from .memo_math import FORMULA_LIMIT, MATRIX_LIMIT, factored, gain_block, poles_math

__all__ = ["gains_context", "shipped_context", "verification_context"]


def gains_context(d: Derivation) -> dict:
    """The derivation of K, L and the reference gain, and the compensator."""
    K, L = d.K, d.L
    return {
        "K": gain_block("K", K.closed_form, K.value),
        "L": gain_block("L", L.closed_form, L.value),
        "K_method": K.method,
        "L_method": L.method,
        "ackermann": _ackermann(d),
        "closed_form": d.closed_form,
        "reference": _reference(d),
        "compensator": _compensator(d),
    }


def _ackermann(d: Derivation) -> dict | None:
    ack = d.K.steps
    if ack is None:
        return None
    w = matrix_latex(ack.last_row_of_inverse, MATRIX_LIMIT)
    phi = matrix_latex(ack.polynomial_of_A, MATRIX_LIMIT)
    return {
        "row": own_math(w) if w is not None else None,
        "phi": own_math(phi) if phi is not None else None,
    }


def _reference(d: Derivation) -> dict | None:
    ref = d.reference
    if ref is None:
        return None
    zero_poly = None
    if ref.zero_polynomial is not None:
        zero_poly = own_math(
            "z(s) = "
            + expr_latex(
                factored(
                    sum(
                        c * sp.Symbol("s") ** (len(ref.zero_polynomial) - 1 - i)
                        for i, c in enumerate(ref.zero_polynomial)
                    )
                )
            )
        )
    closed = None
    if ref.closed_form is not None and len(sp.latex(ref.closed_form)) <= FORMULA_LIMIT:
        closed = expr_latex(ref.closed_form)
    wide = closed is not None and printed_width(closed) > LONG
    return {
        "output": ref.tracked.name,
        "closed": own_math("N = " + closed) if closed is not None and not wide else None,
        # a closed form too wide for a line: broken over lines in the appendix
        "appendix_lines": [own_math(x) for x in equation_lines("N", ref.closed_form)]
        if wide
        else [],
        "zero_polynomial": zero_poly,
        "value": own_math("N = " + latex_matrix(ref.value, 6)),
        "method": ref.method,
    }


def _compensator(d: Derivation) -> dict | None:
    c = d.compensator
    if c is None or c.numerator is None:
        return None
    comp = {
        "numeric": own_math(
            "\\frac{U(s)}{Y(s)} = -\\frac{"
            + polynomial_latex(c.numerator, digits=6)
            + "}{"
            + polynomial_latex(c.denominator, digits=6)
            + "}"
        ),
        "closed_lines": None,
        "appendix_lines": None,
    }
    if c.numerator_closed_form is not None:
        lines = _compensator_lines(c.numerator_closed_form, c.denominator_closed_form)
        coefficients = len(c.numerator_closed_form) + len(c.denominator_closed_form) - 1
        # the coefficients stay in the body only when each fits on one line
        key = "closed_lines" if len(lines) == coefficients else "appendix_lines"
        comp[key] = lines
        comp["closed_shape"] = _compensator_shape(
            len(c.numerator_closed_form) - 1, d.design.plant.order
        )
    return comp


def _coefficient_lines(label: str, co) -> list[OwnMath]:
    """One coefficient in closed form, or a line saying it is too wide to print."""
    lines = equation_lines(label, factored(co))
    if not lines_fit(lines):
        return [own_math(f"{label} &: \\text{{a term is wider than a line; its value is above}}")]
    return [own_math(x) for x in lines]


def _compensator_lines(numerator, denominator) -> list[OwnMath]:
    """Each coefficient b_k of the numerator and a_k of the monic denominator, in closed form."""
    lines = []
    for i, co in enumerate(numerator):
        lines += _coefficient_lines(f"b_{{{len(numerator) - 1 - i}}}", co)
    for i, co in enumerate(denominator[1:]):
        lines += _coefficient_lines(f"a_{{{len(denominator) - 2 - i}}}", co)
    return lines


def _power_term(letter: str, k: int) -> str:
    return (
        f"{letter}_{{{k}}} s^{{{k}}}"
        if k > 1
        else (f"{letter}_{{{k}}} s" if k == 1 else f"{letter}_{{{k}}}")
    )


def _compensator_shape(degree: int, n: int) -> OwnMath:
    """U(s)/Y(s) = -(b_m s^m + ... + b_0) / (s^n + a_{n-1} s^{n-1} + ... + a_0)."""
    return own_math(
        "\\frac{U(s)}{Y(s)} = -\\frac{"
        + " + ".join(_power_term("b", k) for k in range(degree, -1, -1))
        + "}{s^{"
        + str(n)
        + "} + "
        + " + ".join(_power_term("a", k) for k in range(n - 1, -1, -1))
        + "}"
    )


def _factored_lines(poly: sp.Expr) -> str:
    """``= `` the factored polynomial on one line, or ``≈`` its monic factors, one a line,
    when that is too wide."""
    one_line = sp.latex(sp.factor(poly))
    if printed_width(one_line) <= LONG - 14:
        return "= " + one_line
    # too wide: the factors made monic (the polynomial is monic, so no constant is left)
    # and their coefficients to 8 significant figures, which a reader can compare with the
    # poles; the exact polynomial is the one the verification checks compare.
    _constant, factors = sp.factor_list(poly)
    s = poly.free_symbols.pop() if poly.free_symbols else sp.Symbol("s")
    pieces = []
    for f, m in factors:
        monic = sp.Poly(f, s).monic()
        coeffs = [float(c) for c in monic.all_coeffs()]
        body = polynomial_latex(coeffs, s.name, digits=8)
        pieces.append(f"\\left({body}\\right)" + (f"^{{{m}}}" if m > 1 else ""))
    if printed_width("".join(pieces)) <= LONG - 14:
        return "\\approx " + "".join(pieces)
    return "\\approx \\begin{aligned}[t] &" + " \\\\ &\\cdot ".join(pieces) + " \\end{aligned}"


def verification_context(d: Derivation) -> dict:
    """The loop of controller and observer together, and every check of the derivation."""
    n = d.design.plant.order
    sep = d.separated
    sep_poly = None
    if sep.charpoly is not None:
        s = sp.Symbol("s")
        poly = sp.Add(*[c * s ** (2 * n - i) for i, c in enumerate(sep.charpoly)])
        sep_poly = own_math("\\det(sI - M) " + _factored_lines(poly))
    return {
        # the loop matrix of order 2n: in the body up to 6x6, in the appendix up to 8x8
        "separated_matrix": own_math(latex_matrix(sep.value, 4)) if 2 * n <= 6 else None,
        "separated_matrix_appendix": own_math(latex_matrix(sep.value, 4))
        if 6 < 2 * n <= 8
        else None,
        "separated_order": 2 * n,
        "separated_polynomial": sep_poly,
        "separated_ok": sep.factors_as_expected,
        "closed_loop_poles": poles_math(
            np.array(sorted(sep.poles, key=lambda z: (z.real, z.imag)))
        ),
        "checks": [_check_row(chk) for chk in d.checks],
        "passed": d.passed,
    }


def _check_row(chk) -> dict:
    return {
        "name": chk.name,
        # residuals under 1e-12 are round-off: shown as a bound so the memo is reproducible
        "value": None
        if chk.value is None
        else own_math("< 10^{-12}" if chk.value < 1e-12 else latex_number(chk.value, 2)),
        "tolerance": None if chk.tolerance is None else own_math(latex_number(chk.tolerance, 1)),
        "status": {True: "pass", False: "FAIL", None: "not run"}[chk.passed],
        "note": chk.note,
    }


def shipped_context(d: Derivation, controller) -> dict:
    """The controller the memo ships (:class:`symbolic.verification.shipped.ShippedController`)."""
    return {
        "shipped_gains": _shipped_gains(d, controller),
        "shipped_controller_poles": poles_math(controller.controller_poles),
        "shipped_observer_poles": poles_math(controller.observer_poles)
        if controller.observer_poles.size
        else own_math("\\text{none}"),
    }


def _shipped_gains(d: Derivation, ctrl) -> list[OwnMath]:
    """The gains of the controller the memo ships, numerically (one line each)."""
    dc = d.discrete if ctrl is not None and ctrl.digital else None
    if dc is None:
        return [own_math(x) for x in _continuous_gain_lines(d)]
    lines = []
    form = ctrl.form
    if dc.integral is not None:
        lines.append(r"[K_d\;\, k_{i,d}] = " + latex_matrix(dc.integral.K_augmented, 6))
    else:
        lines.append("K_d = " + latex_matrix(dc.K, 6))
    if form == "reduced" and dc.reduced is not None:
        lines.append("L_r = " + latex_matrix(dc.reduced.L, 6))
    elif form == "current":
        lines.append("L_c = " + latex_matrix(dc.L_current, 6))
    else:
        lines.append("L_p = " + latex_matrix(dc.L_predictor, 6))
    if dc.integral is None and dc.reference_gain is not None:
        lines.append("N_d = " + latex_matrix(dc.reference_gain, 6))
    return [own_math(x) for x in lines]


def _continuous_gain_lines(d: Derivation) -> list[str]:
    lines = []
    integral = d.integral is not None
    reduced = d.design.observer.kind == "reduced" and d.reduced_observer is not None
    if integral:
        lines.append(r"[K\;\, k_i] = " + latex_matrix(d.integral.K_augmented, 6))
    else:
        lines.append("K = " + latex_matrix(d.K.value, 6))
    if reduced:
        lines.append("K_e = " + latex_matrix(d.reduced_observer.Ke, 6))
    else:
        lines.append("L = " + latex_matrix(d.L.value, 6))
    if not integral and d.reference is not None:
        lines.append("N = " + latex_matrix(d.reference.value, 6))
    return lines
