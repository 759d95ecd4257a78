"""Polynomials in the ranged parameters: exact values at points, rigorous enclosures over boxes.

A stability condition of the certificate (:mod:`symbolic.analysis.certify`) is a polynomial
``f`` with rational coefficients in the parameters that have a range.  This module gives it
two evaluations:

* **exact**, at a point with rational coordinates (SymPy's sparse polynomials over ``QQ``):
  the sign is decided with no rounding at all;
* **enclosure** over a box ``X = X_1 × … × X_k``, in interval arithmetic with outward rounding
  (mpmath's ``iv`` context): an interval guaranteed to contain ``f(x)`` for every ``x`` in
  ``X``.  Two enclosures are intersected: the *natural* one (the sum of the monomials, each
  monomial's range exact because its variables are independent and ``X_i**k`` is computed as
  a power) and the *mean-value form* ``f(m) + Σ_i ∂_i f(X) (X_i − m_i)`` about the midpoint
  ``m``, which shrinks quadratically with the box width (Moore, Kearfott and Cloud 2009,
  Sec. 6.4).  ``f(x) − f(m) = ∇f(ξ)·(x − m)`` for some ``ξ`` on the segment (mean value
  theorem), and the segment stays in the box, so the form is an enclosure.

The Hurwitz conditions of a characteristic polynomial whose coefficients are such
polynomials are built by :func:`lienard_chipart_conditions`.

References
----------
.. [1] R. E. Moore, R. B. Kearfott and M. J. Cloud, *Introduction to Interval Analysis*,
   SIAM, 2009, Ch. 5 (interval extensions, the enclosure property) and Sec. 6.4 (the mean
   value form).
.. [2] E. R. Hansen and G. W. Walster, *Global Optimization Using Interval Analysis*, 2nd
   ed., Marcel Dekker, 2004, Ch. 12 (the monotonicity test) -- from memory.
.. [3] F. R. Gantmacher, *The Theory of Matrices*, Vol. 2, Chelsea, 1959, Ch. XV, Sec. 6
   (the Hurwitz determinants) and Sec. 13 (the Liénard–Chipart criterion) -- from memory.
.. [4] A. Liénard and M. H. Chipart, "Sur le signe de la partie réelle des racines d'une
   équation algébrique", *J. Math. Pures Appl.* (6) 10:291–346, 1914.
.. [5] F. Johansson and others, *mpmath: a Python library for arbitrary-precision
   floating-point arithmetic*, version 1.3, 2023 (the ``iv`` interval context).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction

from mpmath import iv
from sympy import QQ
from sympy.polys.matrices import DomainMatrix

__all__ = [
    "BoxPolynomial",
    "compile_polynomial",
    "exact_value",
    "hurwitz_determinant",
    "lienard_chipart_conditions",
    "rational_interval",
    "taylor_lower_bound",
]

Terms = tuple[tuple[tuple[int, ...], object], ...]  # ((exponents), interval coefficient)


def rational_interval(q) -> object:
    """An ``iv.mpf`` interval holding the rational ``q`` (outward rounded, exact if binary)."""
    q = Fraction(int(q.numerator), int(q.denominator))
    num = iv.mpf(q.numerator)
    return num if q.denominator == 1 else num / iv.mpf(q.denominator)


def _compile_terms(poly) -> Terms:
    return tuple((tuple(e), rational_interval(c)) for e, c in poly.terms())


@dataclass(frozen=True)
class BoxPolynomial:
    """A named condition ``poly > 0``, ready to be evaluated exactly and over boxes.

    Attributes
    ----------
    name : str
        How the condition is named in reports (``"a0 > 0"``, ``"Δ3 > 0"``).
    poly : PolyElement
        The polynomial over ``QQ`` in the ring of the ranged parameters.
    terms, gradient : tuple
        The monomials with interval coefficients, of ``poly`` and of each partial derivative.
    """

    name: str
    poly: object
    terms: Terms
    gradient: tuple[Terms, ...]
    rational: object  # ``poly`` over QQ, for exact values at rational points
    integer: tuple[tuple[tuple[int, ...], int], ...]  # ``poly`` times ``scale``
    scale: int = 1  # a positive integer

    @property
    def variables(self) -> int:
        return len(self.poly.ring.gens)

    def enclosure(self, box: Sequence[tuple[float, float]]) -> object:
        """An interval holding ``poly(x)`` for every ``x`` in ``box`` (see the module notes)."""
        X = [iv.mpf([lo, hi]) for lo, hi in box]
        natural = _natural(self.terms, X)
        if not self.gradient or all(lo == hi for lo, hi in box):
            return natural
        mid = [0.5 * lo + 0.5 * hi for lo, hi in box]
        mid = [m if lo <= m <= hi else lo for m, (lo, hi) in zip(mid, box, strict=True)]
        M = [iv.mpf(m) for m in mid]
        form = _natural(self.terms, M)
        for i, g in enumerate(self.gradient):
            if g:
                form = form + _natural(g, X) * (X[i] - M[i])
        lo = max(natural.a, form.a)
        hi = min(natural.b, form.b)
        return iv.mpf([lo, hi]) if lo <= hi else natural

    def lower_bound(self, box: Sequence[tuple[float, float]]):
        """A number below ``poly`` over the whole box (a float, or an mpmath number).

        The natural enclosure first (mpmath ``iv``); when it does not show ``poly > 0``, the
        Taylor form about the box's centre, exactly (:func:`taylor_lower_bound`).
        """
        natural = _natural(self.terms, [iv.mpf([lo, hi]) for lo, hi in box])
        if natural.a > 0 or not self.gradient:
            return natural.a
        return taylor_lower_bound(self.integer, box) / self.scale

    def exact(self, point: Sequence[Fraction]) -> Fraction:
        """``poly`` at a rational point, exactly."""
        return exact_value(self.rational, point)


def _natural(terms: Terms, X: Sequence[object]) -> object:
    """The sum of the monomials over the intervals ``X`` (each power computed once)."""
    powers: list[dict[int, object]] = [{} for _ in X]
    total = iv.mpf(0)
    for exps, coeff in terms:
        value = coeff
        for i, e in enumerate(exps):
            if e:
                cache = powers[i]
                if e not in cache:
                    cache[e] = X[i] ** e
                value = value * cache[e]
        total = total + value
    return total


def exact_value(poly, point: Sequence[Fraction]) -> Fraction:
    """The polynomial (over ``QQ`` or ``ZZ``) at a rational point, as a
    :class:`fractions.Fraction`."""
    if poly.ring.domain != QQ:
        poly = poly.set_ring(poly.ring.clone(domain=QQ))
    args = [QQ(int(Fraction(x).numerator), int(Fraction(x).denominator)) for x in point]
    value = poly(*args) if len(args) > 1 else poly(args[0])
    value = QQ.convert(value)
    return Fraction(int(value.numerator), int(value.denominator))


def compile_polynomial(name: str, poly) -> BoxPolynomial:
    """A :class:`BoxPolynomial` of a polynomial over ``QQ`` (a SymPy ``PolyElement``)."""
    ring = poly.ring
    grad = tuple(_compile_terms(poly.diff(i)) for i in range(len(ring.gens)))
    rational = poly if ring.domain == QQ else poly.set_ring(ring.clone(domain=QQ))
    scale = 1
    for _e, c in rational.terms():
        scale = math.lcm(scale, int(c.denominator))
    integer = tuple((tuple(e), int(c * scale)) for e, c in rational.terms())
    return BoxPolynomial(name, poly, _compile_terms(poly), grad, rational, integer, scale)


def _shift(terms: dict, var: int, M: int, R: int, e: int) -> dict:
    """Substitute ``x_var = (M + R t)/2^e`` and multiply by ``2^(e d)`` (d: the degree in
    ``x_var``), by Horner's rule on each group of terms: integers in, integers out."""
    groups: dict[tuple, dict[int, int]] = {}
    for exps, c in terms.items():
        rest = exps[:var] + (0,) + exps[var + 1 :]
        groups.setdefault(rest, {})[exps[var]] = c
    d = max(exps[var] for exps in terms)
    out: dict[tuple, int] = {}
    for rest, coeffs in groups.items():
        acc = [coeffs.get(d, 0)]
        for a in range(d - 1, -1, -1):  # acc ← acc·(M + R t) + c_a 2^(e(d−a))
            nxt = [M * x for x in acc] + [0]
            for b, x in enumerate(acc):
                nxt[b + 1] += R * x
            nxt[0] += coeffs.get(a, 0) << (e * (d - a))
            acc = nxt
        for b, x in enumerate(acc):
            if x:
                key = rest[:var] + (b,) + rest[var + 1 :]
                out[key] = out.get(key, 0) + x
    return out


