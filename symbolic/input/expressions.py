"""Safe reading of the numbers, expressions and poles written in a design file.

A design file is data.  Its matrix entries are numbers or short expression
strings over declared parameters (``"-c/m"``, ``"sqrt(g/l)"``,
``"exp(-a*T)"``) and its poles are real or complex numbers written as strings
(``"-4+3j"``).  Nothing in such a string may run code, read a file, or keep the
tool busy for long, so this module never hands text to ``eval``, ``exec``,
``sympify`` or ``parse_expr`` (each of them evaluates Python).  Instead the text
is parsed by :func:`ast.parse` into a syntax tree, every node of which is checked
against a short whitelist, and the SymPy object is built directly from the
accepted nodes.

Limits are checked before the corresponding work is done:

* the text has at most 2000 characters, all of them printable ASCII (Python
  folds some non-ASCII letters into ASCII ones, e.g. ``𝑘`` into ``k``, which
  would let a lookalike name pass unnoticed);
* brackets nest at most 50 deep, the syntax tree nests at most 50 deep (a chain
  ``a + b + c`` or ``a*b/c`` counts as one level) and has at most 500
  expression nodes;
* a numeric literal is plain decimal with at most 17 significant digits and a
  magnitude between 1e-15 and 1e15 (or zero); it is converted exactly from its
  decimal text, never through a binary float;
* an exponent is a number, optionally signed, or a ratio of two integers in
  parentheses (``(1/3)``), with magnitude at most 10 and denominator at most 10;
* every numeric constant that SymPy folds while the expression is built
  (a pure number, or the numeric coefficient of a product or a sum) lies
  between 1e-30 and 1e30 in magnitude and has numerator and denominator of at
  most 512 bits; the finished expression is checked throughout the same way;
* a number under a root or fractional power is at most 1e30 (SymPy factors it);
* the degree of the expression is at most 30, where parameters, ``pi`` and
  other irrational values count one, so neither ``x**1000`` nor ``pi**1000``
  can be written with nested powers;
* an upper bound on the number of terms the expression would have if fully
  expanded is at most 300 (several SymPy routines expand internally);
* at most 20 function calls and fractional powers;
* function arguments are guarded (see the comment above ``_GROWTH_FUNCTIONS``
  in :mod:`symbolic.input.guards` for the measurements): ``exp``, ``sinh``,
  ``cosh``, ``tanh``, ``sin``, ``cos`` and ``tan`` may not be applied to
  anything containing ``exp``, ``sinh`` or ``cosh`` (``exp(exp(1e15))`` needs
  about 1e15 bits to evaluate, and SymPy evaluates numerically inside later
  operations); ``exp`` may not contain ``log`` (SymPy turns ``exp(n*log(k))``
  into the integer ``k**n``);
  ``sinh``, ``cosh`` and ``tanh`` may not contain any function call; and the
  arguments of ``sinh``, ``cosh``, ``tanh`` and ``abs`` must be evidently real,
  i.e. contain no root or logarithm of a quantity that may be negative
  (``cosh(T*sqrt(g/l))`` is fine, ``tanh(sqrt(1 - zeta**2))`` is refused
  unless SymPy can tell that ``1 - zeta**2`` is nonnegative).

The expression is built over stand-ins for the parameters that are only known
to be real, functions of anything but a rational number or a rational multiple
of ``pi`` are kept unevaluated, and the caller's symbols are put in at the end
without re-evaluation (see :func:`parse_expression`): SymPy's sign questions on
positive parameters are what made innocent-looking text slow.  Nothing here
calls ``evalf``; the guards keep the numerical evaluation that SymPy does inside
its own assumption queries cheap.  Division by zero and
values outside a function's real domain (``log(0)``, ``sqrt(-1)``,
``(-8)**(1/3)``) are errors, so the result is free of ``nan``, ``zoo``, ``oo``
and the imaginary unit.  Two things are left to the caller, who knows the
parameter values: a root or logarithm of a quantity whose sign SymPy cannot
tell (``sqrt(k/m - c)``) is accepted as written, and a divisor that is zero
without SymPy folding it to ``0`` (``sin(1)**2 + cos(1)**2 - 1``) is not
detected, since deciding either needs numerical evaluation.

Together these keep every SymPy step small: typical entries take 1 to 5 ms,
and the slowest of 18 000 random grammar-shaped expressions took 0.1 s of CPU
time here (after SymPy's one-time lazy imports on the first call).  The limit values
are engineering judgement (common practice, no source), except the 17
significant digits (see :func:`parse_number`).
"""

