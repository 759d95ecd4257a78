"""The weight and noise-intensity matrices of the optimal pole rules: shape, symmetry, definiteness.

``[controller] method = "optimal"`` takes ``state_weights`` (n × n, symmetric positive
semidefinite) and ``input_weights`` (m × m, symmetric positive definite); ``[observer]
method = "optimal"`` takes ``process_noise`` (n × n, positive semidefinite) and
``measurement_noise`` (p × p, positive definite).  Each is written either as a list of the
diagonal entries or as the full matrix (a list of rows).  Entries are plain numbers, not
expressions of the parameters: the Riccati equation is solved at the nominal values, so a
weight that varied with a parameter would change nothing the design ships.

Symmetry and definiteness are judged numerically, with the relative tolerance
:data:`WEIGHT_TOLERANCE` (common practice, no source): ``|W - Wᵀ| <= tol · max|W|`` entry by
entry, and for the eigenvalues ``λ`` of the symmetric part ``λ_min >= -tol · λ_max``
(semidefinite) or ``λ_min > tol · λ_max`` (definite).  A definite weight whose smallest
eigenvalue is below that is treated as singular, since the Riccati gain ``R⁻¹BᵀP`` would then
rest on a division by almost nothing.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .fields import FieldReader, short

__all__ = ["MAX_WEIGHT", "WEIGHT_TOLERANCE", "read_weight_matrix"]

#: Relative tolerance of the symmetry and definiteness tests (common practice, no source).
WEIGHT_TOLERANCE = 1e-9
#: Largest magnitude of a weight entry: beyond it the squares in the Riccati equation
#: overflow long before the design makes sense.
MAX_WEIGHT = 1e12


def read_weight_matrix(
    fields: FieldReader, value: Any, key: str, size: int, *, definite: bool
) -> tuple[tuple[float, ...], ...]:
    """A ``size × size`` symmetric weight at ``key``: semidefinite, or definite if asked.

    Parameters
    ----------
    fields : FieldReader
    value : list
        ``size`` numbers (the diagonal) or ``size`` rows of ``size`` numbers.
    key : str
        The dotted key named in errors, e.g. ``controller.state_weights``.
    size : int
    definite : bool
        Positive definite (True) or positive semidefinite (False).

    Returns
    -------
    tuple of tuple of float
        The full matrix, rows of floats (the diagonal form expanded).
    """
    matrix = _entries(fields, value, key, size)
    scale = float(np.max(np.abs(matrix))) if matrix.size else 0.0
    asym = np.argwhere(np.abs(matrix - matrix.T) > WEIGHT_TOLERANCE * max(scale, 1e-300))
    if asym.size:
        i, j = asym[0]
        fields.fail(
            key,
            f"not symmetric: entry [{i}][{j}] = {matrix[i, j]:g} but [{j}][{i}] = {matrix[j, i]:g}",
        )
    eig = np.linalg.eigvalsh((matrix + matrix.T) / 2.0)
    top = max(float(eig[-1]), 0.0)
    if definite and not eig[0] > WEIGHT_TOLERANCE * top:
        what = "singular" if abs(eig[0]) <= WEIGHT_TOLERANCE * max(top, 1e-300) else "not definite"
        fields.fail(
            key,
            f"must be positive definite, but it is {what} (smallest eigenvalue {eig[0]:.3g},"
            f" largest {eig[-1]:.3g})",
        )
    if not definite and eig[0] < -WEIGHT_TOLERANCE * top:
        fields.fail(
            key,
            f"must be positive semidefinite, but has the negative eigenvalue {eig[0]:.3g}",
        )
    return tuple(tuple(float(x) for x in row) for row in matrix)


def _entries(fields: FieldReader, value: Any, key: str, size: int) -> np.ndarray:
    """The matrix written at ``key``: a diagonal list or a full list of rows, finite numbers."""
    if not isinstance(value, list) or not value:
        fields.fail(
            key,
            f"expected a list of {size} diagonal entries or {size} rows of {size} numbers,"
            f" got {short(value)}",
        )
    if all(isinstance(row, list) for row in value):
        if len(value) != size or any(len(row) != size for row in value):
            shape = f"{len(value)} rows of lengths {[len(row) for row in value][:6]}"
            fields.fail(key, f"expected a {size} × {size} matrix, got {shape}")
        rows = [
            [_entry(fields, x, f"{key}[{i}][{j}]") for j, x in enumerate(row)]
            for i, row in enumerate(value)
        ]
        return np.array(rows, dtype=float).reshape(size, size)
    if any(isinstance(row, list) for row in value):
        fields.fail(key, "mixes numbers and rows: give the diagonal or the whole matrix")
    if len(value) != size:
        fields.fail(key, f"{len(value)} diagonal entries for a {size} × {size} weight: give {size}")
    return np.diag([_entry(fields, x, f"{key}[{i}]") for i, x in enumerate(value)])


def _entry(fields: FieldReader, value: Any, key: str) -> float:
    return fields.number(value, key, minimum=-MAX_WEIGHT, maximum=MAX_WEIGHT)
