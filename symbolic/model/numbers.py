"""Numbers and poles as text, written the way a design file writes them.

A design file gives poles as Python-style complex numbers (``"-2+3j"``,
``"-2-3j"``, ``"-4"``; see :func:`symbolic.input.expressions.parse_pole`), and
every plain-text place where gainsmith shows a pole to a person (the terminal
reports, notes, warnings, error messages, explanations, comments of exported
code) prints it back in that notation through :func:`format_pole`, so that
the text can be pasted into a design file again.  LaTeX typesets the same
parts (:func:`pole_parts`) in math mode (:func:`symbolic.render.mathtex.pole_latex`).

A part of a pole that is smaller than half a unit in the last significant
figure shown is left out: the imaginary part ``1e-17`` that rounding leaves on
a real eigenvalue prints as nothing (``-4``, not ``-4+1e-17j``), and a real
part of that size next to a large imaginary part prints as nothing
(``3j``).  What is printed is then the pole to the printed precision: each
printed part is within half a unit of its last figure, and each part left out
is below half a unit of the last figure of ``|z|``.

This module imports nothing of gainsmith's and nothing outside the standard
library, so any module may use it.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

__all__ = ["ROUND_TRIP_DIGITS", "format_number", "format_pole", "format_poles", "pole_parts"]

#: Significant decimal digits that write any IEEE 754 binary64 number so that it
#: reads back as the same double (DBL_DECIMAL_DIG = 17, ISO/IEC 9899:2018,
#: 5.2.4.2.2).  ``digits=None`` below prints the shortest such text (``repr``).
ROUND_TRIP_DIGITS = 17


def format_number(x: float, digits: int | None = 6) -> str:
    """A real number as text: ``digits`` significant figures, no trailing noise.

    Parameters
    ----------
    x : float
        The number (anything ``float`` accepts).
    digits : int or None
        Significant figures (``%g`` style, so ``1e-07`` and ``1.5e+06`` for
        very small and large numbers).  ``None`` gives the shortest text that
        reads back as the same double (Python's ``repr``), without a trailing
        ``.0``.

    Returns
    -------
    str
        ``"0"`` for zero of either sign.

    Examples
    --------
    >>> format_number(2.0), format_number(-0.1 - 0.2), format_number(0.1 + 0.2, None)
    ('2', '-0.3', '0.30000000000000004')
    >>> format_number(1234567.0)
    '1.23457e+06'
    """
    x = float(x)
    if x == 0:
        return "0"
    if digits is None:
        text = repr(x)
        return text[:-2] if text.endswith(".0") else text
    return f"{x:.{digits}g}"


def pole_parts(z: complex, digits: int | None = 6) -> tuple[str | None, str | None]:
    """The real part and the signed imaginary part of a pole as text, or None where too small.

    Parameters
    ----------
    z : complex
        The pole (a Python or NumPy complex or float, or a SymPy number).
    digits : int or None
        Significant figures, as in :func:`format_number`.

    Returns
    -------
    (str or None, str or None)
        The real part and the imaginary part (with its sign, without ``j``).
        A part is None when its magnitude is below half a unit in the last
        figure shown of ``|z|``, i.e. below ``0.5·10^(1−digits)·|z|``
        (``digits=None`` counts as 17, see :data:`ROUND_TRIP_DIGITS`); both
        are None for zero.

    Examples
    --------
    >>> pole_parts(-2 + 3j), pole_parts(-4 + 1e-17j), pole_parts(-2e-18 - 5j)
    (('-2', '3'), ('-4', None), (None, '-5'))
    """
    z = complex(z)
    shown = ROUND_TRIP_DIGITS if digits is None else digits
    if math.isfinite(z.real) and math.isfinite(z.imag):
        floor = 0.5 * 10.0 ** (1 - shown) * abs(z)
        keep_real = z.real != 0 and abs(z.real) >= floor
        keep_imag = z.imag != 0 and abs(z.imag) >= floor
    else:
        keep_real, keep_imag = z.real != 0 or z.imag == 0, z.imag != 0
    real = format_number(z.real, digits) if keep_real else None
    imag = format_number(z.imag, digits) if keep_imag else None
    return real, imag


def format_pole(z: complex, digits: int | None = 6) -> str:
    """A pole in the notation of a design file: ``-2+3j``, ``-2-3j``, ``-4``, ``3j``.

    Parameters
    ----------
    z : complex
        The pole (a Python or NumPy complex or float, or a SymPy number).
    digits : int or None
        Significant figures of each part, as in :func:`format_number`;
        ``None`` prints each part so that it reads back as the same double.

    Returns
    -------
    str
        No spaces; an imaginary part too small to show at ``digits`` figures
        (round-off on a real pole) is left out, see :func:`pole_parts`.  The
        text reads back with :func:`symbolic.input.expressions.parse_pole` (within
        its literal limits) as the pole to the printed precision.

    Examples
    --------
    >>> format_pole(-2 + 3j), format_pole(-2 - 3j), format_pole(-4 + 1e-17j)
    ('-2+3j', '-2-3j', '-4')
    >>> format_pole(complex(-1 / 3, 2 / 3), 4)
    '-0.3333+0.6667j'
    """
    real, imag = pole_parts(z, digits)
    if imag is None:
        return real if real is not None else "0"
    if real is None:
        return f"{imag}j"
    sign = "" if imag.startswith("-") else "+"
    return f"{real}{sign}{imag}j"


def format_poles(poles: Iterable[complex], digits: int | None = 6, separator: str = ", ") -> str:
    """Poles in the notation of a design file, in the order given: ``-2+3j, -2-3j, -4``.

    Examples
    --------
    >>> format_poles([-2 + 3j, -2 - 3j, -4.0])
    '-2+3j, -2-3j, -4'
    """
    return separator.join(format_pole(z, digits) for z in poles)
