"""The gain formulas as code: C99 and standalone NumPy modules (``gainsmith export``).

One direction of flow: :func:`gain_formulas` takes a finished
:class:`~symbolic.model.results.Derivation`, keeps its closed forms of K, L and the
reference gain N, and lists the *validity factors*: the factors of the
controllability and observability determinants, of z(0) (the steady-state
numerator of the tracked output) and of every denominator, each of which must
not vanish.  The printers turn these into

* ``<slug>_gains.h`` / ``<slug>_gains.c``: one C99 function
  ``int <slug>_gains(const <slug>_parameters *p, <slug>_gains_out *out)``
  with no allocation and no global variables, which checks the factors,
  evaluates K, L and N with common subexpressions shared, and returns a
  nonzero code when a condition fails;
* ``<slug>_gains.py``: a module that imports only NumPy (and the standard
  ``warnings``) and exposes ``gains(**parameters)``, broadcasting over arrays.

The same formulas are evaluated vectorised by :func:`gain_evaluator` (used by
``gainsmith schedule`` and by the export's own self-check).

Return codes of the C function (also the ``code`` of :class:`GainValues`):
0 success, 1 uncontrollable, 2 unobservable, 3 no reference gain (the plant
has a zero at s = 0), 4 a denominator vanishes or a result is not finite.
A factor f counts as zero when |f| <= ZERO_TOLERANCE * (sum of the magnitudes
of the terms of f) at the same parameter values: zero up to the rounding of
the terms that cancel.  A single-term factor (e.g. ``kf``) is therefore zero
only when it is exactly zero; a tiny nonzero value gives huge gains, or
non-finite ones (code 4).

Naming: parameter names are validated identifiers (:func:`symbolic.input.expressions.check_name`),
but some are still taken in C: a C or C++ keyword (``int``, ``double``,
``auto``, ``class`` ...), a macro of the C standard library (``NAN``, ``EOF``,
``errno`` ...), a name the C standard reserves for future library macros
(``E`` followed by a digit or capital, ``FE_``, ``FP_``, ``LC_``, ``SIG``,
``PRI``/``SCN`` with a lower-case letter, ``INT..._MAX`` ...), a common POSIX
or GNU predefined macro (``M_PI``, ``unix``, ``linux``) or a macro of the
generated header itself.  Such a member is named ``p_<name>`` in the C struct
(the header comment lists every renamed member).  In the Python module the
keyword arguments keep the design's names.

References
----------
.. [1] J. Ackermann, "Der Entwurf linearer Regelungssysteme im Zustandsraum",
   *Regelungstechnik* 20(7):297-300, 1972 (the closed forms of K and, on the
   dual pair, of L).
.. [2] ISO/IEC 9899:1999, *Programming languages - C*, 6.4.1 (keywords),
   7.26 (future library directions: reserved macro names), 7.12 (<math.h>:
   ``isfinite``, ``fabs``, ``pow``, ``sqrt``, ``cbrt``).
.. [3] SymPy Development Team, *SymPy 1.14 documentation*, "Code Generation"
   (``sympy.cse``, ``sympy.printing.c.C99CodePrinter``,
   ``sympy.printing.numpy.NumPyPrinter``, ``sympy.lambdify``).
"""

from __future__ import annotations

import builtins
import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import sympy as sp
from sympy.printing.c import C99CodePrinter
from sympy.printing.numpy import NumPyPrinter
from sympy.printing.precedence import PRECEDENCE

from ..derivation.numeric import relative_difference
from ..derivation.pipeline import derive
from ..derivation.structure import describe_zero
from ..model.design import Design, Parameter
from ..model.numbers import format_pole, format_poles
from ..model.results import Derivation
from ..runtime.errors import DesignFileError

__all__ = [
    "CODE_NO_REFERENCE_GAIN",
    "CODE_NOT_FINITE",
    "CODE_OK",
    "CODE_UNCONTROLLABLE",
    "CODE_UNOBSERVABLE",
    "CODE_MEANINGS",
    "CODE_WORDS",
    "ZERO_TOLERANCE",
    "GainFormulas",
    "GainValues",
    "ValidityFactor",
    "c_identifier_prefix",
    "c_member_names",
    "c_sources",
    "common_subexpressions",
    "gain_evaluator",
    "gain_formulas",
    "python_local_names",
    "python_source",
    "run_export",
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

_CODE_NAMES = {
    CODE_OK: "OK",
    CODE_UNCONTROLLABLE: "UNCONTROLLABLE",
    CODE_UNOBSERVABLE: "UNOBSERVABLE",
    CODE_NO_REFERENCE_GAIN: "NO_REFERENCE_GAIN",
    CODE_NOT_FINITE: "NOT_FINITE",
}

#: x**k with 2 <= |k| <= this is printed as a product (x*x*x): exact for k = 2,
#: and much faster than pow() / numpy.power for small k.
MAX_EXPANDED_POWER = 8

#: Points per block in the vectorised evaluator: blocks of this size keep the
#: temporaries in cache (common practice, no source).
BLOCK = 16384


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


@dataclass(frozen=True)
class GainValues:
    """Gains evaluated at many parameter points (leading axes: the points' shape).

    ``code`` is the return code of the C function at each point (0 valid); the
    gains are NaN wherever ``code`` is nonzero.  Parts not requested are None.
    """

    K: np.ndarray | None  # (..., m, n)
    L: np.ndarray | None  # (..., n, p)
    reference_gain: np.ndarray | None  # (...)
    code: np.ndarray | None  # (...) int8
    #: index into ``GainFormulas.factors`` of the factor that set ``code``, -1 if none
    factor_index: np.ndarray | None = None  # (...) int16
    #: value of every validity factor, (factors, ...)
    factor_values: np.ndarray | None = None
    #: the extra parts requested (``K_integral``, ``Ke``, ...), name -> (..., rows, cols)
    extra: Mapping[str, np.ndarray] | None = None

    @property
    def valid(self) -> np.ndarray:
        return self.code == CODE_OK


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
    assert d.reference.zero_polynomial is not None
    K = d.K.closed_form.applyfunc(_numbers_as_floats)
    L = d.L.closed_form.applyfunc(_numbers_as_floats)
    N = _numbers_as_floats(d.reference.closed_form)

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
    extra, omitted = _extended_parts(d)
    for name, entries in (("K", K), ("L", L), ("N", [N])) + tuple((nm, M) for nm, M, _t in extra):
        dens: list[sp.Expr] = []
        for e in entries:
            dens.extend(_denominator_factors(e))
        add(CODE_NOT_FINITE, dens, f"a denominator of {name}")

    tracked = design.plant.outputs[design.tracking.output].name
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
        tracked_output=tracked,
        extra=extra,
        omitted=omitted,
        integral_pole=None if ia is None else complex(ia.integral_pole),
        reduced_poles=() if ro is None else tuple(complex(z) for z in ro.poles),
    )


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


