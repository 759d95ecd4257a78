"""Certified stability over the parameter box: proved, a counterexample, or undecided.

Two loops are certified over the box of the declared parameter ranges (every parameter with a
range of positive width varies; the others keep their values):

* **gains fixed** at the nominal design: the shipped controller (its numbers, as exact
  rationals) on the true plant ``A(p), B(p), C(p), D(p)``.  For the full-order observer the
  loop in ``[x; x̂]`` is a change of coordinates of the coupled ``(x, e)`` loop of
  :mod:`symbolic.analysis.mismatch`, so it has the same characteristic polynomial.  Its
  coefficients are rational functions of the parameters (charpoly over the fraction field,
  :class:`~sympy.polys.matrices.DomainMatrix`); multiplied by their common denominator
  (sign normalised at the nominal point) they are polynomials, and the loop is stable at
  ``p`` exactly when the Liénard–Chipart conditions of that polynomial hold there
  (the leading coefficient, the common denominator, among them: where it vanishes the plant
  is not defined and no box around it can be proved);
* **gains following the parameters** (a gain schedule): the closed forms ``K(p)`` and
  ``L(p)`` of the derivation on the plant at the same ``p``, so the loop is the separated
  loop ``[[A − B K(p), B K(p)], [0, A − L(p) C]]``.  Its poles are those of the two blocks;
  Ackermann's formula makes them the design poles wherever the formulas are defined.  The
  conditions are that every *validity factor* (each irreducible factor of a denominator of
  ``K(p)``, ``L(p)`` or of a plant entry, the controllability and observability determinants
  among them) keeps its nominal sign over the box, and the Liénard–Chipart conditions of
  both blocks' characteristic polynomials (numbers when the identity holds).

Both are decided by :func:`~symbolic.analysis.box_search.search_box` (interval enclosures,
exact rational evaluation at points): ``"proved"`` over the whole box; ``"counterexample"``
at a point where the exact conditions fail, with the least stable eigenvalue of the numeric
loop there (confirmed by NumPy), or where a validity factor vanishes; ``"undecided"`` after
the cap on boxes; ``"not covered"`` with the reason (a digital controller: ``e^{A(p)T}`` is
not rational in ``p``; entries that are not rational functions of the parameters; schedules
of integral action or of the reduced-order observer).  Nothing is ever concluded from samples.

Caution: a proof covers the linear model with the declared ranges, not the machine.

References
----------
.. [1] F. R. Gantmacher, *The Theory of Matrices*, Vol. 2, Chelsea, 1959, Ch. XV, Sec. 13
   (the Liénard–Chipart criterion) -- from memory.
.. [2] R. E. Moore, R. B. Kearfott and M. J. Cloud, *Introduction to Interval Analysis*,
   SIAM, 2009.
.. [3] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 10-2
   (Ackermann's formula) and Sec. 10-5 (the separation of controller and observer poles).
"""

from __future__ import annotations

import math
import weakref
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
import sympy as sp
from sympy import QQ, ZZ
from sympy.polys.matrices import DomainMatrix

from ..verification.shipped import ShippedController, closed_loop
from .box_search import BoxSearch, search_box
from .certify_loops import (
    NotCovered,
    cleared_coefficients,
    field_matrix,
    ranged_parameters,
    scheduled_conditions,
)
from .interval_poly import compile_polynomial, exact_value, lienard_chipart_conditions
from .interval_poly import rational_interval as _rational_interval

__all__ = [
    "MAX_BOXES",
    "Certificate",
    "CertificateReport",
    "box_certificates",
    "certify_fixed_gains",
    "certify_scheduled",
    "point_is_hurwitz",
]

#: Boxes evaluated before a search is given up as undecided (a count, not a time, so that
#: reports do not depend on the machine's speed).
MAX_BOXES = 4000
#: An eigenvalue counts as confirming instability when Re(s) ≥ −this × max(1, |s|max).
CONFIRM_TOLERANCE = 1e-9

FIXED, SCHEDULED = "gains fixed", "gain-scheduled"


