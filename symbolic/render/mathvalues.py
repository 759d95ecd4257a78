"""Numbers and matrices as LaTeX math, marked as produced by our own code.

:class:`OwnMath` is math that both memo formats trust (the format decides how to mark
it safe when the context reaches its template); every other string is escaped.
"""

from __future__ import annotations

import numpy as np

__all__ = ["OwnMath", "latex_matrix", "latex_number", "own_math"]


class OwnMath(str):
    """LaTeX math produced by our own code; becomes trusted in either format."""

    __slots__ = ()


def own_math(latex: str) -> OwnMath:
    """Mark ``latex`` (built by gainsmith, never from user text) as trusted math."""
    return OwnMath(latex)


def latex_number(x: float, digits: int = 6) -> str:
    """``x`` to ``digits`` significant digits as LaTeX (``\\times 10^{k}``, ``\\infty``)."""
    x = float(x)
    if x == 0:
        return "0"
    if not np.isfinite(x):
        return "\\infty" if x > 0 else "-\\infty"
    text = f"{x:.{digits}g}"
    if "e" in text:
        mant, exp = text.split("e")
        return f"{mant}\\times 10^{{{int(exp)}}}"
    return text


def latex_matrix(M: np.ndarray, digits: int = 5) -> str:
    """A numeric matrix as a LaTeX ``bmatrix``."""
    rows = [" & ".join(latex_number(x, digits) for x in row) for row in np.atleast_2d(M)]
    return "\\begin{bmatrix} " + " \\\\ ".join(rows) + " \\end{bmatrix}"