# --------------------------------------------------------------------------
# Names
# --------------------------------------------------------------------------
_C_KEYWORDS = frozenset(
    # C99 6.4.1, C11 and C23 additions
    "auto break case char const continue default do double else enum extern float for goto if"
    " inline int long register restrict return short signed sizeof static struct switch typedef"
    " union unsigned void volatile while alignas alignof bool constexpr false nullptr"
    " static_assert thread_local true typeof typeof_unqual"
    # C++ keywords (the header is often included from C++)
    " and and_eq asm bitand bitor catch char8_t char16_t char32_t class compl concept consteval"
    " constinit const_cast co_await co_return co_yield decltype delete dynamic_cast explicit"
    " export friend mutable namespace new noexcept not not_eq operator or or_eq private"
    " protected public reinterpret_cast requires static_cast template this throw try typeid"
    " typename using virtual wchar_t xor xor_eq".split()
)
_C_MACROS = frozenset(
    # <math.h>
    "HUGE_VAL HUGE_VALF HUGE_VALL INFINITY NAN FP_INFINITE FP_NAN FP_NORMAL FP_SUBNORMAL"
    " FP_ZERO FP_FAST_FMA FP_FAST_FMAF FP_FAST_FMAL FP_ILOGB0 FP_ILOGBNAN MATH_ERRNO"
    " MATH_ERREXCEPT math_errhandling"
    # <stdio.h>, <stdlib.h>, <stddef.h>, <errno.h>, <stdbool.h>, <complex.h>, <float.h>,
    # <limits.h>, <iso646.h>, <assert.h>, <setjmp.h>, <stdarg.h>
    " EOF BUFSIZ FILENAME_MAX FOPEN_MAX L_tmpnam SEEK_CUR SEEK_END SEEK_SET TMP_MAX stdin"
    " stdout stderr EXIT_FAILURE EXIT_SUCCESS MB_CUR_MAX RAND_MAX NULL errno complex"
    " imaginary I DECIMAL_DIG CHAR_BIT CHAR_MAX CHAR_MIN MB_LEN_MAX NDEBUG"
    # common POSIX/GNU predefined macros
    " unix linux i386 i686".split()
)
_C_RESERVED_PATTERNS = (
    re.compile(r"E[0-9A-Z].*"),  # <errno.h>
    re.compile(r"(FE|FP|LC|SIG|M|DBL|FLT|LDBL|SCHAR|SHRT|INT|UINT|LONG|ULONG|LLONG|ULLONG)_.*"),
    re.compile(r"SIG[A-Z].*"),
    re.compile(r"(PRI|SCN)[a-zX].*"),
    re.compile(r"U?INT[0-9A-Z_]*_(MAX|MIN|C)"),
    re.compile(r"(PTRDIFF|SIZE|WCHAR|WINT|SIG_ATOMIC)_(MAX|MIN)"),
)


def c_identifier_prefix(design: Design) -> str:
    """The C prefix of every generated name: the slug as an identifier (``belt_drive``)."""
    text = re.sub(r"[^A-Za-z0-9]+", "_", design.slug).strip("_")
    text = re.sub(r"_+", "_", text) or "design"
    return text if text[0].isalpha() else f"design_{text}"


def _macro_names(prefix: str) -> set[str]:
    up = prefix.upper()
    base = {"STATES", "INPUTS", "OUTPUTS", "PARAMETERS", "ZERO_TOLERANCE", "GAINS_H"}
    return {f"{up}_{b}" for b in base | set(_CODE_NAMES.values())}


def _c_reserved(name: str, macros: set[str]) -> bool:
    return (
        name in _C_KEYWORDS
        or name in _C_MACROS
        or name in macros
        or any(p.fullmatch(name) for p in _C_RESERVED_PATTERNS)
    )


def c_member_names(names: Sequence[str], prefix: str = "design") -> dict[str, str]:
    """Struct member name of each parameter: the name, or ``p_<name>`` if it is taken in C.

    Parameters
    ----------
    names : sequence of str
        Parameter names (validated identifiers).
    prefix : str
        The generated C prefix (its macros are taken names too).

    Returns
    -------
    dict
        name -> member name, unique.

    Examples
    --------
    >>> c_member_names(["m", "int", "NAN", "p_int"])
    {'m': 'm', 'int': 'p_p_int', 'NAN': 'p_NAN', 'p_int': 'p_int'}
    """
    macros = _macro_names(prefix)
    out: dict[str, str] = {}
    used: set[str] = set()
    for name in names:  # names that need no change keep it
        if not _c_reserved(name, macros):
            out[name] = name
            used.add(name)
    for name in names:
        if name in out:
            continue
        member = f"p_{name}"
        while member in used or _c_reserved(member, macros):
            member = f"p_{member}"
        out[name] = member
        used.add(member)
    return {name: out[name] for name in names}


_PY_MODULE_NAMES = frozenset(
    {
        "numpy",
        "warnings",
        "PARAMETERS",
        "UNITS",
        "NOMINAL",
        "RANGES",
        "CONTROLLER_POLES",
        "OBSERVER_POLES",
        "ZERO_TOLERANCE",
        "VALIDITY",
        "CODE_MEANINGS",
        "CODE_WORDS",
        "DESIGN_SHA256",
        "GAINSMITH_VERSION",
        "gains",
    }
)


def python_local_names(names: Sequence[str]) -> dict[str, str]:
    """Local variable of each parameter inside ``gains()``: the name, unless it would
    shadow a builtin or a module-level name, then the name with ``_`` appended."""
    taken = set(dir(builtins)) | _PY_MODULE_NAMES
    out: dict[str, str] = {}
    used: set[str] = set()
    for name in names:
        if name not in taken:
            out[name] = name
            used.add(name)
    for name in names:
        if name in out:
            continue
        local = f"{name}_"
        while local in used or local in taken or local in names:
            local += "_"
        out[name] = local
        used.add(local)
    return {name: out[name] for name in names}


# --------------------------------------------------------------------------
# Printers
# --------------------------------------------------------------------------
def _int_text(n: int, c: bool) -> str | None:
    """Integers too large for exact or portable literals are printed as doubles."""
    if abs(n) > 2**53:
        return repr(float(n))
    if c and abs(n) >= 2**31:
        return f"{n}.0"
    return None


