"""The closed forms of the gains to export, and the conditions under which they hold.

One direction of flow: :func:`gain_formulas` takes a finished
:class:`~symbolic.model.results.Derivation`, keeps its closed forms of K, L and the
reference gain N, and lists the *validity factors*: the factors of the
controllability and observability determinants, of z(0) (the steady-state
numerator of the tracked output) and of every denominator, each of which must
not vanish.  The generators turn these into code (:mod:`symbolic.render.c_code`,
:mod:`symbolic.render.python_code`), and :mod:`symbolic.render.gain_evaluator`
evaluates them vectorised.

Return codes of the generated C function (also the ``code`` of
:class:`symbolic.render.gain_evaluator.GainValues`): 0 success, 1 uncontrollable,
2 unobservable, 3 no reference gain (the plant has a zero at s = 0), 4 a denominator
vanishes or a result is not finite.  A factor f counts as zero when
|f| <= ZERO_TOLERANCE * (sum of the magnitudes of the terms of f) at the same parameter
values: zero up to the rounding of the terms that cancel.  A single-term factor (e.g.
``kf``) is therefore zero only when it is exactly zero; a tiny nonzero value gives huge
gains, or non-finite ones (code 4).

References
----------
.. [1] J. Ackermann, "Der Entwurf linearer Regelungssysteme im Zustandsraum",
   *Regelungstechnik* 20(7):297-300, 1972 (the closed forms of K and, on the
   dual pair, of L).
.. [2] SymPy Development Team, *SymPy 1.14 documentation*, "Code Generation"
   (``sympy.cse``).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

import sympy as sp

from ..derivation.structure import describe_zero
from ..model.design import Design, Parameter
from ..model.results import Derivation
from ..runtime.errors import DesignFileError

__all__ = [
    "CODE_MEANINGS",
    "CODE_NAMES",
    "CODE_NOT_FINITE",
    "CODE_NO_REFERENCE_GAIN",
    "CODE_OK",
    "CODE_UNCONTROLLABLE",
    "CODE_UNOBSERVABLE",
    "CODE_WORDS",
    "ZERO_TOLERANCE",
    "GainFormulas",
    "ValidityFactor",
    "common_subexpressions",
    "gain_formulas",
]

#: A validity factor counts as zero below this fraction of the sum of the
#: magnitudes of its terms (about 4500 units in the last place of a double):
#: engineering judgement, common practice, no source.
ZERO_TOLERANCE = 1e-12

CODE_OK = 0
CODE_UNCONTROLLABLE = 1
CODE_UNOBSERVABLE = 2
CODE_NO_REFERENCE_GAIN = 3
CODE_NOT_FINITE = 4

#: What each return code means, in words (also printed into the generated files).
CODE_MEANINGS: Mapping[int, str] = {
    CODE_OK: "success",
    CODE_UNCONTROLLABLE: "uncontrollable (a factor of det of the controllability matrix is zero)",
    CODE_UNOBSERVABLE: "unobservable (a factor of det of the observability matrix is zero)",
    CODE_NO_REFERENCE_GAIN: (
        "no reference gain (a factor of z(0) is zero: the plant has a zero at s = 0)"
    ),
    CODE_NOT_FINITE: "a denominator is zero, or a result is not finite",
}

#: One or two words per return code, for notes and tables.
CODE_WORDS: Mapping[int, str] = {
    CODE_OK: "valid",
    CODE_UNCONTROLLABLE: "uncontrollable",
    CODE_UNOBSERVABLE: "unobservable",
    CODE_NO_REFERENCE_GAIN: "no reference gain",
    CODE_NOT_FINITE: "not finite",
}

#: The name of each return code in the generated C macros (``<PREFIX>_UNCONTROLLABLE``).
CODE_NAMES: Mapping[int, str] = {
    CODE_OK: "OK",
    CODE_UNCONTROLLABLE: "UNCONTROLLABLE",
    CODE_UNOBSERVABLE: "UNOBSERVABLE",
    CODE_NO_REFERENCE_GAIN: "NO_REFERENCE_GAIN",
    CODE_NOT_FINITE: "NOT_FINITE",
}


# --------------------------------------------------------------------------
# Result objects
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class ValidityFactor:
    """A factor that must not vanish, with the code returned when it does.

    ``scale`` is the sum of the magnitudes of the factor's terms; the factor
    counts as zero when ``|factor| <= ZERO_TOLERANCE * scale``.
    """

    code: int
    factor: sp.Expr
    scale: sp.Expr
    condition: str  # e.g. "kf = 0"
    origin: str  # e.g. "det of the controllability matrix = -kf**2/m**2"


@dataclass(frozen=True)
class GainFormulas:
    """The closed forms to export, and the conditions under which they hold."""

    design: Design
    K: sp.Matrix  # (m, n)
    L: sp.Matrix  # (n, p)
    reference_gain: sp.Expr
    factors: tuple[ValidityFactor, ...]  # in the order they are checked
    controller_poles: tuple[complex, ...]
    observer_poles: tuple[complex, ...]
    tracked_output: str
    #: Further closed forms the design asks for, ``(name, matrix, description)``: integral
    #: action (``K_integral`` = [K, k_i]) and the reduced-order observer (``Ke``, ``A_hat``,
    #: ``B_hat``, ``F_hat``, ``estimate_from_state``, ``estimate_from_output``).
    extra: tuple[tuple[str, sp.Matrix, str], ...] = ()
    #: Why a part the design asks for is not exported (no closed form), one line each.
    omitted: tuple[str, ...] = ()
    integral_pole: complex | None = None
    reduced_poles: tuple[complex, ...] = ()

    @property
    def parameters(self) -> tuple[Parameter, ...]:
        return self.design.parameters

    @property
    def shape(self) -> tuple[int, int, int]:
        """(states n, inputs m, outputs p)."""
        return self.K.shape[1], self.K.shape[0], self.L.shape[1]

    @property
    def parts(self) -> tuple[str, ...]:
        """Every part exported: K, L, reference_gain, then the extra matrices."""
        return ("K", "L", "reference_gain") + tuple(name for name, _m, _t in self.extra)

    def part_shape(self, part: str) -> tuple[int, int] | None:
        """(rows, columns) of a matrix part; None for the scalar reference gain."""
        if part == "K":
            return self.K.shape
        if part == "L":
            return self.L.shape
        if part == "reference_gain":
            return None
        for name, M, _t in self.extra:
            if name == part:
                return M.shape
        raise ValueError(f"unknown part {part!r}: expected one of {self.parts}")

    def entries(self, parts: Sequence[str] | None = None) -> list[sp.Expr]:
        """The formulas of ``parts`` (default: :attr:`parts`), row-major, in the order given."""
        extra = {name: M for name, M, _t in self.extra}
        out: list[sp.Expr] = []
        for part in self.parts if parts is None else parts:
            if part == "K":
                out.extend(self.K)
            elif part == "L":
                out.extend(self.L)
            elif part == "reference_gain":
                out.append(self.reference_gain)
            elif part in extra:
                out.extend(extra[part])
            else:
                raise ValueError(f"unknown part {part!r}: expected one of {self.parts}")
        return out


# --------------------------------------------------------------------------
# The formulas and their validity conditions
# --------------------------------------------------------------------------
def _numbers_as_floats(expr: sp.Expr) -> sp.Expr:
    """Replace pi, E, ... by 30-digit floats (printed the same in C and Python)."""
    consts = expr.atoms(sp.NumberSymbol)
    return expr.xreplace({c: sp.Float(c, 30) for c in consts}) if consts else expr


def _factor_list(expr: sp.Expr) -> list[sp.Expr]:
    """The non-constant factors of the numerator of an expression (each once)."""
    num = sp.fraction(expr)[0]
    if not num.free_symbols:
        return []
    try:
        _c, factors = sp.factor_list(num)
    except sp.PolynomialError:
        num = sp.fraction(sp.together(num))[0]  # fractions inside a sum (small expressions)
        try:
            _c, factors = sp.factor_list(num)
        except (sp.PolynomialError, NotImplementedError):
            return [num]
    except NotImplementedError:
        return [num]
    return [f for f, mult in factors if f.free_symbols and mult > 0]


def _denominator_factors(expr: sp.Expr) -> list[sp.Expr]:
    """The factors of every base raised to a negative power anywhere in ``expr``.

    Scanning the powers finds nested denominators too, and avoids
    ``together``, which is slow on large closed forms (TECH-NOTES).
    """
    out: list[sp.Expr] = []
    for power in sorted(expr.atoms(sp.Pow), key=sp.default_sort_key):
        if power.exp.is_negative and power.base.free_symbols:
            for f in _factor_list(power.base):
                if f not in out:
                    out.append(f)
    return out


def _split(expr: sp.Expr) -> tuple[list[sp.Expr], list[sp.Expr]]:
    """Factors of the numerator and of the denominators of an expression."""
    return _factor_list(expr), _denominator_factors(expr)


def _scale(factor: sp.Expr) -> sp.Expr:
    terms = sp.Add.make_args(sp.expand(factor))
    return sp.Add(*[sp.Abs(t) for t in terms])


def _no_closed_form_reason(d: Derivation) -> str | None:
    plant = d.design.plant
    if plant.n_inputs > 1 and d.K.closed_form is None:
        return (
            f"the plant has {plant.n_inputs} inputs: K is not unique and has a closed form only"
            " for a single input"
        )
    if plant.n_outputs > 1 and d.L.closed_form is None:
        return (
            f"the plant has {plant.n_outputs} outputs: L is not unique and has a closed form only"
            " for a single output"
        )
    if d.K.closed_form is None or d.L.closed_form is None:
        why = "; ".join(n for n in d.notes if "budget" in n) or "the symbolic derivation failed"
        return f"the gains were computed numerically only ({why})"
    if d.reference is None:
        tracked = plant.outputs[d.design.tracking.output].name
        return (
            f"no reference gain exists for output '{tracked}' at the evaluated values (the plant"
            " has a zero at s = 0)"
        )
    if d.reference.closed_form is None or d.reference.zero_polynomial is None:
        return "the reference gain has no closed form"
    if d.controllability.determinant is None or d.observability.determinant is None:
        return "the controllability or observability determinant has no closed form"
    return None


def gain_formulas(d: Derivation) -> GainFormulas:
    """Collect the closed forms of K, L and N and their validity factors.

    Parameters
    ----------
    d : Derivation
        From :func:`symbolic.derive`; single input and single output, with
        closed forms.

    Returns
    -------
    GainFormulas

    Raises
    ------
    DesignFileError
        "no closed form to export: ..." with the reason (several inputs or
        outputs, symbolic budget exhausted, no reference gain).

    Notes
    -----
    The factors are checked in this order, and each factor is listed once,
    under the first code it belongs to: the numerator factors of the
    controllability determinant (code 1), of the observability determinant
    (code 2), of z(0), the constant coefficient of the numerator of the
    tracked output's transfer function (code 3; N = α_c(0)/z(0)), and the
    denominator factors of all of these and of every entry of K, L and N
    (code 4).  For a single-input plant det of the controllability matrix is
    nonzero exactly when the pair is controllable (Kalman's rank test; e.g.
    K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
    Sec. 9-6), and the dual statement holds for observability.

    Examples
    --------
    >>> import symbolic
    >>> design = symbolic.parse_design(b'''
    ... [parameters.m]
    ... value = 2.0
    ... [parameters.kf]
    ... value = 0.5
    ... [plant]
    ... A = [[0, 1], [0, 0]]
    ... B = [[0], ["kf/m"]]
    ... C = [[1, 0]]
    ... [controller]
    ... poles = ["-2+2j", "-2-2j"]
    ... ''')
    >>> f = gain_formulas(symbolic.derive(design, budget=0))
    >>> f.K
    Matrix([[8*m/kf, 4*m/kf]])
    >>> [(v.code, v.condition) for v in f.factors]
    [(1, 'kf = 0'), (4, 'm = 0')]
    """
    design = d.design
    reason = _no_closed_form_reason(d)
    if reason is not None:
        raise DesignFileError(f"no closed form to export: {reason}", design.path, "plant")
    assert d.K.closed_form is not None and d.L.closed_form is not None
    assert d.reference is not None and d.reference.closed_form is not None
    K = d.K.closed_form.applyfunc(_numbers_as_floats)
    L = d.L.closed_form.applyfunc(_numbers_as_floats)
    N = _numbers_as_floats(d.reference.closed_form)
    extra, omitted = _extended_parts(d)
    factors = _validity_factors(d, K, L, N, extra)
    ia = getattr(d, "integral", None)
    ro = getattr(d, "reduced_observer", None)
    return GainFormulas(
        design=design,
        K=K,
        L=L,
        reference_gain=N,
        factors=tuple(factors),
        controller_poles=tuple(complex(z) for z in d.controller_poles.values),
        observer_poles=tuple(complex(z) for z in d.observer_poles.values),
        tracked_output=design.plant.outputs[design.tracking.output].name,
        extra=extra,
        omitted=omitted,
        integral_pole=None if ia is None else complex(ia.integral_pole),
        reduced_poles=() if ro is None else tuple(complex(z) for z in ro.poles),
    )


def _validity_factors(
    d: Derivation,
    K: sp.Matrix,
    L: sp.Matrix,
    N: sp.Expr,
    extra: tuple[tuple[str, sp.Matrix, str], ...],
) -> list[ValidityFactor]:
    """Every factor that must not vanish, each once, in the order of :func:`gain_formulas`."""
    assert d.reference is not None and d.reference.zero_polynomial is not None
    det_c = d.controllability.determinant
    det_o = d.observability.determinant
    z0 = d.reference.zero_polynomial[-1]
    assert det_c is not None and det_o is not None
    seen: list[sp.Expr] = []
    factors: list[ValidityFactor] = []

    def add(code: int, candidates: Iterable[sp.Expr], origin: str) -> None:
        for f in candidates:
            f = _numbers_as_floats(f)
            if any(sp.expand(f - g) == 0 or sp.expand(f + g) == 0 for g in seen):
                continue
            seen.append(f)
            factors.append(ValidityFactor(code, f, _scale(f), describe_zero(f), origin))

    num_c, den_c = _split(det_c)
    num_o, den_o = _split(det_o)
    num_z, den_z = _split(z0)
    add(CODE_UNCONTROLLABLE, num_c, f"det of the controllability matrix = {det_c}")
    add(CODE_UNOBSERVABLE, num_o, f"det of the observability matrix = {det_o}")
    add(CODE_NO_REFERENCE_GAIN, num_z, f"z(0) = {z0}")
    add(CODE_NOT_FINITE, den_c, "a denominator of det of the controllability matrix")
    add(CODE_NOT_FINITE, den_o, "a denominator of det of the observability matrix")
    add(CODE_NOT_FINITE, den_z, "a denominator of z(0)")
    for name, entries in (("K", K), ("L", L), ("N", [N])) + tuple((nm, M) for nm, M, _t in extra):
        dens: list[sp.Expr] = []
        for e in entries:
            dens.extend(_denominator_factors(e))
        add(CODE_NOT_FINITE, dens, f"a denominator of {name}")
    return factors


def _extended_parts(
    d: Derivation,
) -> tuple[tuple[tuple[str, sp.Matrix, str], ...], tuple[str, ...]]:
    """Closed forms of integral action and of the reduced-order observer, when asked for."""
    extra: list[tuple[str, sp.Matrix, str]] = []
    omitted: list[str] = []
    ia = getattr(d, "integral", None)
    if ia is not None:
        if ia.closed_form is not None:
            extra.append(
                (
                    "K_integral",
                    ia.closed_form.applyfunc(_numbers_as_floats),
                    "[K, k_i] of integral action: u = -K x_hat - k_i x_I, x_I' = y_t - r",
                )
            )
        else:
            omitted.append(f"integral action [K, k_i]: no closed form ({ia.method})")
    ro = getattr(d, "reduced_observer", None)
    if ro is not None:
        forms = ro.observer_closed_form
        if ro.Ke_closed_form is not None and forms is not None and ro.order > 0:
            p, rest = ro.measured, ro.order
            Ti = _inverse_matrix(ro.T_closed_form)
            Chat = sp.zeros(p, rest).col_join(sp.eye(rest))
            Dhat = sp.eye(p).col_join(ro.Ke_closed_form)
            tidy = lambda M: M.applyfunc(  # noqa: E731
                lambda e: _numbers_as_floats(sp.cancel(e) if e.free_symbols else e)
            )
            extra += [
                ("Ke", tidy(ro.Ke_closed_form), "reduced-order observer gain K_e"),
                ("A_hat", tidy(forms["A_hat"]), "eta' = A_hat eta + B_hat y_bar + F_hat u"),
                ("B_hat", tidy(forms["B_hat"]), "(y_bar = y - D u, the measured states)"),
                ("F_hat", tidy(forms["F_hat"]), ""),
                (
                    "estimate_from_state",
                    tidy(Ti * Chat),
                    "x_hat = estimate_from_state eta + estimate_from_output y_bar",
                ),
                ("estimate_from_output", tidy(Ti * Dhat), ""),
            ]
        elif ro.order > 0:
            omitted.append(f"reduced-order observer: no closed form ({ro.method})")
    return tuple(extra), tuple(omitted)


def _inverse_matrix(M: sp.Matrix) -> sp.Matrix:
    from sympy.polys.matrices import DomainMatrix

    return DomainMatrix.from_Matrix(sp.Matrix(M)).to_field().inv().to_Matrix()


def common_subexpressions(
    exprs: Sequence[sp.Expr], prefix: str = "_t"
) -> tuple[list[tuple[sp.Symbol, sp.Expr]], list[sp.Expr]]:
    """``sympy.cse`` over all expressions together, temporaries named ``prefix0, prefix1, …``.

    Parameter names start with a letter, so the default ``_t`` prefix never
    meets one.
    """
    reps, reduced = sp.cse(list(exprs), symbols=sp.numbered_symbols(prefix), order="canonical")
    return list(reps), list(reduced)
