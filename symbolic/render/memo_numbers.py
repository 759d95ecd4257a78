"""Numbers for the memo's two formats: LaTeX math and plain Unicode Markdown.

:func:`tex_number` and :func:`md_number` are the ``tex_number`` and ``md_number`` filters
of the template environments (:mod:`symbolic.render.formats`); their results are marked
trusted (:class:`~symbolic.render.texsafe.TrustedLatex`,
:class:`~symbolic.render.texsafe.TrustedMarkdown`) since they hold nothing but digits,
signs and our own markup.
"""

from __future__ import annotations

import math
import numbers

from ..model.numbers import format_pole, pole_parts
from ..runtime.errors import RenderError
from .texsafe import TrustedLatex, TrustedMarkdown

__all__ = ["md_number", "tex_number"]


def _split_number(value: object, digits: int, function: str) -> tuple[complex | float, int]:
    if isinstance(digits, bool) or not isinstance(digits, int) or digits < 1:
        raise RenderError(f"{function}: digits must be a positive integer, got {digits!r}")
    if isinstance(value, bool) or not isinstance(value, numbers.Number):
        raise RenderError(f"{function} expects a number, got {type(value).__name__}")
    if isinstance(value, numbers.Real):
        return float(value), digits
    if isinstance(value, numbers.Complex):
        return complex(value), digits
    raise RenderError(f"{function} cannot format {type(value).__name__}")


def _real_parts(x: float, digits: int) -> tuple[str, str, str | None]:
    """Sign, mantissa and decimal exponent (None when not in scientific form) of x."""
    if math.isnan(x):
        return "", "nan", None
    if math.isinf(x):
        return ("-" if x < 0 else ""), "inf", None
    text = f"{x:.{digits}g}"
    sign = ""
    if text.startswith("-"):
        sign, text = "-", text[1:]
    if text.strip("0.") == "":
        sign = ""  # no "-0"
    mantissa, _, exponent = text.partition("e")
    return sign, mantissa, (str(int(exponent)) if exponent else None)


def _tex_real(x: float, digits: int) -> str:
    sign, mantissa, exponent = _real_parts(x, digits)
    if mantissa == "nan":
        return r"\mathrm{NaN}"
    if mantissa == "inf":
        return sign + r"\infty"
    if exponent is None:
        return sign + mantissa
    return rf"{sign}{mantissa}\times10^{{{exponent}}}"


def _tex_text(text: str) -> str:
    """A number printed by :func:`symbolic.model.numbers.format_number`, for math mode."""
    sign = ""
    if text.startswith("-"):
        sign, text = "-", text[1:]
    if text == "nan":
        return r"\mathrm{NaN}"
    if text == "inf":
        return sign + r"\infty"
    mantissa, _, exponent = text.partition("e")
    if not exponent:
        return sign + mantissa
    return rf"{sign}{mantissa}\times10^{{{int(exponent)}}}"


def tex_number(x: object, digits: int = 6) -> TrustedLatex:
    """Format a number for LaTeX math mode.

    Parameters
    ----------
    x : real or complex number
        Python, NumPy or SymPy number.
    digits : int, optional
        Significant digits (``format(x, ".{digits}g")``), by default 6.

    Returns
    -------
    TrustedLatex
        For math mode, e.g. ``1.23\\times10^{-5}``; ``\\infty``, ``-\\infty``,
        ``\\mathrm{NaN}``; a complex number (a pole) ``a + b\\,\\mathrm{j}`` (``j`` for the
        imaginary unit as in control engineering), with the parts of
        :func:`symbolic.model.numbers.format_pole`: a part too small to show at ``digits``
        figures is left out (``-4`` for ``-4 + 1e-17j``, ``3\\,\\mathrm{j}`` for ``3j``).

    Raises
    ------
    RenderError
        If `x` is not a number or `digits` is not a positive integer.

    Examples
    --------
    >>> tex_number(1.23e-05)
    '1.23\\\\times10^{-5}'
    >>> tex_number(-2.5 + 1j, digits=3)
    '-2.5 + 1\\\\,\\\\mathrm{j}'
    """
    value, digits = _split_number(x, digits, "tex_number")
    if isinstance(value, float):
        return TrustedLatex(_tex_real(value, digits))
    real, imag = pole_parts(value, digits)
    if imag is None:
        return TrustedLatex(_tex_text(real or "0"))
    negative = imag.startswith("-")
    imag_text = _tex_text(imag.removeprefix("-")) + r"\,\mathrm{j}"
    if real is None:
        return TrustedLatex(("-" if negative else "") + imag_text)
    return TrustedLatex(_tex_text(real) + (" - " if negative else " + ") + imag_text)


_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def _md_real(x: float, digits: int) -> str:
    sign, mantissa, exponent = _real_parts(x, digits)
    minus = "\N{MINUS SIGN}" if sign else ""
    if mantissa == "nan":
        return "NaN"
    if mantissa == "inf":
        return minus + "∞"
    if exponent is None:
        return minus + mantissa
    return f"{minus}{mantissa}×10{exponent.translate(_SUPERSCRIPT)}"


def md_number(x: object, digits: int = 6) -> TrustedMarkdown:
    """Format a number for Markdown in plain Unicode, e.g. ``1.23×10⁻⁵``.

    Parameters
    ----------
    x : real or complex number
        Python, NumPy or SymPy number.
    digits : int, optional
        Significant digits, by default 6.

    Returns
    -------
    TrustedMarkdown
        Digits, ``.``, the minus sign U+2212, ``×`` and superscript digits only, so no
        Markdown syntax can form; ``∞``, ``NaN``.  A complex number (a pole) is written
        as a design file writes it, by :func:`symbolic.model.numbers.format_pole`: ``-2+3j``,
        ``-4`` (digits, ``.``, ``e``, ASCII ``+`` and ``-`` and ``j``, with no space, so
        again no Markdown syntax can form).

    Raises
    ------
    RenderError
        If `x` is not a number or `digits` is not a positive integer.

    Examples
    --------
    >>> md_number(1.23e-05)
    '1.23×10⁻⁵'
    >>> md_number(-4.0)
    '−4'
    >>> md_number(-2 - 3j)
    '-2-3j'
    """
    value, digits = _split_number(x, digits, "md_number")
    if isinstance(value, float):
        return TrustedMarkdown(_md_real(value, digits))
    return TrustedMarkdown(format_pole(value, digits))
