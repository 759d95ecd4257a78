"""The public entry points of the package, above every layer: :func:`derive`.

:func:`symbolic.derive` is :func:`derive` here.  It is the derivation of
:func:`symbolic.derivation.pipeline.derive` with the refinement of specification-based
poles on the simulated step of the shipped loop
(:func:`symbolic.verification.refine.refine_controller_poles`), which the derivation layer
takes as a hook because the refinement belongs to the verification layer above it.
"""

from __future__ import annotations

from .derivation import pipeline
from .model.design import Design
from .model.results import Derivation
from .verification.refine import refine_controller_poles

__all__ = ["derive"]


def derive(design: Design, *, budget: float | None = None) -> Derivation:
    """Derive K, L, the reference gain and the separated loop, and check them.

    Poles from specifications (``[controller]`` without ``poles``) are refined until the
    simulated step of the shipped loop meets them, unless ``[controller] refine = false``
    (:func:`symbolic.verification.refine.refine_controller_poles`).

    Parameters
    ----------
    design : Design
        From :func:`symbolic.load_design`.
    budget : float, optional
        Seconds allowed for all symbolic stages together (default: the design
        file's ``options.symbolic_budget_seconds``, 10 s).  Zero or negative
        runs the symbolic stages in this process without a limit.

    Returns
    -------
    Derivation

    Raises
    ------
    StructureError
        When the plant is uncontrollable or unobservable at the evaluated
        parameter values.

    Examples
    --------
    >>> import symbolic
    >>> design = symbolic.parse_design(b'''
    ... [plant]
    ... A = [[0, 1], [0, 0]]
    ... B = [[0], [1]]
    ... C = [[1, 0]]
    ... [controller]
    ... poles = [-2, -3]
    ... ''')
    >>> derive(design, budget=0).K.closed_form
    Matrix([[6, 5]])
    """
    return pipeline.derive(design, budget=budget, refine=refine_controller_poles)