class _CPrinter(C99CodePrinter):
    """C99 printer: parameters as ``p->member``, small integer powers as products."""

    def __init__(self, names: Mapping[sp.Symbol, str]):
        super().__init__({"math_macros": {}})
        self._names = dict(names)

    def _print_Symbol(self, expr):
        name = self._names.get(expr)
        return name if name is not None else super()._print_Symbol(expr)

    def _print_Integer(self, expr):
        return _int_text(int(expr), c=True) or super()._print_Integer(expr)

    def _print_Pow(self, expr):
        e = expr.exp
        if e.is_Integer and 2 <= abs(int(e)) <= MAX_EXPANDED_POWER:
            base = self.parenthesize(expr.base, PRECEDENCE["Pow"])
            product = "(" + "*".join([base] * abs(int(e))) + ")"
            return product if e > 0 else f"1.0/{product}"
        return super()._print_Pow(expr)


class PythonPrinter(NumPyPrinter):
    """NumPy printer: names mapped, small integer powers as products, 1/x for x**-1."""

    def __init__(self, names: Mapping[sp.Symbol, str] | None = None):
        super().__init__({"fully_qualified_modules": True, "allow_unknown_functions": False})
        self._names = dict(names or {})

    def _print_Symbol(self, expr):
        name = self._names.get(expr)
        return name if name is not None else super()._print_Symbol(expr)

    def _print_Integer(self, expr):
        return _int_text(int(expr), c=False) or super()._print_Integer(expr)

    def _print_Pow(self, expr, rational=False):
        e = expr.exp
        if e.is_Integer and 1 <= abs(int(e)) <= MAX_EXPANDED_POWER:
            base = self.parenthesize(expr.base, PRECEDENCE["Pow"])
            product = "*".join([base] * abs(int(e)))
            if e > 0:
                return f"({product})"
            return f"1/{product}" if abs(int(e)) == 1 else f"1/({product})"
        return super()._print_Pow(expr, rational=rational)


# --------------------------------------------------------------------------
# Text helpers
# --------------------------------------------------------------------------
_UNSAFE_COMMENT = re.compile(r"[^\x20-\x7e]")


def _comment_text(text: str) -> str:
    """User text made safe inside a C block comment or after a Python ``#``.

    One line of printable ASCII (anything else becomes ``?``), with ``*/``
    and ``/*`` broken apart and backslashes and ``??`` (trigraphs) defused.
    """
    text = " ".join(str(text).split())
    text = _UNSAFE_COMMENT.sub("?", text)
    text = text.replace("\\", "/").replace("??", "?-?").replace('"', "'")
    text = text.replace("*/", "* /").replace("/*", "/ *")
    return text


def _real_text(x: float) -> str:
    r = repr(float(x))
    return r[:-2] if r.endswith(".0") else r


#: Stands for a space that must not break a line (never in generated text: see _wrap).
_KEEP_TOGETHER = "\x00"


def _validity_lines(formulas: GainFormulas, c: bool) -> list[str]:
    """The validity conditions in words, one line per code."""
    lines = []
    by_code: dict[int, list[ValidityFactor]] = {}
    for f in formulas.factors:
        by_code.setdefault(f.code, []).append(f)
    for code in (CODE_UNCONTROLLABLE, CODE_UNOBSERVABLE, CODE_NO_REFERENCE_GAIN, CODE_NOT_FINITE):
        group = by_code.get(code, [])
        # a condition is never broken across lines (_wrap turns the marker back into spaces)
        where = " or ".join(f.condition.replace(" ", _KEEP_TOGETHER) for f in group)
        head = f"{code}  " if c else ""
        meaning = CODE_MEANINGS[code]
        if code == CODE_NOT_FINITE:
            text = (
                f"{head}{meaning}: where {where}, or where the inputs are NaN or infinite or a"
                " result overflows"
                if group
                else f"{head}{meaning}: where the inputs are NaN or infinite or a result overflows"
            )
        elif group:
            origins = "; ".join(sorted({f.origin for f in group}))
            text = f"{head}{meaning}: where {where} ({origins})"
        else:
            text = f"{head}{meaning}: no condition beyond the ones above"
        lines.append(text)
    return lines


def _validity_rule() -> str:
    return (
        f"A factor f counts as zero when |f| <= {ZERO_TOLERANCE:g} * (the sum of the magnitudes"
        " of its terms) at the same parameter values: zero up to the rounding of the terms that"
        " cancel. A single-term factor (such as a parameter on its own) is zero only when it is"
        " exactly zero; a tiny nonzero value gives huge or non-finite gains."
    )


_CAUTION = (
    "CAUTION: these gains close a feedback loop around a machine that moves. A wrong gain,"
    " a parameter in the wrong unit, or different floating-point behaviour on the target can"
    " make the loop unstable. Verify this code on the target (same compiler, options and"
    " parameter values) against the values of `gainsmith derive` before closing the loop,"
    " limit the actuator command, and keep a way to stop the machine safely."
)


def _header_lines(formulas: GainFormulas, language: str, file_name: str) -> list[str]:
    """The common comment block, as lines of plain ASCII text."""
    from ..runtime.version import __version__

    design = formulas.design
    n, m, p = formulas.shape
    design_file = _comment_text(Path(design.path).name)
    lines = [
        f'{file_name}: gain formulas of the design "{_comment_text(design.title)}"'
        if design.title
        else f"{file_name}: gain formulas",
        "",
        f"Generated by gainsmith {__version__}; do not edit. Regenerate with",
        f"    gainsmith export {design_file} --lang {language} -o DIR",
        f"Design file: {design_file}",
        f"SHA-256 of the design file: {design.sha256}",
    ]
    if design.overrides:
        lines.append("Evaluated with --set " + _comment_text(" --set ".join(design.overrides)))
    lines += [
        f"Plant: {n} states, {m} input, {p} output; the reference acts on the output"
        f" {_comment_text(formulas.tracked_output)}.",
        "",
        "Requested controller poles (eigenvalues of A - B K):",
        f"    {format_poles(formulas.controller_poles, None)}",
        "Requested observer poles (eigenvalues of A - L C):",
        f"    {format_poles(formulas.observer_poles, None)}",
        "",
        *_extra_header_lines(formulas),
        "Sign convention: u = -K x_hat + N r, with the observer",
        "    x_hat' = A x_hat + B u + L (y - C x_hat - D u),",
        "r the reference for the tracked output and N the reference gain (unit steady-state",
        "gain from r to the tracked output).",
        "Method: Ackermann's formula in closed form, K = e_n' inv(controllability matrix)",
        "alpha_c(A); L by duality on (A', C'); N = alpha_c(0)/z(0). J. Ackermann,",
        "Regelungstechnik 20(7):297-300, 1972.",
        "",
    ]
    return lines


