"""LaTeX for formulas our own code produced (SymPy objects), made to fit a page.

This is the one place where SymPy output becomes trusted LaTeX.  Symbol
names are validated ASCII identifiers (see :mod:`symbolic.input.expressions`),
so ``sympy.latex`` cannot carry a command through them; they are still
typeset through :func:`symbol_latex` so that ``m_c`` shows as m with a
subscript c, ``J1`` as J with subscript 1 and ``kf`` as an upright-italic
word rather than the product k·f.
"""

from __future__ import annotations

import re

import sympy as sp

from ..model.numbers import pole_parts
from .texsafe import TrustedLatex

__all__ = [
    "symbol_latex",
    "expr_latex",
    "matrix_latex",
    "equation_lines",
    "polynomial_latex",
    "pole_latex",
    "poles_latex",
    "LONG",
]

#: A formula longer than this many characters of LaTeX is broken over lines.
LONG = 90

_GREEK = {
    "alpha",
    "beta",
    "gamma",
    "delta",
    "epsilon",
    "zeta",
    "eta",
    "theta",
    "iota",
    "kappa",
    "lambda",
    "mu",
    "nu",
    "xi",
    "pi",
    "rho",
    "sigma",
    "tau",
    "upsilon",
    "phi",
    "chi",
    "psi",
    "omega",
    "Gamma",
    "Delta",
    "Theta",
    "Lambda",
    "Xi",
    "Pi",
    "Sigma",
    "Upsilon",
    "Phi",
    "Psi",
    "Omega",
}
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")


def _base(word: str) -> str:
    if word in _GREEK:
        return "\\" + word
    if len(word) == 1:
        return word
    return r"\mathit{" + word + "}"


def symbol_latex(name: str) -> str:
    """Typeset an identifier: ``m_c`` → m_{c}, ``J1`` → J_{1}, ``kf`` → \\mathit{kf}."""
    if not _NAME.match(name):  # never reached for validated names; be safe anyway
        raise ValueError(f"not an identifier: {name!r}")
    if "_" in name:
        head, _, tail = name.partition("_")
        parts = [p for p in tail.split("_") if p]
        sub = ",".join("\\" + p if p in _GREEK else r"\mathrm{" + p + "}" for p in parts)
        return f"{_base(head)}_{{{sub}}}"
    m = re.match(r"^([A-Za-z]+?)(\d+)$", name)
    if m:
        return f"{_base(m.group(1))}_{{{m.group(2)}}}"
    return _base(name)


def _names(expr) -> dict:
    syms = getattr(expr, "free_symbols", set())
    return {x: symbol_latex(x.name) for x in syms if x.name != "s"}


def expr_latex(expr) -> TrustedLatex:
    """Plain ``sympy.latex`` with our symbol typesetting."""
    return TrustedLatex(sp.latex(expr, symbol_names=_names(expr)))


def matrix_latex(M: sp.MatrixBase, limit: int | None = None) -> TrustedLatex | None:
    """A bracketed matrix, or None when it would exceed ``limit`` characters."""
    body = sp.latex(
        sp.Matrix(M), symbol_names=_names(sp.Matrix(M)), mat_delim="[", mat_str="matrix"
    )
    if limit is not None and len(body) > limit:
        return None
    return TrustedLatex(body)


def _terms_latex(expr: sp.Expr) -> list[str]:
    terms = sp.Add.make_args(expr)
    out = []
    names = _names(expr)
    for i, t in enumerate(terms):
        text = sp.latex(t, symbol_names=names)
        if i and not text.startswith("-"):
            text = "+ " + text
        elif i:
            text = "- " + text[1:]
        out.append(text)
    return out


def _pack(pieces: list[str], width: int) -> list[str]:
    lines, current = [], ""
    for p in pieces:
        if current and len(current) + len(p) > width:
            lines.append(current)
            current = p
        else:
            current = f"{current} {p}".strip()
    if current:
        lines.append(current)
    return lines


