"""The numeric loop of a finished derivation, in the layout the step simulator takes."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from ..model.results import Derivation

if TYPE_CHECKING:  # the simulator loads SciPy: imported where a run needs it
    from .step_results import LoopModel

__all__ = ["loop_model"]


def loop_model(d: Derivation, L: np.ndarray | None = None) -> LoopModel:
    """The numeric loop of a derivation (optionally with another observer gain).

    The continuous reference-gain loop with the full-order observer (the textbook layout);
    the verdicts use the shipped controller instead (:mod:`symbolic.verification.shipped`).
    """
    from .step_results import LoopModel

    N = d.reference.value if d.reference is not None else np.zeros((d.plant.B.shape[1], 1))
    return LoopModel(
        A=d.plant.A,
        B=d.plant.B,
        C=d.plant.C,
        D=d.plant.D,
        K=d.K.value,
        L=d.L.value if L is None else L,
        reference_gain=N,
        tracked=d.reference.tracked_index if d.reference is not None else d.design.tracking.output,
    )