def _extra_header_lines(formulas: GainFormulas) -> list[str]:
    """What the extra parts are (integral action, reduced-order observer), and what is not
    exported for lack of a closed form."""
    lines: list[str] = []
    names = [name for name, _m, _t in formulas.extra]
    if "K_integral" in names:
        lines += [
            "Integral action: K_integral = [K, k_i] places the controller poles and the",
            f"integral pole {format_pole(formulas.integral_pole or 0j, None)} (eigenvalues of A_a - B_a [K, k_i],",
            "A_a = [[A, 0], [C_t, 0]], B_a = [B; D_t]); u = -K x_hat - k_i x_I with",
            "x_I' = y_t - r. Codes 1 and 3 also mean that integral action is impossible",
            "(det of the augmented controllability matrix = z(0) det of the plant's).",
            "With an input limit u_max, correct the integrator by back-calculation:",
            "x_I' = (y_t - r) + (u_demanded - u_applied) / (k_i T_t), T_t = 1/|integral pole|.",
            "",
        ]
    if "Ke" in names:
        lines += [
            "Reduced-order observer (Luenberger): eigenvalues of A_bb - Ke A_ab at",
            f"    {format_poles(formulas.reduced_poles, None)};",
            "eta' = A_hat eta + B_hat y_bar + F_hat u, y_bar = y - D u,",
            "x_hat = estimate_from_state eta + estimate_from_output y_bar.",
            "",
        ]
    for text in formulas.omitted:
        lines += _wrap("Not exported: " + text, 92) + [""]
    return [_comment_text(line) if line else "" for line in lines]


def _wrap(text: str, width: int, indent: str = "", hanging: str = "") -> list[str]:
    import textwrap

    lines = textwrap.wrap(
        text,
        width=width,
        initial_indent=indent,
        subsequent_indent=indent + hanging,
        break_long_words=False,
        break_on_hyphens=False,
    ) or [indent]
    return [line.replace(_KEEP_TOGETHER, " ") for line in lines]


def _c_comment(lines: Sequence[str]) -> str:
    body = [" *" + (f" {line}" if line else "") for line in lines]
    return "/*\n" + "\n".join(body) + "\n */\n"