from __future__ import annotations

import keyword
import math
import numbers
import re
from collections.abc import Callable, Mapping
from types import MappingProxyType

import sympy
from sympy.core.sympify import SympifyError
from sympy.polys.polyerrors import BasePolynomialError

from ..runtime.errors import ExpressionError
from .builder import ExpressionBuilder, SymbolsMappingError, Vocabulary
from .caps import UNDEFINED, check_all_constants, is_not_real
from .literals import MAX_LITERAL_EXPONENT10, PoleReader, signed_literal_value
from .syntax import check_text, check_tree_size, parse_tree, quote, type_name

__all__ = [
    "ALLOWED_CONSTANTS",
    "ALLOWED_FUNCTIONS",
    "NAME_PATTERN",
    "RESERVED_NAMES",
    "check_name",
    "parse_expression",
    "parse_number",
    "parse_pole",
]

MAX_NAME_LENGTH = 64

NAME_PATTERN: re.Pattern[str] = re.compile(r"\A[A-Za-z][A-Za-z0-9_]*\Z")
"""A parameter name: an ASCII letter, then ASCII letters, digits or ``_``.

Anchored with ``\\A`` and ``\\Z`` (not ``^``/``$``, which would accept a trailing
newline), so ``NAME_PATTERN.match(name)`` is a full match.
"""

ALLOWED_FUNCTIONS: Mapping[str, Callable[[sympy.Expr], sympy.Expr]] = MappingProxyType(
    {
        "sqrt": sympy.sqrt,
        "exp": sympy.exp,
        "log": sympy.log,  # natural logarithm
        "sin": sympy.sin,
        "cos": sympy.cos,
        "tan": sympy.tan,
        "atan": sympy.atan,
        "sinh": sympy.sinh,
        "cosh": sympy.cosh,
        "tanh": sympy.tanh,
        "abs": sympy.Abs,
    }
)
"""The functions an expression may call, each with exactly one argument.

``log`` is the natural logarithm; angles are in radians.
"""

ALLOWED_CONSTANTS: Mapping[str, sympy.Expr] = MappingProxyType({"pi": sympy.pi})
"""The named constants an expression may use: only ``pi``.

Euler's number is written ``exp(1)``; a bare ``e`` is too easily read as a
parameter (or, in the memo, a parameter as Euler's number), so it is neither a
constant nor a permitted parameter name.
"""

_RESERVED_REASONS: dict[str, str] = {
    "s": "it is the Laplace variable",
    "z": "it is the z-transform variable",
    "I": "it is the imaginary unit in SymPy",
    "E": "it is Euler's number in SymPy",
    "e": "it would read as Euler's number, which is written exp(1)",
    "oo": "it is infinity in SymPy",
    "zoo": "it is complex infinity in SymPy",
    "nan": "it means not-a-number",
    "inf": "it means infinity",
}

RESERVED_NAMES: frozenset[str] = frozenset(
    set(ALLOWED_FUNCTIONS) | set(ALLOWED_CONSTANTS) | set(keyword.kwlist) | set(_RESERVED_REASONS)
)
"""Names that :func:`check_name` refuses as parameter names."""

# Errors that SymPy or Python may raise while a (bounded) expression is built;
# they are turned into ExpressionError so that nothing else escapes.
_WRAPPED_ERRORS = (
    ArithmeticError,
    MemoryError,
    RecursionError,
    NotImplementedError,
    OverflowError,
    SyntaxError,
    TypeError,
    ValueError,
    SympifyError,
    BasePolynomialError,
)

