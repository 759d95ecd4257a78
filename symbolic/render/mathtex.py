"""LaTeX for formulas our own code produced (SymPy objects), made to fit a page.

This is the one place where SymPy output becomes trusted LaTeX.  Symbol
names are validated ASCII identifiers (see :mod:`symbolic.input.expressions`),
so ``sympy.latex`` cannot carry a command through them; they are still
typeset through :func:`symbol_latex` so that ``m_c`` shows as m with a
subscript c, ``J1`` as J with subscript 1 and ``kf`` as an italic word
(``\\mathit{kf}``) rather than the product k·f.  In a product a thin space
(``\\,``) stands beside every multi-letter name, so that ``La*ke*kt`` reads
La ke kt and not Lakekt (:func:`latex_of`).

Formulas are broken to fit the text width by an estimate of their printed width
(:func:`printed_width`, in characters of the body font), not by the length of
their LaTeX.
"""

from __future__ import annotations

import re

import sympy as sp

from ..model.numbers import pole_parts
from .texsafe import TrustedLatex

__all__ = [
    "latex_of",
    "printed_width",
    "symbol_latex",
    "expr_latex",
    "matrix_latex",
    "equation_lines",
    "lines_fit",
    "polynomial_latex",
    "pole_latex",
    "poles_latex",
    "LONG",
]

#: A formula wider than this (characters of printed math, :func:`printed_width`) is
#: broken over lines.  The memo's text is about 110 such characters wide; an ``align*``
#: line also carries its label and an indent.
LONG = 76

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


# A multi-letter name with its scripts, e.g. \mathit{ks}^{2}.
_WORD = r"\\mathit\{[A-Za-z]+\}(?:[\^_]\{[^{}]*\})*"
# What ends a factor of a product: a letter, a digit, a closing brace or parenthesis.
_FACTOR_END = r"(?<=[A-Za-z0-9})])"
# What starts the next factor: a letter, a digit, a command that is not an operator or
# a closing delimiter, an opening parenthesis.
_FACTOR_START = r"(?=[A-Za-z0-9(]|\\(?!right|bigr|Bigr|qquad|quad|cdot|times|,|;|\\))"
_AFTER_WORD = re.compile(rf"({_WORD}) +{_FACTOR_START}")
_BEFORE_WORD = re.compile(rf"{_FACTOR_END} +(?={_WORD})")


def spaced_products(latex: str) -> str:
    """A thin space beside every multi-letter name in a product (``J R^2 - La ke``)."""
    latex = _AFTER_WORD.sub(r"\1\\,", latex)
    return _BEFORE_WORD.sub(r"\\,", latex)


def latex_of(expr, names: dict | None = None) -> str:
    """``sympy.latex`` with our symbol typesetting and spaced products."""
    return spaced_products(sp.latex(expr, symbol_names=_names(expr) if names is None else names))


_COMMAND = re.compile(r"\\([A-Za-z]+)")
_SCRIPT = re.compile(r"[\^_]\{([^{}]*)\}|[\^_](\\?[A-Za-z0-9])")
# Commands that print nothing wide, or whose arguments are counted instead.
_SILENT = frozenset(
    "mathit mathrm mathsf mathbf mathcal text left right bigl bigr Bigl Bigr displaystyle"
    " frac dfrac tfrac sqrt begin end bmatrix matrix phantom".split()
)
# Commands printed as their name in upright letters (a function's name is as wide as it reads).
_NAMED = frozenset(
    "sin cos tan sinh cosh tanh arcsin arccos arctan exp log ln det arg min max sec csc cot".split()
)


def printed_width(latex: str) -> float:
    """An estimate of the printed width of math, in characters of the body font.

    Scripts count 0.7 of a character, a fraction its wider part, spacing commands
    a fraction of a character; every other command (``\\alpha``, ``\\cdot``)
    one character, and every letter, digit or operator one (operators with their
    spaces two).  Good enough to decide where to break a line.
    """
    total = 0.0
    while True:
        frac = latex.find("\\frac{")
        if frac < 0:
            break
        num, after = _braced(latex, frac + 5)
        den, end = _braced(latex, after)
        total += max(printed_width(num), printed_width(den)) * 0.9
        latex = latex[:frac] + latex[end:]
    scripts = 0.0
    for m in _SCRIPT.finditer(latex):
        scripts += 0.7 * printed_width(m.group(1) if m.group(1) is not None else m.group(2))
    latex = _SCRIPT.sub("", latex)
    for m in _COMMAND.finditer(latex):
        word = m.group(1)
        if word in _NAMED:
            total += len(word)
        else:
            total += 0 if word in _SILENT else (2 if word in ("qquad",) else 1)
    latex = _COMMAND.sub("", latex)
    latex = latex.replace("\\,", "").replace("\\;", "").replace("&", "")
    operators = sum(latex.count(op) for op in "+-=<>")
    plain = sum(1 for ch in latex if ch not in "{} ")
    return total + scripts + plain + operators


def _braced(text: str, start: int) -> tuple[str, int]:
    """The group ``{...}`` opening at ``text[start]`` and the index after it."""
    depth = 0
    for i in range(start, len(text)):
        if text[i] == "{":
            depth += 1
        elif text[i] == "}":
            depth -= 1
            if depth == 0:
                return text[start + 1 : i], i + 1
    return text[start + 1 :], len(text)