# --------------------------------------------------------------------------
# C99
# --------------------------------------------------------------------------
def c_sources(formulas: GainFormulas) -> dict[str, bytes]:
    """``<slug>_gains.h`` and ``<slug>_gains.c`` for :func:`symbolic.runtime.publish.publish`.

    Parameters
    ----------
    formulas : GainFormulas

    Returns
    -------
    dict
        File name -> content (ASCII).

    Notes
    -----
    The function checks every validity factor first (nothing is divided by a
    zero factor), then evaluates K, L and N with the common subexpressions of
    all entries shared (``sympy.cse``), into a local struct; ``*out`` is
    written only when every result is finite, so on a nonzero return it is
    left unchanged.  ``isfinite`` is a C99 macro of <math.h>; compiling with
    ``-ffast-math`` or ``-ffinite-math-only`` lets the compiler assume it is
    always true and defeats code 4.
    """
    design = formulas.design
    prefix = c_identifier_prefix(design)
    up = prefix.upper()
    names = [p.name for p in design.parameters]
    members = c_member_names(names, prefix)
    n, m, pp = formulas.shape
    header_name = f"{design.slug}_gains.h"
    source_name = f"{design.slug}_gains.c"
    params_type = f"{prefix}_parameters"
    out_type = f"{prefix}_gains_out"
    func = f"{prefix}_gains"

    def block(file_name: str) -> str:
        lines = _header_lines(formulas, "c", file_name)
        lines.append(f"Return codes of {func}() (the smallest that applies is returned):")
        lines.append(f"0  {CODE_MEANINGS[CODE_OK]}: *out holds K, L and N")
        for text in _validity_lines(formulas, c=True):
            lines.extend(_wrap(text, 92, hanging="   "))
        lines.extend(_wrap(_validity_rule(), 92))
        lines.append("On a nonzero return *out is left unchanged: do not use it.")
        lines.append("Do not compile with -ffast-math or -ffinite-math-only: they let the")
        lines.append("compiler assume isfinite() is always true.")
        renamed = [f"{k} -> {v}" for k, v in members.items() if k != v]
        if renamed:
            lines.append("")
            lines.extend(
                _wrap(
                    "Parameters renamed in the struct because their names are taken in C: "
                    + ", ".join(renamed),
                    92,
                )
            )
        lines.append("")
        lines.extend(_wrap(_CAUTION, 92))
        return _c_comment(lines)

    # ---- header ----------------------------------------------------------
    h: list[str] = [block(header_name)]
    guard = f"{up}_GAINS_H"
    h += [f"#ifndef {guard}", f"#define {guard}", ""]
    h += ["#ifdef __cplusplus", 'extern "C" {', "#endif", ""]
    h += [
        f"#define {up}_STATES {n}",
        f"#define {up}_INPUTS {m}",
        f"#define {up}_OUTPUTS {pp}",
        f"#define {up}_PARAMETERS {len(names)}",
        f"#define {up}_ZERO_TOLERANCE {ZERO_TOLERANCE!r}",
    ]
    for code, word in _CODE_NAMES.items():
        h.append(f"#define {up}_{word} {code}")
    h.append("")
    h.append("/* The plant parameters, in the units of the design file. */")
    h.append("typedef struct {")
    if not design.parameters:
        h.append("    int unused; /* the design has no parameters */")
    for prm in design.parameters:
        notes = [f"nominal {_real_text(float(prm.value))}"]
        if prm.unit:
            notes.insert(0, f"[{_comment_text(prm.unit)}]")
        if prm.range is not None:
            notes.append(
                f"range {_real_text(float(prm.range[0]))} .. {_real_text(float(prm.range[1]))}"
            )
        if prm.description:
            notes.insert(0, _comment_text(prm.description))
        h.append(f"    double {members[prm.name]}; /* {' '.join(notes)} */")
    h.append(f"}} {params_type};")
    h.append("")
    h.append("/* The gains: u = -K x_hat + reference_gain * r. */")
    h.append("typedef struct {")
    h.append(f"    double K[{up}_INPUTS][{up}_STATES];  /* state-feedback gain */")
    h.append(f"    double L[{up}_STATES][{up}_OUTPUTS]; /* observer gain */")
    h.append("    double reference_gain;            /* N */")
    for name, M, what in formulas.extra:
        note = f" /* {_comment_text(what)} */" if what else ""
        h.append(f"    double {name}[{M.shape[0]}][{M.shape[1]}];{note}")
    h.append(f"}} {out_type};")
    h.append("")
    h.append(f"/* Computes K, L and N at the parameter values *p into *out; returns {up}_OK (0) or")
    h.append("   the nonzero code of the first validity condition that fails (see above).")
    h.append("   p and out must point to valid objects; nothing is allocated. */")
    h.append(f"int {func}(const {params_type} *p, {out_type} *out);")
    h += ["", "#ifdef __cplusplus", "}", "#endif", "", f"#endif /* {guard} */", ""]

    # ---- source ----------------------------------------------------------
    symbol_names: dict[sp.Symbol, str] = {
        prm.symbol: f"p->{members[prm.name]}" for prm in design.parameters
    }
    entries = formulas.entries()
    reps, reduced = common_subexpressions(entries)
    for i, (t, _e) in enumerate(reps):
        symbol_names[t] = f"t{i}"
    printer = _CPrinter(symbol_names)
    used_symbols: set[sp.Symbol] = set()
    for e in entries:
        used_symbols |= e.free_symbols
    for f in formulas.factors:
        used_symbols |= f.factor.free_symbols

    c: list[str] = [block(source_name)]
    c += ["#include <math.h>", "", f'#include "{header_name}"', ""]
    c.append(f"int {func}(const {params_type} *p, {out_type} *out)")
    c.append("{")
    c.append(f"    {out_type} r;")
    c.append("    int i, j;")
    if not any(s in used_symbols for s in (prm.symbol for prm in design.parameters)):
        c.append("    (void)p;")
    c.append("")
    if formulas.factors:
        c.append(
            "    /* Validity: a factor that must not vanish counts as zero when |f| <="
            f" {up}_ZERO_TOLERANCE * (sum of |terms of f|). */"
        )
    for f in formulas.factors:
        c.append(f"    /* {_comment_text(f.condition)}: {_comment_text(f.origin)} */")
        c.append(
            f"    if (fabs({printer.doprint(f.factor)}) <= {up}_ZERO_TOLERANCE *"
            f" ({printer.doprint(f.scale)})) {{"
        )
        c.append(f"        return {up}_{_CODE_NAMES[f.code]};")
        c.append("    }")
    if formulas.factors:
        c.append("")
    c.append("    /* Common subexpressions of every entry of K, L and N (sympy.cse). */")
    for i, (_t, e) in enumerate(reps):
        c.append(f"    const double t{i} = {printer.doprint(e)};")
    targets = [f"r.K[{i}][{j}]" for i in range(m) for j in range(n)]
    targets += [f"r.L[{i}][{j}]" for i in range(n) for j in range(pp)]
    targets.append("r.reference_gain")
    for name, M, _what in formulas.extra:
        targets += [f"r.{name}[{i}][{j}]" for i in range(M.shape[0]) for j in range(M.shape[1])]
    for target, e in zip(targets, reduced, strict=True):
        c.append(f"    {target} = {printer.doprint(e)};")
    c.append("")
    c.append("    /* Every result must be finite. */")
    c.append(f"    if (!isfinite(r.reference_gain)) {{\n        return {up}_NOT_FINITE;\n    }}")
    c.append(f"    for (i = 0; i < {up}_INPUTS; ++i) {{")
    c.append(f"        for (j = 0; j < {up}_STATES; ++j) {{")
    c.append(f"            if (!isfinite(r.K[i][j])) {{\n                return {up}_NOT_FINITE;")
    c.append("            }\n        }\n    }")
    c.append(f"    for (i = 0; i < {up}_STATES; ++i) {{")
    c.append(f"        for (j = 0; j < {up}_OUTPUTS; ++j) {{")
    c.append(f"            if (!isfinite(r.L[i][j])) {{\n                return {up}_NOT_FINITE;")
    c.append("            }\n        }\n    }")
    for name, M, _what in formulas.extra:
        c.append(f"    for (i = 0; i < {M.shape[0]}; ++i) {{")
        c.append(f"        for (j = 0; j < {M.shape[1]}; ++j) {{")
        c.append(
            f"            if (!isfinite(r.{name}[i][j])) {{\n                return {up}_NOT_FINITE;"
        )
        c.append("            }\n        }\n    }")
    c.append("    *out = r;")
    c.append(f"    return {up}_OK;")
    c.append("}")
    c.append("")
    return {
        header_name: "\n".join(h).encode("ascii"),
        source_name: "\n".join(c).encode("ascii"),
    }