_VOCABULARY = Vocabulary(ALLOWED_FUNCTIONS, ALLOWED_CONSTANTS, MappingProxyType(_RESERVED_REASONS))


def check_name(name: str) -> None:
    """Check that ``name`` may be used as a parameter name.

    Parameters
    ----------
    name : str
        The proposed name, e.g. ``"m_c"``.

    Raises
    ------
    ExpressionError
        If ``name`` is not a string, is longer than 64 characters, does not
        match :data:`NAME_PATTERN` (an ASCII letter, then ASCII letters, digits
        or underscores), contains a double underscore, or is reserved: an
        allowed function or constant, a Python keyword, ``s`` and ``z`` (the
        transform variables), ``I``, ``E``, ``e``, ``oo``, ``zoo``, ``nan``,
        ``inf``.

    Notes
    -----
    Names reach the memo through ``sympy.latex``, which prints a symbol name
    as written except that ``_`` starts a subscript and ``__`` a superscript
    (``k__2`` would print as :math:`k^{2}`, a power); hence plain identifiers
    and no double underscore.  Non-ASCII is refused because Python folds
    identifiers to NFKC, so ``𝑘`` and ``k`` would be the same name [1]_.

    References
    ----------
    .. [1] Python Software Foundation, *The Python Language Reference*,
       release 3.11, section 2.3 "Identifiers and keywords" (NFKC
       normalisation of identifiers); M. von Löwis, PEP 3131 "Supporting
       Non-ASCII Identifiers", 2007.

    Examples
    --------
    >>> check_name("m_c")
    >>> check_name("lambda")
    Traceback (most recent call last):
    ...
    symbolic.runtime.errors.ExpressionError: the name 'lambda' is reserved: it is a Python keyword
    """
    if not isinstance(name, str):
        raise ExpressionError(f"a name must be a string, got {type_name(name)}")
    if len(name) > MAX_NAME_LENGTH:
        raise ExpressionError(
            f"the name {quote(name)} is too long ({len(name)} characters; "
            f"at most {MAX_NAME_LENGTH})"
        )
    if NAME_PATTERN.match(name) is None:
        raise ExpressionError(
            f"the name {quote(name)} is not a plain identifier (an ASCII letter, then ASCII "
            "letters, digits or underscores)"
        )
    if "__" in name:
        raise ExpressionError(
            f"the name {quote(name)} contains a double underscore (it would print as a superscript)"
        )
    if name in RESERVED_NAMES:
        if name in ALLOWED_FUNCTIONS:
            reason = "it is a function"
        elif name in ALLOWED_CONSTANTS:
            reason = "it is a constant"
        elif name in _RESERVED_REASONS:
            reason = _RESERVED_REASONS[name]
        else:
            reason = "it is a Python keyword"
        raise ExpressionError(f"the name '{name}' is reserved: {reason}")