@dataclass(frozen=True)
class Certificate:
    """The verdict of one certified search over the parameter box.

    Attributes
    ----------
    case : str
        ``"gains fixed"`` (nominal design) or ``"gain-scheduled"`` (K(p), L(p)).
    status : str
        ``"proved"``, ``"counterexample"``, ``"undecided"`` or ``"not covered"``.
    parameters : tuple of str
        The ranged parameters (the box's axes).
    box : tuple of (float, float)
        Their declared ranges.
    boxes, max_boxes : int
        Boxes evaluated, and the cap.
    seconds : float
    conditions : tuple of str
        The conditions proved or refuted (names).
    point : dict or None
        The counterexample: parameter values.
    eigenvalue : complex or None
        The least stable eigenvalue of the numeric loop at ``point`` (None for a breakdown of
        the formulas, where the loop is not defined).
    confirmed : bool or None
        Whether NumPy's eigenvalues at ``point`` confirm the exact verdict.
    detail : str
        Which condition fails (counterexample), which stay open (undecided), or why the case is
        not covered.
    order : int
        Degree of the characteristic polynomial (0 when not covered).
    """

    case: str
    status: str
    parameters: tuple[str, ...]
    box: tuple[tuple[float, float], ...]
    boxes: int = 0
    max_boxes: int = MAX_BOXES
    seconds: float = 0.0
    conditions: tuple[str, ...] = ()
    point: dict[str, float] | None = None
    eigenvalue: complex | None = None
    confirmed: bool | None = None
    detail: str = ""
    order: int = 0

    @property
    def passed(self) -> bool:
        return self.status == "proved"

    @property
    def covered(self) -> bool:
        return self.status != "not covered"

    @property
    def point_text(self) -> str:
        if self.point is None:
            return ""
        return ", ".join(f"{k} = {v:.6g}" for k, v in self.point.items())

    @property
    def summary(self) -> str:
        """``proved over the box``, ``counterexample at …``, ``undecided after N boxes`` or
        ``not covered: …``."""
        boxes = f"{self.boxes} box" + ("" if self.boxes == 1 else "es")
        if self.status == "proved":
            return f"proved over the box ({boxes})"
        if self.status == "undecided":
            return f"undecided after {boxes}"
        if self.status == "not covered":
            return f"not covered: {self.detail}"
        what = (
            f"pole {_complex_text(self.eigenvalue)}" if self.eigenvalue is not None else self.detail
        )
        return f"counterexample at {self.point_text}: {what}"

    def to_json(self) -> dict:
        ev = self.eigenvalue
        return {
            "case": self.case,
            "status": self.status,
            "summary": self.summary,
            "passed": self.passed,
            "parameters": list(self.parameters),
            "box": [list(b) for b in self.box],
            "boxes": self.boxes,
            "max_boxes": self.max_boxes,
            "seconds": self.seconds,
            "conditions": list(self.conditions),
            "point": self.point,
            "eigenvalue": None if ev is None else [float(ev.real), float(ev.imag)],
            "confirmed": self.confirmed,
            "detail": self.detail,
            "order": self.order,
        }


@dataclass(frozen=True)
class CertificateReport:
    """Both certificates of a design with ranges."""

    fixed: Certificate
    scheduled: Certificate

    def to_json(self) -> dict:
        return {"gains_fixed": self.fixed.to_json(), "gain_scheduled": self.scheduled.to_json()}

    def requirement_rows(self) -> list[dict]:
        """The rows of the requirements table (:mod:`symbolic.analysis.verdict`), one per
        covered case; only a proof passes."""
        rows = []
        for cert, key, what in (
            (self.fixed, "certified_ranges", "K, L fixed at the nominal design"),
            (self.scheduled, "certified_schedule", "K(p), L(p) following the parameters"),
        ):
            if not cert.covered:
                continue
            short = "" if cert.passed else f"{cert.summary} ({cert.detail})"
            if cert.status == "undecided":
                short = f"not proved ({cert.detail}); narrow the ranges or raise the cap"
            rows.append(
                dict(
                    key=key,
                    label=f"stability over the parameter box, {cert.case}",
                    requested="proved for every point of the box",
                    achieved=cert.summary,
                    passed=cert.passed,
                    shortfall=short,
                    basis=(
                        f"{what}; Liénard–Chipart conditions of the characteristic polynomial"
                        f" (order {cert.order}) over {', '.join(cert.parameters)}, interval"
                        " enclosures and branch and bound (a proof, not a grid)"
                    ),
                    source="[parameters] ranges",
                    achieved_value=float(cert.boxes),
                )
            )
        return rows


def _complex_text(z: complex) -> str:
    if abs(z.imag) <= 1e-12 * max(1.0, abs(z)):
        return f"s = {z.real:.4g}"
    return f"s = {z.real:.4g} ± {abs(z.imag):.4g}j"