def expr_latex(expr) -> TrustedLatex:
    """``sympy.latex`` with our symbol typesetting (see :func:`latex_of`)."""
    return TrustedLatex(latex_of(expr))


def matrix_latex(M: sp.MatrixBase, limit: int | None = None) -> TrustedLatex | None:
    """A bracketed matrix, or None when it would exceed ``limit`` characters."""
    body = spaced_products(
        sp.latex(sp.Matrix(M), symbol_names=_names(sp.Matrix(M)), mat_delim="[", mat_str="matrix")
    )
    if limit is not None and len(body) > limit:
        return None
    return TrustedLatex(body)


def _terms_latex(expr: sp.Expr, names: dict | None = None) -> list[str]:
    terms = sp.Add.make_args(expr)
    out = []
    names = _names(expr) if names is None else names
    for i, t in enumerate(terms):
        text = latex_of(t, names)
        if i and not text.startswith("-"):
            text = "+ " + text
        elif i:
            text = "- " + text[1:]
        out.append(text)
    return out


def _pack(pieces: list[str], width: float, first: float | None = None) -> list[str]:
    """Pieces joined into lines of at most `width` printed characters (`first` for line 1)."""
    lines, current = [], ""
    limit = width if first is None else first
    for p in pieces:
        if current and printed_width(current) + printed_width(p) > limit:
            lines.append(current)
            current, limit = p, width
        else:
            current = f"{current} {p}".strip()
    if current:
        lines.append(current)
    return lines


def _sum_factor(num: sp.Expr) -> tuple[sp.Expr, sp.Expr | None]:
    """``num = coefficient * body`` with `body` its widest sum (None when it has none)."""
    if num.is_Add:
        return sp.Integer(1), num
    sums = [f for f in sp.Mul.make_args(num) if f.is_Add]
    if not sums:
        expanded = sp.expand(num)
        return (sp.Integer(1), expanded) if expanded.is_Add else (sp.Integer(1), None)
    body = max(sums, key=lambda f: len(sp.srepr(f)))
    return sp.Mul(*[f for f in sp.Mul.make_args(num) if f is not body]), body


#: The printed width of an ``align*`` continuation indent (``&\qquad``).
_INDENT = 4


def lines_fit(lines: list[str], width: float = LONG) -> bool:
    """Whether every line of :func:`equation_lines` fits: a single term wider than a line
    (a long exact coefficient) cannot be broken inside a display."""
    return all(printed_width(line) <= width + 4 for line in lines)


def equation_lines(
    lhs: str, expr: sp.Expr, width: float = LONG, relation: str = "="
) -> list[TrustedLatex]:
    """Lines of an ``align*`` block: ``lhs &= …`` (or another `relation`), broken to fit.

    A short formula is one line.  A long fraction is written
    (c/den)·(t₁ + t₂ + …), with c the factors of the numerator outside its widest
    sum and the terms of that sum packed into lines of about ``width`` printed
    characters (:func:`printed_width`); a long sum likewise; a denominator too
    wide for a line is written out below as D.
    """
    names = _names(expr)
    full = latex_of(expr, names)
    # every line of the right-hand side starts at the alignment point, right of `lhs`
    width = width - max(0.0, printed_width(lhs) - 4)
    if printed_width(full) <= width:
        return [TrustedLatex(f"{lhs} &{relation} {full}")]
    num, den = sp.fraction(expr)
    if den == 1:
        if not expr.is_Add:
            return [TrustedLatex(f"{lhs} &{relation} {full}")]
        lines = _pack(_terms_latex(expr, names), width - _INDENT)
        out = [f"{lhs} &{relation} {lines[0]}"] + [f"&\\qquad {ln}" for ln in lines[1:]]
        return [TrustedLatex(x) for x in out]
    coefficient, body = _sum_factor(num)
    terms = [latex_of(num, names)] if body is None else _terms_latex(body, names)
    if body is None:
        coefficient = sp.Integer(1)
    den_tex = latex_of(den, names)
    if printed_width(den_tex) > width - 10:
        lines = _pack(_terms_latex(sp.expand(num), names), width - _INDENT, width - 14)
        den_lines = _pack(
            _terms_latex(sp.expand(den), names) if den.is_Add else [den_tex],
            width - _INDENT,
            width - 14,
        )
        out = [f"{lhs} &{relation} \\frac{{N}}{{D}}, \\quad N = {lines[0]}"]
        out += [f"&\\qquad {ln}" for ln in lines[1:]]
        out += [f"&\\phantom{{{relation} \\frac{{N}}{{D}},}} \\quad D = {den_lines[0]}"]
        out += [f"&\\qquad {ln}" for ln in den_lines[1:]]
        return [TrustedLatex(x) for x in out]
    lead = latex_of(coefficient / den, names)
    lines = _pack(terms, width - _INDENT, width - printed_width(lead) - 2)
    if len(lines) == 1 and body is not None and coefficient == 1:
        return [TrustedLatex(f"{lhs} &{relation} \\frac{{{lines[0]}}}{{{den_tex}}}")]
    out = [f"{lhs} &{relation} {lead} \\bigl( {lines[0]}"]
    out += [f"&\\qquad {ln}" for ln in lines[1:-1]]
    if len(lines) > 1:
        out.append(f"&\\qquad {lines[-1]} \\bigr)")
    else:
        out[0] += " \\bigr)"
    return [TrustedLatex(x) for x in out]


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
            body = latex_of(mag)
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