def parse_number(value: object) -> sympy.Expr:
    """Convert a design-file number to an exact SymPy number.

    Parameters
    ----------
    value : int, float or str
        A TOML integer or float, or a string holding a plain decimal number
        with an optional sign (``"-2.5"``, ``"1e-3"``).

    Returns
    -------
    sympy.Integer or sympy.Rational
        The exact value.  A float is converted from its shortest decimal
        representation (``repr``), so ``0.1`` gives ``1/10`` rather than the
        binary value ``3602879701896397/36028797018963968`` [1]_.

    Raises
    ------
    ExpressionError
        For a bool, nan or infinity, a magnitude above 1e15 or nonzero below
        1e-15, more than 17 significant digits [2]_, a string that is not a
        plain decimal number, or any other type.

    References
    ----------
    .. [1] D. Goldberg, "What Every Computer Scientist Should Know About
       Floating-Point Arithmetic", *ACM Computing Surveys* 23(1), 1991,
       section 1.1 (0.1 has no exact binary representation).
    .. [2] ISO/IEC 9899:2018 (C17), 5.2.4.2.2: ``DBL_DECIMAL_DIG`` = 17 for
       IEEE 754 binary64, the significant decimal digits that suffice to write
       any double so that it reads back unchanged (``repr`` of a float uses at
       most 17).  (``DBL_DIG`` = 15 is the other direction: decimals of 15
       digits survive a trip through a double.)

    Examples
    --------
    >>> parse_number(0.1)
    1/10
    >>> parse_number("-1.5e1")
    -15
    """
    if isinstance(value, bool):
        raise ExpressionError("expected a number, got a boolean")
    if isinstance(value, numbers.Integral):
        integer = int(value)
        if abs(integer) > 10**MAX_LITERAL_EXPONENT10:
            raise ExpressionError(
                f"number is too large (magnitude above 1e{MAX_LITERAL_EXPONENT10})"
            )
        text = str(integer)
        return signed_literal_value(text, text)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ExpressionError(f"expected a finite number, got {value!r}")
        text = repr(float(value))
        return signed_literal_value(text, text)
    if isinstance(value, str):
        text = check_text(value, "number")
        return signed_literal_value(text, text)
    raise ExpressionError(f"expected a number, got {type_name(value)}")


def parse_expression(text: str | int | float, symbols: Mapping[str, sympy.Symbol]) -> sympy.Expr:
    """Build the SymPy expression written in a design-file entry.

    Parameters
    ----------
    text : str, int or float
        A number (handled by :func:`parse_number`) or an expression over the
        declared parameters: decimal numbers, names, ``+ - * / **``, unary
        ``+``/``-``, parentheses, the constant ``pi`` and calls of the
        functions in :data:`ALLOWED_FUNCTIONS` with one argument.  Operator
        precedence and associativity are Python's [1]_: ``-x**2`` is
        ``-(x**2)`` and ``a/b/c`` is ``(a/b)/c``.
    symbols : Mapping[str, sympy.Symbol]
        The declared parameters, created by the caller with their assumptions
        (e.g. ``real=True, positive=True``); these objects are used as given.

    Returns
    -------
    sympy.Expr
        The expression as written, with no ``nan``, ``zoo``, ``oo`` or
        imaginary unit in it.  Numbers are exact rationals; nothing is
        evaluated numerically.

    Raises
    ------
    ExpressionError
        If the text breaks the grammar or a limit listed in the module notes,
        names an undeclared or reserved parameter, divides by zero, leaves a
        function's domain (``log(0)``) or is not real (``sqrt(-1)``).  No other
        exception escapes for any ``str`` input.
    TypeError
        If ``symbols`` maps a used name to something other than a
        ``sympy.Symbol`` (a programming error, not a design-file error).

    Notes
    -----
    The text is parsed with :func:`ast.parse` and checked node by node against
    a whitelist; no Python code is evaluated.  Exponents must be numbers (see
    module notes), so ``x**y`` and ``9**9**9`` are refused.

    The expression is built as written.  SymPy's automatic evaluation asks
    sign questions that can take seconds (measured here: ``abs``, ``log``,
    ``sin`` or ``sqrt(c*P)`` of a degree-8 polynomial ``P`` in a positive
    symbol took 0.2 to 0.5 s, a degree-100 one 22 s), so the expression is
    first built over stand-ins that are only known to be real, functions of
    non-numeric arguments are not evaluated, and the caller's symbols are put
    in at the end without re-evaluation.  Simplifications that need a
    parameter's sign are therefore not made: with ``m`` positive,
    ``sqrt(m**2)`` becomes ``Abs(m)`` (true for any real ``m``) but not ``m``,
    ``abs(m)`` stays ``Abs(m)`` and ``sqrt(g/l)`` stays ``sqrt(g/l)``;
    ``sympy.simplify`` makes them later if wanted.  Functions of rational
    numbers and rational multiples of ``pi`` are evaluated (``sin(pi/6)`` is
    ``1/2``); other functions are kept as written (``abs(sqrt(2) - 2)``).

    References
    ----------
    .. [1] Python Software Foundation, *The Python Language Reference*,
       release 3.11, sections 6.5 "The power operator" and 6.17 "Operator
       precedence".

    Examples
    --------
    >>> import sympy
    >>> m, c = sympy.symbols("m c", positive=True)
    >>> parse_expression("-c/m", {"m": m, "c": c})
    -c/m
    >>> parse_expression("1e-3*m**(1/2)", {"m": m})
    sqrt(m)/1000
    >>> parse_expression("sqrt(m**2) + sin(pi/6)", {"m": m})
    Abs(m) + 1/2
    """
    if isinstance(text, bool):
        raise ExpressionError("expected a number or an expression, got a boolean")
    if isinstance(text, int | float):
        return parse_number(text)
    if not isinstance(text, str):
        raise ExpressionError(f"expected a number or an expression, got {type_name(text)}")
    return _build_expression(text, symbols)