# --------------------------------------------------------------------------------------------
# Points
# --------------------------------------------------------------------------------------------
def point_is_hurwitz(coefficients: list[Fraction]) -> bool | None:
    """Exact Hurwitz test of ``a_n s^n + … + a_0`` with rational coefficients.

    None when the leading coefficient is zero (the loop is not defined there).
    """
    if coefficients[0] == 0:
        return None
    sign = 1 if coefficients[0] > 0 else -1
    m = 1
    for c in coefficients:
        m = math.lcm(m, c.denominator)
    ints = [ZZ(int(sign * c * m)) for c in coefficients]
    return all(v > 0 for _name, v in lienard_chipart_conditions(ints, ZZ))


def _values(design, names, point) -> dict:
    vals = dict(design.values)
    symbols = design.symbols
    for name, x in zip(names, point, strict=True):
        vals[symbols[name]] = sp.Rational(x.numerator, x.denominator)
    return vals


def _plant_at(design, values) -> list[np.ndarray]:
    p = design.plant
    return [np.array(sp.Matrix(M).xreplace(values), dtype=float) for M in (p.A, p.B, p.C, p.D)]


def _least_stable(eig: np.ndarray) -> tuple[complex, bool]:
    k = int(np.argmax(eig.real))
    z = complex(eig[k])
    if z.imag < 0:
        z = z.conjugate()
    scale = max(1.0, float(np.max(np.abs(eig))))
    return z, bool(z.real >= -CONFIRM_TOLERANCE * scale)


def _outer(bounds) -> tuple[tuple[float, float], ...]:
    out = []
    for lo, hi in bounds:
        out.append((float(_rational_interval(lo).a), float(_rational_interval(hi).b)))
    return tuple(out)


def _not_covered(case, names, box, why: str) -> Certificate:
    return Certificate(case, "not covered", names, box, detail=why)


def _from_search(case, names, box, res: BoxSearch, conds, order, max_boxes) -> Certificate:
    common = dict(
        boxes=res.boxes,
        max_boxes=max_boxes,
        seconds=res.seconds,
        conditions=tuple(c.name for c in conds),
        order=order,
    )
    if res.status == "proved":
        return Certificate(case, "proved", names, box, **common)
    if res.status == "undecided":
        detail = "still open: " + ", ".join(res.violated) if res.violated else ""
        return Certificate(case, "undecided", names, box, detail=detail, **common)
    point, eigenvalue, confirmed, detail = res.witness
    return Certificate(
        case,
        "counterexample",
        names,
        box,
        point=point,
        eigenvalue=eigenvalue,
        confirmed=confirmed,
        detail=detail,
        **common,
    )


# --------------------------------------------------------------------------------------------
# The two cases
# --------------------------------------------------------------------------------------------
def _fixed_loop_matrix(d, ctrl: ShippedController, K):
    """The loop matrix of :func:`symbolic.verification.shipped.closed_loop` over the field K."""
    design = d.design
    fixed = ranged_parameters(design)[2]
    A, B, C, D = (field_matrix(M, K, fixed, f"plant.{n}") for n, M in zip("ABCD", _plant(design)))
    eq = ctrl.equations
    if ctrl.measurement is not None:
        C, D = (field_matrix(sp.Matrix(np.atleast_2d(M)), K, {}, "") for M in ctrl.measurement)
    Ao, Boy, Bou, Cc, Dcy = (
        field_matrix(_exact(M), K, {}, "controller")
        for M in (
            eq.state_matrix,
            eq.measurement_matrix,
            eq.control_matrix,
            eq.output_state,
            eq.output_measurement,
        )
    )
    m = B.shape[1]
    Mi = (DomainMatrix.eye(m, K) - Dcy * D).inv()
    Ux, Uxi = Mi * Dcy * C, Mi * Cc
    Bxi = Boy * D + Bou
    top = (A + B * Ux).hstack(B * Uxi)
    bottom = (Boy * C + Bxi * Ux).hstack(Ao + Bxi * Uxi)
    return top.vstack(bottom)


def _plant(design):
    p = design.plant
    return (p.A, p.B, p.C, p.D)


def _exact(M) -> sp.Matrix:
    """Floats as exact rationals (the shortest decimal that reads back as the same float)."""
    return sp.Matrix([[sp.Rational(repr(float(x))) for x in row] for row in np.atleast_2d(M)])