# --------------------------------------------------------------------------
# Python (NumPy)
# --------------------------------------------------------------------------
def python_source(formulas: GainFormulas) -> dict[str, bytes]:
    """``<slug>_gains.py``: a standalone module (NumPy only) with ``gains(**parameters)``.

    Parameters
    ----------
    formulas : GainFormulas

    Returns
    -------
    dict
        File name -> content (ASCII).

    Notes
    -----
    ``gains`` broadcasts its arguments (``numpy.broadcast_arrays``) and returns
    ``{"K": (..., m, n), "L": (..., n, p), "reference_gain": (...)}``.  Where a
    validity condition fails the gains are NaN and one ``RuntimeWarning`` says
    how many points failed and why.  The source is printed with
    ``sympy.printing.numpy.NumPyPrinter`` after ``sympy.cse`` over every entry.
    """
    design = formulas.design
    names = [p.name for p in design.parameters]
    local = python_local_names(names)
    n, m, pp = formulas.shape
    file_name = f"{design.slug}_gains.py"
    symbol_names = {prm.symbol: local[prm.name] for prm in design.parameters}
    entries = formulas.entries()
    reps, reduced = common_subexpressions(entries)
    printer = PythonPrinter(symbol_names)

    doc = _header_lines(formulas, "python", file_name)
    doc += [
        "Usage::",
        "",
        f"    from {design.slug.replace('-', '_')}_gains import gains, NOMINAL",
        "    g = gains(**NOMINAL)            # g['K'], g['L'], g['reference_gain']",
        "",
        "Every argument may be a NumPy array; the arguments are broadcast together and",
        "the gains get the broadcast shape in front: K (..., m, n), L (..., n, p),",
        "reference_gain (...).",
        "",
        "Validity (see VALIDITY): where a condition fails the gains are NaN and a",
        "RuntimeWarning is issued.",
        "",
    ]
    doc += _wrap(_CAUTION, 88)
    validity = [*_validity_lines(formulas, c=False), _validity_rule()]
    validity_text = "\n".join(line for item in validity for line in _wrap(item, 88) + [""]).rstrip()

    out: list[str] = ['"""' + "\n".join(doc).replace("\\", "/") + '\n"""', ""]
    out += ["import warnings", "", "import numpy", ""]
    out.append(
        '__all__ = ["gains", "PARAMETERS", "UNITS", "NOMINAL", "RANGES", "CONTROLLER_POLES",'
        ' "OBSERVER_POLES", "ZERO_TOLERANCE", "VALIDITY", "DESIGN_SHA256", "GAINSMITH_VERSION"]'
    )
    out.append("")
    from ..runtime.version import __version__

    out.append(f"GAINSMITH_VERSION = {__version__!a}")
    out.append(f"DESIGN_SHA256 = {design.sha256!a}")
    out.append(f"#: The parameter names, in the order of the design file ({len(names)}).")
    out.append(f"PARAMETERS = {tuple(names)!a}")
    out.append(f"UNITS = { ({p.name: p.unit for p in design.parameters})!a}")
    out.append(
        "NOMINAL = {"
        + ", ".join(f"{p.name!a}: {float(p.value)!r}" for p in design.parameters)
        + "}"
    )
    out.append(
        "RANGES = {"
        + ", ".join(
            f"{p.name!a}: ({float(p.range[0])!r}, {float(p.range[1])!r})"
            for p in design.parameters
            if p.range is not None
        )
        + "}"
    )
    out.append(
        "CONTROLLER_POLES = ("
        + "".join(f"{complex(z)!r}, " for z in formulas.controller_poles)
        + ")"
    )
    out.append(
        "OBSERVER_POLES = (" + "".join(f"{complex(z)!r}, " for z in formulas.observer_poles) + ")"
    )
    out.append(f"ZERO_TOLERANCE = {ZERO_TOLERANCE!r}")
    out.append('VALIDITY = """\\')
    out.append(validity_text.replace("\\", "/"))
    out.append('"""')
    out.append("")
    out.append("")
    out.append("def gains(**parameters):")
    out.append('    """K, L and the reference gain N at the given parameter values.')
    out.append("")
    out.append("    Every parameter is required (see PARAMETERS; NOMINAL has the design's values).")
    out.append("    Returns a dict with 'K' (..., m, n), 'L' (..., n, p), 'reference_gain' (...),")
    out.append("    where ... is the broadcast shape of the arguments; u = -K x_hat + N r.")
    out.append("    Raises ValueError for a missing or unknown parameter. Where a validity")
    out.append("    condition fails (see VALIDITY) the gains are NaN, with a RuntimeWarning.")
    out.append('    """')
    out.append("    _unknown = sorted(set(parameters) - set(PARAMETERS))")
    out.append("    if _unknown:")
    out.append("        raise ValueError(")
    out.append(
        "            f\"unknown parameter {_unknown[0]!r}; the parameters are {', '.join(PARAMETERS)}\""
    )
    out.append("        )")
    out.append("    _missing = [_n for _n in PARAMETERS if _n not in parameters]")
    out.append("    if _missing:")
    out.append('        raise ValueError(f"missing parameter {_missing[0]!r}")')
    if names:
        out.append(
            "    _values = numpy.broadcast_arrays("
            "*[numpy.asarray(parameters[_n], dtype=float) for _n in PARAMETERS])"
        )
        out.append("    _shape = _values[0].shape")
        out.append("    " + ", ".join(local[nm] for nm in names) + ", = _values")
    else:
        out.append("    _shape = ()")
    out.append(f"    _K = numpy.empty(_shape + ({m}, {n}))")
    out.append(f"    _L = numpy.empty(_shape + ({n}, {pp}))")
    out.append("    _N = numpy.empty(_shape)")
    for name, M, _what in formulas.extra:
        out.append(f"    _{name} = numpy.empty(_shape + ({M.shape[0]}, {M.shape[1]}))")
    out.append("    _code = numpy.zeros(_shape, dtype=numpy.int8)")
    out.append('    with numpy.errstate(divide="ignore", invalid="ignore", over="ignore"):')
    if formulas.factors:
        out.append(
            "        # validity factors, checked from the last code to the first so that the"
        )
        out.append("        # smallest code that applies is kept")
    for f in reversed(formulas.factors):
        out.append(f"        # {_comment_text(f.condition)}: {_comment_text(f.origin)}")
        out.append(
            f"        _code[abs({printer.doprint(f.factor)}) <= ZERO_TOLERANCE *"
            f" ({printer.doprint(f.scale)})] = {f.code}"
        )
    out.append("        # common subexpressions of every entry of K, L and N (sympy.cse)")
    for t, e in reps:
        out.append(f"        {t.name} = {printer.doprint(e)}")
    targets = [f"_K[..., {i}, {j}]" for i in range(m) for j in range(n)]
    targets += [f"_L[..., {i}, {j}]" for i in range(n) for j in range(pp)]
    targets.append("_N[...]")
    for name, M, _what in formulas.extra:
        targets += [f"_{name}[..., {i}, {j}]" for i in range(M.shape[0]) for j in range(M.shape[1])]
    for target, e in zip(targets, reduced, strict=True):
        out.append(f"        {target} = {printer.doprint(e)}")
    out.append("    _finite = (")
    out.append("        numpy.isfinite(_K).all(axis=(-2, -1))")
    out.append("        & numpy.isfinite(_L).all(axis=(-2, -1))")
    out.append("        & numpy.isfinite(_N)")
    for name, _M, _what in formulas.extra:
        out.append(f"        & numpy.isfinite(_{name}).all(axis=(-2, -1))")
    out.append("    )")
    out.append(f"    _code[(_code == 0) & ~_finite] = {CODE_NOT_FINITE}")
    out.append("    _bad = _code != 0")
    out.append("    if _bad.any():")
    out.append("        _K[_bad] = numpy.nan")
    out.append("        _L[_bad] = numpy.nan")
    out.append("        _N[_bad] = numpy.nan")
    for name, _M, _what in formulas.extra:
        out.append(f"        _{name}[_bad] = numpy.nan")
    out.append("        _why = {")
    for code in (CODE_UNCONTROLLABLE, CODE_UNOBSERVABLE, CODE_NO_REFERENCE_GAIN, CODE_NOT_FINITE):
        out.append(f"            {code}: {CODE_MEANINGS[code]!a},")
    out.append("        }")
    out.append("        _counts = numpy.bincount(_code.ravel(), minlength=5)")
    out.append("        _text = '; '.join(")
    out.append('            f"{_counts[_c]} {_why[_c]}" for _c in range(1, 5) if _counts[_c]')
    out.append("        )")
    out.append("        warnings.warn(")
    out.append(
        '            f"gains: {int(_bad.sum())} of {_bad.size} point(s) fail a validity condition'
        ' ({_text}); their gains are NaN (see VALIDITY)",'
    )
    out.append("            RuntimeWarning,")
    out.append("            stacklevel=2,")
    out.append("        )")
    extra_items = "".join(f', "{name}": _{name}' for name, _M, _w in formulas.extra)
    out.append(
        f'    return {{"K": _K, "L": _L, "reference_gain": _N if _shape else _N[()]{extra_items}}}'
    )
    out.append("")
    return {file_name: "\n".join(out).encode("ascii")}