def _build_expression(text: str, symbols: Mapping[str, sympy.Symbol]) -> sympy.Expr:
    """Check, parse and build ``text`` (the steps of :func:`parse_expression`).

    An error SymPy or Python raises on the way becomes an :class:`ExpressionError`.
    """
    try:
        stripped = check_text(text, "expression")
        body = parse_tree(stripped, "expression")
        check_tree_size(body, stripped, "expression")
        builder = ExpressionBuilder(stripped, symbols, _VOCABULARY)
        result = builder.build(body).expr
        check_all_constants(result, stripped)
        if result.has(*UNDEFINED):
            raise ExpressionError(
                f"the expression is undefined (infinite or not a number): {quote(stripped)}"
            )
        if is_not_real(result):
            raise ExpressionError(
                f"the expression is not real (it contains an imaginary part): {quote(stripped)}"
            )
        return builder.substitute_symbols(result)
    except (ExpressionError, SymbolsMappingError):
        raise
    except _WRAPPED_ERRORS as error:
        raise ExpressionError(
            f"the expression could not be built ({type_name(error)}): {quote(text)}"
        ) from error


def parse_pole(text: str | int | float) -> sympy.Expr:
    """Convert a pole written in a design file to an exact SymPy number.

    Parameters
    ----------
    text : str, int or float
        A number, or a string of one of the forms ``real``, ``imag j`` or
        ``real ± imag j``, with decimal parts and an optional sign in front:
        ``"-2"``, ``"-3j"``, ``"-4+3j"``, ``"-1.5e1 - 2.5j"``.  ``J`` is
        accepted for ``j`` as in Python [1]_.

    Returns
    -------
    sympy.Expr
        ``re + im*I`` with exact rational ``re`` and ``im``, e.g. ``-4 + 3*I``.
        Whether the pole is stable is for the caller to check.

    Raises
    ------
    ExpressionError
        For any other form (``"1j*2j"``, ``"-4+3k"``, ``"3j+4"``), for a part
        breaking the literal limits of :func:`parse_number`, or for a
        non-number.

    References
    ----------
    .. [1] Python Software Foundation, *The Python Language Reference*,
       release 3.11, section 2.4.7 "Imaginary literals".

    Examples
    --------
    >>> parse_pole("-4+3j")
    -4 + 3*I
    >>> parse_pole("-1.5e1 - 2.5j")
    -15 - 5*I/2
    """
    if isinstance(text, bool):
        raise ExpressionError("expected a pole, got a boolean")
    if isinstance(text, int | float):
        return parse_number(text)
    if not isinstance(text, str):
        raise ExpressionError(f"expected a pole as a number or a string, got {type_name(text)}")
    try:
        stripped = check_text(text, "pole")
        body = parse_tree(stripped, "pole")
        check_tree_size(body, stripped, "pole")
        pole = PoleReader(stripped).read(body)
    except ExpressionError:
        raise
    except _WRAPPED_ERRORS as error:
        raise ExpressionError(
            f"the pole could not be read ({type_name(error)}): {quote(text)}"
        ) from error
    return pole