def certify_fixed_gains(
    d, ctrl: ShippedController, *, max_boxes: int = MAX_BOXES, time_limit: float | None = None
) -> Certificate | None:
    """Certify the shipped controller (gains fixed at the nominal design) over the box.

    Returns None when no parameter has a range of positive width.
    """
    names, bounds, _fixed = ranged_parameters(d.design)
    if not names:
        return None
    box = tuple((float(lo), float(hi)) for lo, hi in bounds)
    if ctrl.digital:
        return _not_covered(
            FIXED, names, box, "digital controller (the sampled plant, the matrix exponential of A(p) T, is not rational"
            " in the parameters; the grid row covers it)",
        )  # fmt: skip
    K = QQ.frac_field(*[d.design.symbols[n] for n in names])
    try:
        F = _fixed_loop_matrix(d, ctrl, K)
        coeffs = cleared_coefficients(F.charpoly(), K, names, bounds, d.design)
    except NotCovered as exc:
        return _not_covered(FIXED, names, box, str(exc))
    R = coeffs[0][1]
    polys = [p for p, _dom in coeffs]
    conds = [compile_polynomial(n, p) for n, p in lienard_chipart_conditions(polys, R)]

    def refute(point, _bad):
        exact = [exact_value(p, point) for p in polys]
        if point_is_hurwitz(exact) is not False:
            return None  # stable here, or the plant is not defined: not a counterexample
        A, B, C, D = _plant_at(d.design, _values(d.design, names, point))
        F_num, _G = closed_loop(ctrl, A, B, C, D)
        z, confirmed = _least_stable(np.linalg.eigvals(F_num))
        where = {n: float(x) for n, x in zip(names, point, strict=True)}
        failing = [c.name for c in conds if c.exact(point) <= 0]
        return (
            where,
            z,
            confirmed,
            ", ".join(failing) + (" fails" if len(failing) == 1 else " fail"),
        )

    res = search_box(
        conds, bounds, _outer(bounds), refute=refute, max_boxes=max_boxes, time_limit=time_limit
    )
    return _from_search(FIXED, names, box, res, conds, len(polys) - 1, max_boxes)


def certify_scheduled(
    d, ctrl: ShippedController, *, max_boxes: int = MAX_BOXES, time_limit: float | None = None
) -> Certificate | None:
    """Certify the gain-scheduled loop (K(p), L(p) follow the parameters) over the box."""
    names, bounds, _fixed = ranged_parameters(d.design)
    if not names:
        return None
    box = tuple((float(lo), float(hi)) for lo, hi in bounds)
    try:
        built = scheduled_conditions(d, ctrl, names, bounds)
    except NotCovered as exc:
        return _not_covered(SCHEDULED, names, box, str(exc))
    conds = [compile_polynomial(n, p) for n, p in built.conditions]

    def refute(point, bad):
        where = {n: float(x) for n, x in zip(names, point, strict=True)}
        broken = [i for i in bad if i < built.factor_count]
        if broken:
            f = built.conditions[broken[0]][1]
            zero = built.locate_zero(f, point)
            at = {n: float(x) for n, x in zip(names, zero, strict=True)}
            return at, None, None, f"the formulas break down: {built.factor_text(broken[0])}"
        blocks = built.block_polynomials
        for poly_list in blocks:
            exact = [exact_value(p, point) for p in poly_list]
            if point_is_hurwitz(exact) is False:
                eig = built.numeric_poles(_values(d.design, names, point))
                z, confirmed = _least_stable(eig)
                failing = [c.name for c in conds if c.exact(point) <= 0]
                return (
                    where,
                    z,
                    confirmed,
                    ", ".join(failing) + (" fails" if len(failing) == 1 else " fail"),
                )
        return None

    res = search_box(
        conds, bounds, _outer(bounds), refute=refute, max_boxes=max_boxes, time_limit=time_limit
    )
    return _from_search(SCHEDULED, names, box, res, conds, 2 * d.plant.A.shape[0], max_boxes)


_CACHE: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def box_certificates(
    d, ctrl: ShippedController, *, max_boxes: int = MAX_BOXES
) -> CertificateReport | None:
    """Both certificates of a design, or None when no parameter has a range.

    The result is kept for the controller object (the requirements table, the memo and the
    JSON ask for it on the same controller).
    """
    key = (id(d), max_boxes)
    hit = _CACHE.get(ctrl)
    if hit is not None and hit[0] == key:
        return hit[1]
    fixed = certify_fixed_gains(d, ctrl, max_boxes=max_boxes)
    scheduled = certify_scheduled(d, ctrl, max_boxes=max_boxes)
    report = None if fixed is None or scheduled is None else CertificateReport(fixed, scheduled)
    _CACHE[ctrl] = (key, report)
    return report