# --------------------------------------------------------------------------
# Vectorised evaluation (schedules, self-check)
# --------------------------------------------------------------------------
def gain_evaluator(
    formulas: GainFormulas,
    parts: Sequence[str] = ("K", "L", "reference_gain"),
    *,
    validity: bool = True,
) -> Callable[[Mapping[str, np.ndarray]], GainValues]:
    """A vectorised function of the parameters that evaluates the closed forms.

    Parameters
    ----------
    formulas : GainFormulas
    parts : sequence of {"K", "L", "reference_gain"}
        What to compute (fewer parts, less work).
    validity : bool
        Also evaluate the validity factors and fill ``code`` (as the C function
        does); the gains are NaN wherever ``code`` is nonzero.

    Returns
    -------
    callable
        ``evaluate(values)`` with ``values`` mapping every parameter name to a
        float or an array (broadcast together); returns :class:`GainValues`.

    Notes
    -----
    Built with ``sympy.lambdify(..., "numpy", cse=..., dummify=True)``: the
    arguments are dummies, so no text of the design file reaches the
    generated function.  Integer powers are printed as products, the points
    are evaluated in blocks of :data:`BLOCK` so that temporaries stay in cache.
    """
    design = formulas.design
    symbols = [p.symbol for p in design.parameters]
    names = [p.name for p in design.parameters]
    exprs = formulas.entries(parts)
    sizes = []
    n, m, pp = formulas.shape
    for part in parts:
        shape_ = formulas.part_shape(part)
        sizes.append(1 if shape_ is None else shape_[0] * shape_[1])
    factor_exprs: list[sp.Expr] = []
    if validity:
        for f in formulas.factors:
            factor_exprs += [f.factor, f.scale]
    all_exprs = exprs + factor_exprs

    def cse(e):
        return common_subexpressions(e)

    func = sp.lambdify(
        symbols,
        all_exprs,
        modules="numpy",
        printer=PythonPrinter(),
        cse=cse,
        dummify=True,
        docstring_limit=0,
    )
    codes = [f.code for f in formulas.factors] if validity else []

    def evaluate(values: Mapping[str, np.ndarray]) -> GainValues:
        unknown = sorted(set(values) - set(names))
        if unknown:
            raise ValueError(f"unknown parameter {unknown[0]!r}")
        missing = [nm for nm in names if nm not in values]
        if missing:
            raise ValueError(f"missing parameter {missing[0]!r}")
        arrays = np.broadcast_arrays(*[np.asarray(values[nm], dtype=float) for nm in names])
        shape = arrays[0].shape if arrays else ()
        total = int(np.prod(shape, dtype=np.int64))
        flat = [np.ascontiguousarray(a).reshape(-1) for a in arrays]
        results = [np.empty(total) for _ in all_exprs]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for start in range(0, max(total, 1), BLOCK):
                stop = min(start + BLOCK, total)
                if stop <= start:
                    break
                got = func(*[a[start:stop] for a in flat])
                for k, g in enumerate(got):
                    results[k][start:stop] = g
        gains = {}
        offset = 0
        for part, size in zip(parts, sizes, strict=True):
            block = results[offset : offset + size]
            offset += size
            shape_ = formulas.part_shape(part)
            if shape_ is not None:
                gains[part] = np.stack(block, axis=-1).reshape(shape + tuple(shape_))
            else:
                gains[part] = block[0].reshape(shape)
        code = index = factor_values = None
        if validity:
            code = np.zeros(total, dtype=np.int8)
            index = np.full(total, -1, dtype=np.int16)
            pairs = results[offset:]
            for k in reversed(range(len(codes))):
                f, scale = pairs[2 * k], pairs[2 * k + 1]
                zero = np.abs(f) <= ZERO_TOLERANCE * scale
                code[zero] = codes[k]
                index[zero] = k
            factor_values = np.array(pairs[0::2]).reshape((len(codes),) + shape)
            index = index.reshape(shape)
            finite = np.ones(total, dtype=bool)
            for part in parts:
                g = gains[part].reshape(total, -1)
                finite &= np.isfinite(g).all(axis=1)
            code[(code == CODE_OK) & ~finite] = CODE_NOT_FINITE
            bad = code != CODE_OK
            if bad.any():
                for part in parts:
                    gains[part].reshape(total, -1)[bad] = np.nan
            code = code.reshape(shape)
        return GainValues(
            K=gains.get("K"),
            L=gains.get("L"),
            reference_gain=gains.get("reference_gain"),
            code=code,
            factor_index=index,
            factor_values=factor_values,
            extra={k: v for k, v in gains.items() if k not in ("K", "L", "reference_gain")},
        )

    return evaluate


# --------------------------------------------------------------------------
# The command
# --------------------------------------------------------------------------
#: Relative agreement of the exported formulas with ``derive`` at the nominal values.
SELF_CHECK_TOLERANCE = 1e-9


def _extra_reference(d: Derivation) -> dict[str, np.ndarray]:
    """derive's checked values of the extra parts."""
    out: dict[str, np.ndarray] = {}
    if getattr(d, "integral", None) is not None:
        out["K_integral"] = d.integral.K_augmented
    ro = getattr(d, "reduced_observer", None)
    if ro is not None:
        out.update(
            Ke=ro.Ke,
            A_hat=ro.observer_matrix,
            B_hat=ro.output_input,
            F_hat=ro.control_input,
            estimate_from_state=ro.estimate_from_state,
            estimate_from_output=ro.estimate_from_output,
        )
    return out