def taylor_lower_bound(integer_terms, box: Sequence[tuple[float, float]]) -> Fraction:
    """A lower bound of a polynomial with integer coefficients over a box, exactly.

    With ``m`` the centre and ``r`` the half-widths of the box (dyadic rationals, since the
    box's ends are floats), ``x = m + r∘t`` turns the polynomial into ``Σ c_α t^α`` over
    ``t ∈ [−1, 1]^k`` (an exact Taylor shift, done in integers times a power of two that is
    divided out at the end).  Then
    ``min ≥ c_0 + Σ_{α ≠ 0} min over t of c_α t^α``, which is ``−|c_α|`` when an exponent of
    ``α`` is odd and ``min(0, c_α)`` when all are even: the Taylor (centred) form, whose
    overestimation shrinks quadratically with the box (Moore, Kearfott and Cloud 2009,
    Sec. 6.4).  No rounding happens anywhere, so the bound is rigorous.
    """
    terms = dict(integer_terms)
    if not terms:
        return Fraction(0)
    power = 0  # the shifts multiplied the polynomial by 2**power
    for var, (lo, hi) in enumerate(box):
        if not any(exps[var] for exps in terms):
            continue
        m = (Fraction(lo) + Fraction(hi)) / 2
        r = (Fraction(hi) - Fraction(lo)) / 2
        den = math.lcm(m.denominator, r.denominator)
        e = den.bit_length() - 1  # den is a power of two
        power += e * max(exps[var] for exps in terms)
        terms = _shift(terms, var, int(m * den), int(r * den), e)
    zero = (0,) * len(box)
    total = terms.get(zero, 0)
    for exps, c in terms.items():
        if exps == zero:
            continue
        total += min(0, c) if all(x % 2 == 0 for x in exps) else -abs(c)
    return Fraction(total, 1 << power)


