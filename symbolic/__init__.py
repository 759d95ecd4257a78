"""gainsmith: observer-based state-feedback design with closed-form gains.

The importable package behind the ``gainsmith`` command.  The flow is one
direction: :func:`load_design` (a design file to a validated
:class:`Design`) → :func:`derive` (closed forms, numeric values, checks:
a :class:`Derivation`) → renderers (terminal, JSON, memo).

>>> import symbolic
>>> design = symbolic.parse_design(b'''
... [parameters.m]
... value = 2.0
... [plant]
... A = [[0, 1], [0, 0]]
... B = [[0], ["1/m"]]
... C = [[1, 0]]
... [controller]
... poles = ["-2+2j", "-2-2j"]
... ''')
>>> result = symbolic.derive(design, budget=0)
>>> result.K.closed_form
Matrix([[8*m, 4*m]])
>>> result.passed
True
"""

from __future__ import annotations

from ._derive import (
    Check,
    CompensatorResult,
    Derivation,
    GainResult,
    PoleChoice,
    ReferenceGainResult,
    SeparatedLoop,
    StructureReport,
    derive,
)
from ._design import Design, Parameter, Plant, Signal, load_design, parse_design
from ._errors import (
    BudgetExceeded,
    DesignFileError,
    ExpressionError,
    GainsmithError,
    GainsmithWarning,
    RenderError,
    SpecificationError,
    StructureError,
)

__version__ = "0.1.0"

__all__ = [
    "BudgetExceeded",
    "Check",
    "CompensatorResult",
    "Derivation",
    "Design",
    "DesignFileError",
    "ExpressionError",
    "GainResult",
    "GainsmithError",
    "GainsmithWarning",
    "Parameter",
    "Plant",
    "PoleChoice",
    "ReferenceGainResult",
    "RenderError",
    "SeparatedLoop",
    "Signal",
    "SpecificationError",
    "StructureError",
    "StructureReport",
    "__version__",
    "derive",
    "load_design",
    "parse_design",
]