def _self_check(d: Derivation, formulas: GainFormulas) -> float:
    """Largest relative difference between the cse'd formulas and derive's checked values."""
    evaluate = gain_evaluator(formulas, formulas.parts)
    got = evaluate({p.name: float(p.value) for p in d.design.parameters})
    assert d.reference is not None
    if got.code is not None and int(got.code) != CODE_OK:
        return float("inf")
    diffs = [
        relative_difference(got.K, d.K.value),
        relative_difference(got.L, d.L.value),
        relative_difference(np.atleast_1d(got.reference_gain), d.reference.value.ravel()),
    ]
    reference = _extra_reference(d)
    for name, value in (got.extra or {}).items():
        diffs.append(relative_difference(value, reference[name]))
    return max(diffs)


#: The generated digital controller must reproduce the Python simulation of the sampled loop
#: to this relative difference (same arithmetic, same order: in practice 0).
DIGITAL_SELF_CHECK_TOLERANCE = 1e-12


def digital_controller_files(
    d: Derivation, *, lang: str, form: str | None = None
) -> tuple[dict[str, bytes], float, str]:
    """The digital controller of a derivation as C99 or Python, and its self-check.

    Returns ``(files, difference, form)``: the generated Python counterpart is run on the
    measurements of :func:`symbolic.verification.sampled_data.sampled_data_study` (with the design's input
    limit) and ``difference`` is its largest relative difference from the study's inputs.

    Raises
    ------
    DesignFileError
        The design has no ``[discrete] sample_time``, or the form is not available.
    """
    from ..runtime.errors import RenderError
    from ..verification.sampled_data import sampled_data_study
    from .digital_code import c_controller_files, python_controller_source

    design = d.design
    dc = getattr(d, "discrete", None)
    if dc is None:
        raise DesignFileError(
            "missing: the digital controller needs a [discrete] table with sample_time (seconds)",
            design.path,
            "discrete.sample_time",
        )
    u_max = design.simulation.u_max
    name = f"{c_identifier_prefix(design)}_controller"
    title = design.title or design.slug
    try:
        py = python_controller_source(dc, name=name, form=form, u_max=u_max, title=title)
        form = form or dc.default_form
        files = (
            c_controller_files(dc, name=name, form=form, u_max=u_max, title=title)
            if lang == "c"
            else py
        )
    except RenderError as exc:
        raise DesignFileError(str(exc), design.path, "--form") from exc
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        study = sampled_data_study(d, dc, form=form, u_max=u_max)
    # The self-check runs the generated module built without the design's title: that code
    # is ours alone (numbers, and names made of [A-Za-z0-9_]), no text from the design file
    # reaches exec, and it differs from the written file only in its docstring.
    checked = python_controller_source(dc, name=name, form=form, u_max=u_max, title="")
    namespace: dict = {}
    exec(compile(next(iter(checked.values())), "<generated controller>", "exec"), namespace)  # noqa: S102
    state = namespace["reset"]()
    start = np.asarray(_matched(dc, form, design), dtype=float)
    state[:] = start.tolist()
    r = float(design.simulation.reference)
    ys = study.sampled_output
    got = np.array([namespace["step"](state, y[0] if y.size == 1 else list(y), r) for y in ys])
    diff = relative_difference(got, study.controls[:, 0])
    return files, diff, form


def _matched(dc, form, design) -> np.ndarray:
    from ..verification.sampled_data import matched_state

    n = dc.Phi.shape[0]
    x0 = design.simulation.initial_state or [0.0] * n
    return matched_state(dc, form, x0)


def run_export(
    design: Design,
    *,
    lang: str,
    out_dir: str | Path,
    digital: bool = False,
    form: str | None = None,
) -> int:
    """Derive, then write the gain formulas, or the digital controller, as C99 or Python.

    Parameters
    ----------
    design : Design
    lang : {"c", "python"}
    out_dir : str or Path
        Created if missing; files are published atomically.
    digital : bool
        Write the digital controller (``[discrete] sample_time``): difference equations with
        fixed coefficients, ``<slug>_controller.{h,c}`` or ``<slug>_controller.py``.
        Otherwise the closed-form gains in the parameters (``<slug>_gains.*``).
    form : {"current", "predictor", "reduced"}, optional
        The digital controller's observer (default: "reduced" with ``[observer] kind =
        "reduced"``, else "current").  Only with ``digital``.

    Returns
    -------
    int
        0 when the exported code reproduces ``derive``'s values (gains: relative difference
        <= 1e-9 at the nominal parameters; digital controller: the generated step function
        against the sampled-data simulation, <= 1e-12) and every check of the derivation
        passed; else 1, and nothing is written (code that closes a loop around a machine is
        exported only when every check passes).

    Raises
    ------
    DesignFileError
        No closed form to export (several inputs or outputs, symbolic budget exhausted, no
        reference gain), no ``[discrete] sample_time`` with ``digital``, an unknown language
        or form.
    RenderError
        The files cannot be written.
    """
    if lang not in ("c", "python"):
        raise DesignFileError(
            f"unknown language {lang!r}: expected 'c' or 'python'", design.path, "--lang"
        )
    if form is not None and not digital:
        raise DesignFileError(
            "--form chooses the digital controller's observer: use it with --digital",
            design.path,
            "--form",
        )
    if digital and design.discrete is None:
        raise DesignFileError(
            "missing: --digital needs a [discrete] table with sample_time (seconds)",
            design.path,
            "discrete.sample_time",
        )
    d = derive(design)
    if digital:
        files, diff, form = digital_controller_files(d, lang=lang, form=form)
        tolerance = DIGITAL_SELF_CHECK_TOLERANCE
        what = f"generated {form} controller vs the sampled-data simulation (relative)"
        omitted: tuple[str, ...] = ()
        factors: tuple[ValidityFactor, ...] = ()
    else:
        formulas = gain_formulas(d)
        files = c_sources(formulas) if lang == "c" else python_source(formulas)
        diff = _self_check(d, formulas)
        tolerance = SELF_CHECK_TOLERANCE
        what = "exported formulas at the nominal values vs derive (relative)"
        omitted = formulas.omitted
        factors = formulas.factors
    ok = diff <= tolerance
    print(f"{'pass' if ok else 'FAIL'}  {what}: {diff:.2e} <= {tolerance:g}")
    if not d.passed:
        print("FAIL  some checks of the derivation failed: run `gainsmith derive` for details")
    if not (ok and d.passed):
        print(
            "nothing written: code for a loop around a machine is exported only when every check passes"
        )
        return 1
    from ..runtime.publish import publish

    for path in publish(files, Path(out_dir)):
        print(f"wrote {path}")
    for f in factors:
        print(
            f"  the gains do not exist where {f.condition}: returns {f.code} ({CODE_WORDS[f.code]})"
        )
    for text in omitted:
        print(f"  not exported: {text}")
    return 0
