"""Design files that are valid but heavy for the symbolic engine (blow-up cases).

Two six-state, single-input, single-output plants, generated deterministically:

* :func:`fully_symbolic_plant`: every entry of A, B and C is its own parameter
  (48 parameters).  The closed-form Ackermann gain of such a plant has
  thousands of terms; the engine must stop at its symbolic budget and fall back
  to numbers.
* :func:`nested_root_plant`: a lightly coupled chain whose entries are nested
  square roots such as ``sqrt(a0 + sqrt(b0))``; SymPy cannot pick an algebraic
  field for them and works in its slow expression domain.

The numeric values are drawn from a seeded generator and kept only when the
plant is comfortably controllable and observable at those values (condition
numbers of the controllability and observability matrices below 1e6), so the
numeric fallback has a well-posed problem to solve.  The values are invented.
"""

from __future__ import annotations

import json
import math
import random

import numpy as np

__all__ = ["fully_symbolic_plant", "nested_root_plant", "structure_conditions"]

POLES = ["-2+1j", "-2-1j", "-3", "-4", "-5", "-6"]


def structure_conditions(A: np.ndarray, B: np.ndarray, C: np.ndarray) -> tuple[float, float]:
    """Condition numbers of the controllability and observability matrices."""
    n = A.shape[0]
    ctrb = np.hstack([np.linalg.matrix_power(A, k) @ B for k in range(n)])
    obsv = np.vstack([C @ np.linalg.matrix_power(A, k) for k in range(n)])
    return float(np.linalg.cond(ctrb)), float(np.linalg.cond(obsv))


def _document(title: str, values: dict[str, float], A, B, C, budget: float | None) -> str:
    lines = [f"title = {json.dumps(title)}", 'author = "Hardening tests (generated)"', ""]
    for name, value in values.items():
        lines += [f"[parameters.{name}]", f"value = {value!r}", ""]
    lines += [
        "[plant]",
        f"A = {json.dumps(A)}",
        f"B = {json.dumps(B)}",
        f"C = {json.dumps(C)}",
        "",
        "[controller]",
        f"poles = {json.dumps(POLES)}",
        "",
    ]
    if budget is not None:
        lines += ["[options]", f"symbolic_budget_seconds = {budget!r}", ""]
    return "\n".join(lines)


def fully_symbolic_plant(budget: float | None = None, seed: int = 11) -> str:
    """Six states; A, B and C entirely symbolic; 48 parameters."""
    n = 6
    for attempt in range(1000):
        rng = random.Random(seed + attempt)
        A = [[f"a{i}{j}" for j in range(n)] for i in range(n)]
        B = [[f"b{i}"] for i in range(n)]
        C = [[f"c{j}" for j in range(n)]]
        names = [e for row in A for e in row] + [row[0] for row in B] + C[0]
        values = {name: rng.choice([-1, 1]) * rng.randint(1, 40) / 10 for name in names}
        An = np.array([[values[e] for e in row] for row in A])
        Bn = np.array([[values[row[0]]] for row in B])
        Cn = np.array([[values[e] for e in C[0]]])
        if max(structure_conditions(An, Bn, Cn)) < 1e6:
            return _document(
                "Six-state plant, every entry a parameter (generated)", values, A, B, C, budget
            )
    raise RuntimeError("no well-conditioned draw found")  # pragma: no cover


def nested_root_plant(budget: float | None = None, seed: int = 3) -> str:
    """Six states; entries are nested square roots of 12 parameters."""
    n = 6
    for attempt in range(1000):
        rng = random.Random(seed + attempt)
        values = {}
        for i in range(n):
            values[f"a{i}"] = rng.randint(2, 30) / 10
            values[f"b{i}"] = rng.randint(2, 30) / 10
        A: list[list[object]] = [[0] * n for _ in range(n)]
        An = np.zeros((n, n))
        for i in range(n):
            a, b = values[f"a{i}"], values[f"b{i}"]
            A[i][i] = f"-sqrt(a{i} + sqrt(b{i}))"
            An[i, i] = -math.sqrt(a + math.sqrt(b))
            if i + 1 < n:
                a_next = values[f"a{i + 1}"]
                A[i][i + 1] = f"sqrt(b{i} + sqrt(a{i + 1}))"
                An[i, i + 1] = math.sqrt(b + math.sqrt(a_next))
            if i > 0:
                A[i][0] = f"sqrt(a{i})/(1 + sqrt(b{i}))"
                An[i, 0] = math.sqrt(a) / (1 + math.sqrt(b))
        B = [[0]] * (n - 1) + [["sqrt(a0 + sqrt(b0))"]]
        Bn = np.zeros((n, 1))
        Bn[-1, 0] = math.sqrt(values["a0"] + math.sqrt(values["b0"]))
        C = [["sqrt(b5)"] + [0] * (n - 1)]
        Cn = np.zeros((1, n))
        Cn[0, 0] = math.sqrt(values["b5"])
        if max(structure_conditions(An, Bn, Cn)) < 1e6:
            return _document(
                "Six-state chain with nested square roots (generated)", values, A, B, C, budget
            )
    raise RuntimeError("no well-conditioned draw found")  # pragma: no cover
