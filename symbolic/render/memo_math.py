"""The memo's math: formulas and numbers of the result objects, typeset as trusted LaTeX.

Every helper returns :class:`~symbolic.render.mathvalues.OwnMath` (or lists of it): LaTeX
our own code built from validated identifiers and numbers, which either memo format
trusts.  The limits below keep the memo readable and its build fast.
"""

from __future__ import annotations

import numpy as np
import sympy as sp

from ..model.labels import gain_label
from .mathtex import LONG, equation_lines, lines_fit, matrix_latex, poles_latex, printed_width
from .mathvalues import OwnMath, latex_matrix, latex_number, own_math

__all__ = [
    "FACTOR_LIMIT",
    "FORMULA_LIMIT",
    "MATRIX_LIMIT",
    "closed_matrix_math",
    "factored",
    "gain_block",
    "matrix_math",
    "matrix_or_numeric",
    "metric_math",
    "plain_text",
    "poles_math",
    "split_lines",
]

#: A symbolic matrix longer than this (characters of LaTeX) is shown numerically instead.
MATRIX_LIMIT = 700
#: A closed-form entry longer than this (characters of LaTeX) is not printed (see export).
FORMULA_LIMIT = 4000
#: Expressions with more operations than this are shown as they are, not factored.
FACTOR_LIMIT = 400


def factored(expr: sp.Expr) -> sp.Expr:
    """``factor`` for display, skipped on large expressions (it can take minutes)."""
    if sp.count_ops(expr) > FACTOR_LIMIT:
        return expr
    return sp.factor(expr)


def matrix_or_numeric(M: sp.Matrix | None, value: np.ndarray) -> tuple[OwnMath, bool]:
    """The symbolic matrix when short enough, else the numbers; and whether it is symbolic."""
    if M is not None:
        tex = matrix_latex(M, MATRIX_LIMIT)
        if tex is not None:
            return own_math(tex), True
    return own_math(latex_matrix(value)), False


def closed_matrix_math(name: str, closed: sp.Matrix | None) -> OwnMath | None:
    """``name = [closed form]`` when it fits on a line of the page, else None."""
    if closed is None:
        return None
    tex = matrix_latex(closed, MATRIX_LIMIT)
    if tex is None or printed_width(f"{name} = {tex}") > LONG:
        return None
    return own_math(f"{name} = {tex}")


def matrix_math(name: str, closed: sp.Matrix | None, value: np.ndarray) -> OwnMath:
    """``name = [closed form]`` when short, else the numbers."""
    short = closed_matrix_math(name, closed)
    if short is not None:
        return short
    return own_math(f"{name} = " + latex_matrix(np.atleast_2d(value), 6))


def poles_math(values: np.ndarray) -> OwnMath:
    """Poles as a LaTeX list, four significant digits."""
    return own_math(poles_latex(values, 4))


def metric_math(x: float | None, digits: int = 4, scale: float | None = None) -> OwnMath:
    """A metric to `digits` figures, or a dash when it does not exist; with a `scale` (the
    size of its table), 0 where it is 0 at that precision (round-off of an exact zero)."""
    return own_math("\\text{--}" if x is None else latex_number(x, digits, scale))


def split_lines(labelled: list[tuple[str, list[str]]]) -> tuple[list[OwnMath], list[OwnMath]]:
    """``align*`` lines of labelled formulas, split into those that fit on one line (the
    body) and the rest (the appendix), keeping their order within each part."""
    body: list[OwnMath] = []
    appendix: list[OwnMath] = []
    for _label, lines in labelled:
        (body if len(lines) == 1 else appendix).extend(own_math(x) for x in lines)
    return body, appendix


def gain_block(name: str, closed: sp.Matrix | None, value: np.ndarray) -> dict:
    """One gain: its closed-form entries broken over lines, and numbers.

    An entry whose closed form fits on one line stays in the body (``lines``); a longer
    one goes to the appendix (``appendix_lines``), and ``in_appendix`` names it in the
    body.  An entry too long to print at all is named in ``too_long``.
    """
    rows, cols = value.shape
    short: list[OwnMath] = []
    long: list[OwnMath] = []
    moved: list[str] = []
    too_long: list[str] = []
    if closed is not None:
        for i in range(closed.shape[0]):
            for j in range(closed.shape[1]):
                label = gain_label(name, i, j, (rows, cols), "tex")
                entry = factored(closed[i, j])
                if len(sp.latex(entry)) > FORMULA_LIMIT:
                    too_long.append(label)
                    continue
                lines = equation_lines(label, entry)
                if not lines_fit(lines):  # a term wider than the page: not printable
                    too_long.append(label)
                    continue
                if len(lines) == 1:
                    short.append(own_math(lines[0]))
                else:
                    moved.append(label)
                    long.extend(own_math(x) for x in lines)
    entries = [
        {
            "label": own_math(gain_label(name, i, j, (rows, cols), "tex")),
            "value": own_math(latex_number(value[i, j])),
        }
        for i in range(rows)
        for j in range(cols)
    ]
    return {
        "name": name,
        "lines": short,
        "appendix_lines": long,
        "in_appendix": [own_math(x) for x in moved],
        "numeric": own_math(f"{name} = " + latex_matrix(value, 6)),
        "entries": entries,
        "closed": closed is not None,
        "too_long": [own_math(x) for x in too_long],
    }


_UNICODE_MATH = {
    "\u0302": "_hat",  # combining circumflex: x̂ -> x_hat
    "\u0304": "_bar",  # combining macron: ȳ -> y_bar
    "\u0233": "y_bar",  # precomposed y with macron
    "\u1d40": "^T",
    "\u207b\u00b9": "^-1",
    "\u207b": "^-",
    "\u00b9": "1",
    "\u2212": "-",
}


def plain_text(text: str) -> str:
    """Our own explanatory strings with Unicode math written in ASCII (x̂ as x_hat, ᵀ as ^T)."""
    for k, v in _UNICODE_MATH.items():
        text = text.replace(k, v)
    return text