def equation_lines(lhs: str, expr: sp.Expr, width: int = LONG) -> list[TrustedLatex]:
    """Lines of an ``align*`` block: ``lhs &= …``, broken to fit the page.

    A short formula is one line.  A long fraction is written
    (1/den)·(t₁ + t₂ + …) with the numerator's terms packed into lines of
    about ``width`` characters of LaTeX; a long sum likewise.
    """
    full = sp.latex(expr, symbol_names=_names(expr))
    if len(full) <= width:
        return [TrustedLatex(f"{lhs} &= {full}")]
    num, den = sp.fraction(expr)
    names = _names(expr)
    if den != 1:
        num_terms = (
            _terms_latex(sp.expand(num)) if num.is_Add else [sp.latex(num, symbol_names=names)]
        )
        lines = _pack(num_terms, width)
        den_tex = sp.latex(den, symbol_names=names)
        if len(den_tex) > width:
            den_lines = _pack(_terms_latex(sp.expand(den)) if den.is_Add else [den_tex], width)
            out = [f"{lhs} &= \\frac{{N}}{{D}}, \\quad N = {lines[0]}"]
            out += [f"&\\qquad {ln}" for ln in lines[1:]]
            out += [f"&\\phantom{{= \\frac{{N}}{{D}},}} \\quad D = {den_lines[0]}"]
            out += [f"&\\qquad {ln}" for ln in den_lines[1:]]
            return [TrustedLatex(x) for x in out]
        if len(lines) == 1:
            return [TrustedLatex(f"{lhs} &= \\frac{{{lines[0]}}}{{{den_tex}}}")]
        out = [f"{lhs} &= \\frac{{1}}{{{den_tex}}} \\bigl( {lines[0]}"]
        out += [f"&\\qquad {ln}" for ln in lines[1:-1]]
        out.append(f"&\\qquad {lines[-1]} \\bigr)")
        return [TrustedLatex(x) for x in out]
    if expr.is_Add:
        lines = _pack(_terms_latex(expr), width)
        out = [f"{lhs} &= {lines[0]}"] + [f"&\\qquad {ln}" for ln in lines[1:]]
        return [TrustedLatex(x) for x in out]
    return [TrustedLatex(f"{lhs} &= {full}")]


def _float_latex(x: float, digits: int) -> str:
    text = f"{x:.{digits}g}"
    if "e" in text:
        mant, exp = text.split("e")
        return f"{mant} \\times 10^{{{int(exp)}}}"
    return text


def polynomial_latex(coeffs, var: str = "s", digits: int | None = None) -> TrustedLatex:
    """Σ c_i var^(n−i), highest power first.

    Exact SymPy coefficients are typeset exactly; with ``digits`` the
    coefficients are rounded to that many significant figures (floats).
    Zero terms are left out and unit coefficients are not written.
    """
    n = len(coeffs) - 1
    parts: list[str] = []
    for i, c in enumerate(coeffs):
        power = n - i
        if digits is not None:
            value = float(c)
            if value == 0:
                continue
            negative = value < 0
            body = _float_latex(abs(value), digits)
            unit = abs(abs(value) - 1.0) < 10 ** (-digits)
        else:
            c = sp.Rational(c) if isinstance(c, int) else c
            if c == 0:
                continue
            negative = bool(c.could_extract_minus_sign())
            mag = -c if negative else c
            body = sp.latex(mag, symbol_names=_names(mag))
            if mag.is_Add:
                body = f"\\left({body}\\right)"
            unit = mag == 1
        if power == 0:
            term = body
        else:
            pw = var if power == 1 else f"{var}^{{{power}}}"
            term = pw if unit else f"{body}\\, {pw}"
        if not parts:
            parts.append(("-" if negative else "") + term)
        else:
            parts.append(("- " if negative else "+ ") + term)
    return TrustedLatex(" ".join(parts) if parts else "0")


def _number_text_latex(text: str) -> str:
    """A number printed by :func:`symbolic.model.numbers.format_number`, for math mode."""
    sign = ""
    if text.startswith("-"):
        sign, text = "-", text[1:]
    if text == "inf":
        return sign + "\\infty"
    if text == "nan":
        return "\\mathrm{NaN}"
    mantissa, _, exponent = text.partition("e")
    if not exponent:
        return sign + mantissa
    return f"{sign}{mantissa}\\times 10^{{{int(exponent)}}}"


def pole_latex(z: complex, digits: int = 4) -> TrustedLatex:
    """A pole for math mode, with the numbers :func:`symbolic.model.numbers.format_pole` prints.

    The imaginary unit is ``j``, as everywhere in gainsmith's output; a part too
    small to show at ``digits`` figures is left out as in plain text.

    Examples
    --------
    >>> pole_latex(-2 - 3j), pole_latex(-4 + 1e-17j), pole_latex(-1.5e-7 + 2e-7j, 2)
    ('-2 - 3j', '-4', '-1.5\\\\times 10^{-7} + 2\\\\times 10^{-7}j')
    """
    real, imag = pole_parts(z, digits)
    if imag is None:
        return TrustedLatex(_number_text_latex(real or "0"))
    negative = imag.startswith("-")
    imag_tex = _number_text_latex(imag.removeprefix("-")) + "j"
    if real is None:
        return TrustedLatex(("-" if negative else "") + imag_tex)
    return TrustedLatex(f"{_number_text_latex(real)} {'-' if negative else '+'} {imag_tex}")


def poles_latex(poles, digits: int = 4) -> TrustedLatex:
    """Poles for math mode, separated by ``,\\;``."""
    return TrustedLatex(",\\; ".join(pole_latex(z, digits) for z in poles))
