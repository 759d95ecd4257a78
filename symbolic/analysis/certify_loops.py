"""The loops of the certificate in exact arithmetic: matrices over the field of the ranged
parameters, cleared characteristic polynomials, and the conditions of the gain schedule.

Every matrix is a :class:`~sympy.polys.matrices.DomainMatrix` over ``QQ(p_1, …, p_k)``, the
rational functions of the parameters with a range (the other parameters are replaced by their
values first); characteristic polynomials are computed there (Berkowitz, no determinant of
``sI − A``), so every coefficient is an exact rational function.  Entries that are not rational
functions of the parameters (``sqrt``, ``exp`` …) are not covered and say so.

References
----------
.. [1] S. J. Berkowitz, "On computing the determinant in small parallel time using a small
   number of processors", *Information Processing Letters* 18(3):147–150, 1984.
.. [2] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 10-2
   (Ackermann's formula) and Sec. 10-5 (observer-based control: the separated loop).
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import sympy as sp
from sympy import QQ, ZZ
from sympy.polys.matrices import DomainMatrix
from sympy.polys.polyerrors import CoercionFailed

from .interval_poly import exact_value, lienard_chipart_conditions

__all__ = [
    "NotCovered",
    "ScheduledConditions",
    "cleared_coefficients",
    "field_matrix",
    "nominal_point",
    "ranged_parameters",
    "scheduled_conditions",
]

#: Bisection steps locating where a validity factor vanishes (relative 2^-60 of the segment).
BISECTION_STEPS = 60


class NotCovered(ValueError):
    """The loop cannot be certified by this method (the message says why)."""


def ranged_parameters(design) -> tuple[tuple[str, ...], list[tuple[Fraction, Fraction]], dict]:
    """(names, exact bounds) of the parameters whose range has positive width, and the
    substitution of every other parameter (a zero-width range fixes it at its value)."""
    names, bounds, fixed = [], [], {}
    for p in design.parameters:
        if p.range is not None and p.range[0] != p.range[1]:
            names.append(p.name)
            lo, hi = p.range
            bounds.append((Fraction(int(lo.p), int(lo.q)), Fraction(int(hi.p), int(hi.q))))
        else:
            fixed[p.symbol] = p.value
    return tuple(names), bounds, fixed


def nominal_point(design, names) -> tuple[Fraction, ...]:
    by_name = {p.name: p.value for p in design.parameters}
    return tuple(Fraction(int(by_name[n].p), int(by_name[n].q)) for n in names)


def field_matrix(M, K, fixed: dict, key: str) -> DomainMatrix:
    """A SymPy matrix over the fraction field ``K``, other parameters substituted."""
    M = sp.Matrix(M)
    rows = []
    for i in range(M.rows):
        row = []
        for j in range(M.cols):
            e = (
                M[i, j].xreplace(fixed) if fixed else M[i, j]
            )  # entries of a SymPy Matrix: no parsing
            if not e.free_symbols <= set(K.symbols) or not e.is_rational_function(*K.symbols):
                raise NotCovered(
                    f"{key}[{i}][{j}] = {e} is not a rational function of the ranged parameters"
                )
            try:
                row.append(K.from_sympy(e))
            except (CoercionFailed, ValueError) as exc:
                # e.g. an irrational constant such as cos(7/10) (a linearisation's entry):
                # not an element of the rational function field over QQ
                raise NotCovered(
                    f"{key}[{i}][{j}] holds an irrational constant, such as the cosine of an"
                    " operating-point angle, which is not a rational function over the rationals"
                ) from exc
        rows.append(row)
    return DomainMatrix(rows, (M.rows, M.cols), K)


def _ring_poly(R, p):
    return R.ring.from_dict({m: R.dom.convert(c, p.ring.domain) for m, c in p.terms()})


def integer_polynomials(polys, Z) -> list:
    """Polynomials over ``QQ`` times one positive integer (the lcm of their coefficients'
    denominators), as polynomials over ``Z`` = ``ZZ[p]``: the same roots, faster arithmetic."""
    m = 1
    for p in polys:
        for c in p.coeffs():
            m = math.lcm(m, int(c.denominator))
    return [Z.ring.from_dict({k: ZZ(int(c * m)) for k, c in p.terms()}) for p in polys]


def cleared_coefficients(charpoly, K, names, bounds, design) -> list[tuple[object, object]]:
    """The monic characteristic polynomial times its common denominator, sign normalised.

    Returns ``[(a_n, Z), …, (a_0, Z)]``: polynomials with integer coefficients (``Z`` the ring
    ``ZZ[p]`` of the parameters; the common denominator and one positive integer multiply the
    monic polynomial) with ``a_n`` positive at the nominal point.

    Raises
    ------
    NotCovered
        When the common denominator vanishes at the nominal point.
    """
    R = K.get_ring()
    den = None
    for c in charpoly:
        den = c.denom if den is None else den.lcm(c.denom)
    polys = []
    for c in charpoly:
        q = c * den  # a polynomial: its denominator is a constant (the lcm is monic)
        if not q.denom.is_ground:
            raise NotCovered(
                "the characteristic polynomial could not be cleared of its denominators"
            )
        polys.append(_ring_poly(R, q.numer).quo_ground(QQ.convert(q.denom.LC, q.denom.ring.domain)))
    lead = exact_value(polys[0], nominal_point(design, names))
    if lead == 0:
        raise NotCovered("the characteristic polynomial is not defined at the nominal point")
    if lead < 0:
        polys = [-p for p in polys]
    Z = ZZ[tuple(K.symbols)]
    return [(p, Z) for p in integer_polynomials(polys, Z)]


def _factor_key(f) -> tuple:
    return tuple(sorted(f.terms()))


def _validity_factors(entries) -> list[tuple[object, str]]:
    """Each non-constant irreducible factor of a denominator, once, with where it comes from."""
    seen, out = set(), []
    for origin, M in entries:
        for e in (x for row in M.to_list() for x in row):
            if e.denom.is_ground:
                continue
            _c, factors = e.denom.factor_list()
            for f, _mult in factors:
                if f.is_ground:
                    continue
                if f.LC < 0:
                    f = -f
                key = _factor_key(f)
                if key not in seen:
                    seen.add(key)
                    out.append((f, origin))
    return out


class ScheduledConditions:
    """The conditions of the gain-scheduled loop and the tools to explain a failing point."""

    def __init__(self, d, names, factors, blocks, K, R):
        self.d = d
        self.names = names
        self.R = R
        self.nominal = nominal_point(d.design, names)
        conds = []
        self._factor_texts = []
        for f, origin in factors:
            g = _ring_poly(R, f)
            if exact_value(g, self.nominal) < 0:
                g = -g
            text = sp.sstr(R.to_sympy(g))
            text = text if len(text) <= 80 else text[:77] + "…"
            self._factor_texts.append(f"{text} = 0 ({origin})")
            conds.append((f"{text} ≠ 0 ({origin})", g))
        self.factor_count = len(conds)
        self.block_polynomials = []
        for label, cp in blocks:
            cleared = cleared_coefficients(cp, K, names, None, d.design)
            polys = [p for p, _Z in cleared]
            self.block_polynomials.append(polys)
            for name, p in lienard_chipart_conditions(polys, cleared[0][1]):
                conds.append((f"{label}: {name}", p))
        self.conditions = conds

    def factor_text(self, i: int) -> str:
        return self._factor_texts[i]

    def locate_zero(self, f, point) -> tuple[Fraction, ...]:
        """A point near where ``f`` vanishes on the segment from the nominal point to ``point``
        (``f > 0`` at the nominal point, ``f ≤ 0`` at ``point``: a zero lies between)."""
        p0 = self.nominal
        lo, hi = Fraction(0), Fraction(1)

        def at(t):
            return tuple(a + t * (b - a) for a, b in zip(p0, point, strict=True))

        for _ in range(BISECTION_STEPS):
            mid = (lo + hi) / 2
            if exact_value(f, at(mid)) > 0:
                lo = mid
            else:
                hi = mid
        return at(hi)

    def numeric_poles(self, values) -> np.ndarray:
        """Eigenvalues of A − B K(p) and A − L(p) C at a parameter point (NumPy)."""
        p = self.d.design.plant
        A, B, C = (np.array(sp.Matrix(M).xreplace(values), dtype=float) for M in (p.A, p.B, p.C))
        Kp = np.array(sp.Matrix(self.d.K.closed_form).xreplace(values), dtype=float)
        Lp = np.array(sp.Matrix(self.d.L.closed_form).xreplace(values), dtype=float)
        return np.concatenate([np.linalg.eigvals(A - B @ Kp), np.linalg.eigvals(A - Lp @ C)])


def scheduled_conditions(d, ctrl, names, bounds) -> ScheduledConditions:
    """Validity factors and the Hurwitz conditions of both blocks of the scheduled loop.

    Raises
    ------
    NotCovered
        For a digital controller, integral action, the reduced-order observer, or gains
        without a closed form.
    """
    design = d.design
    if ctrl.digital:
        raise NotCovered("digital controller (the sampled plant is not rational in the parameters)")
    if d.integral is not None:
        raise NotCovered("integral action (only schedules of K and L are certified)")
    if design.observer.kind == "reduced":
        raise NotCovered("reduced-order observer (only schedules of K and L are certified)")
    if d.K.closed_form is None or d.L.closed_form is None:
        raise NotCovered("K or L has no closed form (symbolic budget)")
    K = QQ.frac_field(*[design.symbols[n] for n in names])
    fixed = ranged_parameters(design)[2]
    p = design.plant
    A, B, C = (field_matrix(M, K, fixed, f"plant.{n}") for n, M in zip("ABC", (p.A, p.B, p.C)))
    Kp = field_matrix(d.K.closed_form, K, fixed, "K")
    Lp = field_matrix(d.L.closed_form, K, fixed, "L")
    factors = _validity_factors(
        [("plant.A", A), ("plant.B", B), ("plant.C", C), ("K", Kp), ("L", Lp)]
    )
    blocks = [("A − B K(p)", (A - B * Kp).charpoly()), ("A − L(p) C", (A - Lp * C).charpoly())]
    return ScheduledConditions(d, names, factors, blocks, K, K.get_ring())
