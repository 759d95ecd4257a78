"""How a single entry of a gain matrix is named, in every output of gainsmith.

One convention, counted from 1 as a control engineer writes it:

* a row gain (one input, K is 1×n) or a column gain (one output, L is n×1)
  has one index: ``K_2`` is the second entry of K, ``L_3`` the third of L;
* a matrix gain has row and column: ``K_1,2`` (row 1, column 2);
* a 1×1 gain is its name alone: ``N``.

The plain-text form serves the terminal, the JSON label strings, the claim
check and the schedule's CSV column names (the :mod:`csv` module quotes a
name with a comma); the LaTeX form, ``K_{2}`` or ``K_{1,2}``, serves the memo.
The indices in design-file keys (``plant.A[1][0]``) and in generated C
arrays are not labels: they stay 0-based, as the file and the language
count them.
"""

from __future__ import annotations

from typing import Literal

__all__ = ["gain_label"]


def gain_label(
    name: str,
    row: int,
    column: int,
    shape: tuple[int, int],
    style: Literal["text", "tex"] = "text",
) -> str:
    """The label of entry (``row``, ``column``), 0-based, of a gain of ``shape``.

    Parameters
    ----------
    name : str
        The gain's name: ``"K"``, ``"L"``, ``"N"``, ``"Ke"`` ...
    row, column : int
        0-based indices of the entry.
    shape : tuple of int
        (rows, columns) of the gain.
    style : {"text", "tex"}
        Plain text (``K_1,2``) or LaTeX math (``K_{1,2}``).

    Returns
    -------
    str

    Examples
    --------
    >>> gain_label("K", 0, 1, (1, 4)), gain_label("L", 2, 0, (4, 1))
    ('K_2', 'L_3')
    >>> gain_label("K", 0, 1, (2, 4)), gain_label("K", 0, 1, (2, 4), "tex")
    ('K_1,2', 'K_{1,2}')
    >>> gain_label("N", 0, 0, (1, 1))
    'N'
    """
    rows, columns = shape
    if not (0 <= row < rows and 0 <= column < columns):
        raise IndexError(f"entry ({row}, {column}) outside a {rows}×{columns} gain")
    if rows == 1 and columns == 1:
        return name
    if rows == 1:
        index = str(column + 1)
    elif columns == 1:
        index = str(row + 1)
    else:
        index = f"{row + 1},{column + 1}"
    return f"{name}_{{{index}}}" if style == "tex" else f"{name}_{index}"