def hurwitz_determinant(coefficients: Sequence, k: int, domain):
    """The k-th Hurwitz determinant Δ_k of ``a_n s^n + … + a_0``, exactly.

    Parameters
    ----------
    coefficients : sequence
        ``[a_n, a_{n−1}, …, a_0]``, elements of ``domain``.
    k : int
        Order of the leading principal minor, 1 ≤ k ≤ n.
    domain : sympy Domain
        ``ZZ``, ``QQ`` or a polynomial ring over them (fraction-free determinant by Bareiss'
        method; over ``ZZ`` it runs about ten times faster than over ``QQ``).

    Notes
    -----
    The Hurwitz matrix has ``H[i][j] = a_{n − 2j + i}`` (1-based, ``a_m = 0`` outside
    ``0..n``): first row ``a_{n−1}, a_{n−3}, …``, second row ``a_n, a_{n−2}, …``
    (Gantmacher, Vol. 2, Ch. XV, Sec. 6).
    """
    n = len(coefficients) - 1
    a = {n - i: c for i, c in enumerate(coefficients)}
    rows = [
        [a[n - 2 * j + i] if 0 <= n - 2 * j + i <= n else domain.zero for j in range(1, k + 1)]
        for i in range(1, k + 1)
    ]
    return DomainMatrix(rows, (k, k), domain).det()


def lienard_chipart_conditions(coefficients: Sequence, domain) -> list[tuple[str, object]]:
    """Polynomials that must all be positive for ``a_n s^n + … + a_0`` to be Hurwitz.

    Parameters
    ----------
    coefficients : sequence
        ``[a_n, …, a_0]`` in ``domain`` (numbers, or a polynomial ring over ``ZZ``/``QQ``),
        n ≥ 1.
    domain : sympy Domain

    Returns
    -------
    list of (name, polynomial)
        Every coefficient ``a_n, …, a_0`` and the Hurwitz determinants ``Δ_k`` with
        ``k ≡ n − 1 (mod 2)``, ``2 ≤ k ≤ n − 1``.

    Notes
    -----
    Liénard and Chipart (1914): with ``a_n > 0`` the polynomial is Hurwitz if and only if
    the coefficients of every other power and the Hurwitz determinants of one parity are
    positive (Gantmacher, Vol. 2, Ch. XV, Sec. 13, its four equivalent forms).  Every
    coefficient of a Hurwitz polynomial is positive (Stodola's necessary condition), so
    asking for all of them and for the determinants ending at ``Δ_{n−1}`` is the same
    criterion.  ``Δ_1 = a_{n−1}`` is a coefficient; ``Δ_n = a_0 Δ_{n−1}`` is not needed.
    For n = 3 this is ``a_3, a_2, a_1, a_0 > 0`` and ``a_2 a_1 − a_3 a_0 > 0`` (the Routh
    condition; N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015, Sec. 6.2).

    Examples
    --------
    >>> from sympy import QQ, symbols
    >>> b = symbols("b")
    >>> R = QQ[b]
    >>> conds = lienard_chipart_conditions([R(1), R(2), R.from_sympy(b), R(3)], R)
    >>> [(name, R.to_sympy(p)) for name, p in conds]
    [('a3 > 0', 1), ('a2 > 0', 2), ('a1 > 0', b), ('a0 > 0', 3), ('Δ2 > 0', 2*b - 3)]
    """
    n = len(coefficients) - 1
    if n < 1:
        raise ValueError("a characteristic polynomial of degree at least 1 is needed")
    out = [(f"a{n - i} > 0", c) for i, c in enumerate(coefficients)]
    for k in range(n - 1, 1, -2):
        out.append((f"Δ{k} > 0", hurwitz_determinant(coefficients, k, domain)))
    out[len(coefficients) :] = out[len(coefficients) :][::-1]
    return out
