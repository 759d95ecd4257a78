"""Names and expression printers shared by the C99 and Python code generators.

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
.. [1] ISO/IEC 9899:1999, *Programming languages - C*, 6.4.1 (keywords),
   7.26 (future library directions: reserved macro names), 7.12 (<math.h>:
   ``isfinite``, ``fabs``, ``pow``, ``sqrt``, ``cbrt``).
.. [2] SymPy Development Team, *SymPy 1.14 documentation*, "Code Generation"
   (``sympy.printing.c.C99CodePrinter``, ``sympy.printing.numpy.NumPyPrinter``).
"""

from __future__ import annotations

import builtins
import re
from collections.abc import Mapping, Sequence

import sympy as sp
from sympy.printing.c import C99CodePrinter
from sympy.printing.numpy import NumPyPrinter
from sympy.printing.precedence import PRECEDENCE

from ..model.design import Design
from .gain_formulas import CODE_NAMES

__all__ = [
    "MAX_EXPANDED_POWER",
    "CPrinter",
    "PythonPrinter",
    "c_identifier_prefix",
    "c_member_names",
    "python_local_names",
]

#: x**k with 2 <= |k| <= this is printed as a product (x*x*x): exact for k = 2,
#: and much faster than pow() / numpy.power for small k.
MAX_EXPANDED_POWER = 8


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
    return {f"{up}_{b}" for b in base | set(CODE_NAMES.values())}


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


class CPrinter(C99CodePrinter):
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
