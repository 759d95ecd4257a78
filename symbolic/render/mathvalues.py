"""Numbers and matrices as LaTeX math, marked as produced by our own code.

:class:`OwnMath` is math that both memo formats trust (the format decides how to mark
it safe when the context reaches its template); every other string is escaped.
"""

from __future__ import annotations

import numpy as np

__all__ = ["OwnMath", "latex_matrix", "latex_number", "own_math", "printed_zero"]


class OwnMath(str):
    """LaTeX math produced by our own code; becomes trusted in either format."""

    __slots__ = ()


def own_math(latex: str) -> OwnMath:
    """Mark ``latex`` (built by gainsmith, never from user text) as trusted math."""
    return OwnMath(latex)


def printed_zero(x: float, scale: float, digits: int) -> bool:
    """Whether ``x`` is 0 at the precision the numbers of its table are printed to.

    ``scale`` is the size of the table (the largest magnitude in it, or the step the
    numbers are errors of); printed to ``digits`` significant figures its last figure
    is ``10^(floor(log10 scale) + 1 - digits)``, and ``x`` is 0 when it is below half of
    that (round-off such as ``-2.2e-16`` next to ``0.146``).  A zero or non-finite scale
    leaves every ``x`` as it is.

    Examples
    --------
    >>> printed_zero(-2.2e-16, 0.5, 3), printed_zero(4e-4, 0.5, 3), printed_zero(6e-4, 0.5, 3)
    (True, True, False)
    >>> printed_zero(1e-16, 0.0, 3)
    False
    """
    scale = abs(float(scale))
    if scale == 0 or not np.isfinite(scale) or not np.isfinite(x):
        return False
    last_figure = 10.0 ** (np.floor(np.log10(scale)) + 1 - digits)
    return bool(abs(float(x)) < 0.5 * last_figure)


def latex_number(x: float, digits: int = 6, scale: float | None = None) -> str:
    """``x`` to ``digits`` significant digits as LaTeX (``\\times 10^{k}``, ``\\infty``).

    With a ``scale`` (the size of the table the number is printed in), a number that is 0
    at that precision prints as ``0`` (see :func:`printed_zero`).
    """
    x = float(x)
    if x == 0 or (scale is not None and printed_zero(x, scale, digits)):
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
