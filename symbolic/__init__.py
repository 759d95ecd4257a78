"""gainsmith: observer-based state-feedback design with closed-form gains.

The importable package behind the ``gainsmith`` command.  The flow is one
direction: :func:`load_design` (a design file to a validated
:class:`Design`) → :func:`derive` (closed forms, numeric values, checks:
a :class:`Derivation`) → :func:`simulate`, :func:`robustness` (the shipped
controller judged: a :class:`RequirementTable`) → :func:`build_memo`,
:func:`write_memo`, :func:`export` (memo and code).  Each of these accepts a
design, the path of a design file or a derivation (:mod:`symbolic.api`).

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

import importlib
from typing import TYPE_CHECKING

from .runtime.errors import (
    BudgetExceeded,
    DesignFileError,
    ExpressionError,
    GainsmithError,
    GainsmithWarning,
    RenderError,
    SpecificationError,
    StructureError,
)

#: Public names loaded on first use (PEP 562), so that ``import symbolic`` and the
#: command line start at once: SymPy and SciPy load when a name needs them, and the
#: command line can start its SciPy sidecar first (:mod:`symbolic.runtime.sidecar`).
_LAZY = {
    "Check": "model.results",
    "CompensatorResult": "model.results",
    "Derivation": "model.results",
    "GainResult": "model.results",
    "PoleChoice": "model.results",
    "ReferenceGainResult": "model.results",
    "SeparatedLoop": "model.results",
    "StructureReport": "model.results",
    "ExportResult": "render.export",
    "MemoDocument": "render.memo",
    "MemoResult": "render.memo",
    "RequirementTable": "analysis.requirements",
    "RevisionComparison": "analysis.revision_diff",
    "RobustnessReport": "analysis.robust",
    "SimulationRun": "analysis.study",
    "build_memo": "api",
    "compare": "api",
    "derive": "api",
    "export": "api",
    "robustness": "api",
    "simulate": "api",
    "write_memo": "api",
    "Design": "model.design",
    "Parameter": "model.design",
    "Plant": "model.design",
    "Signal": "model.design",
    "load_design": "input.reader",
    "parse_design": "input.reader",
}

if TYPE_CHECKING:  # pragma: no cover
    from .analysis.requirements import RequirementTable
    from .analysis.revision_diff import RevisionComparison
    from .analysis.robust import RobustnessReport
    from .analysis.study import SimulationRun
    from .api import build_memo, compare, derive, export, robustness, simulate, write_memo
    from .input.reader import load_design, parse_design
    from .model.design import Design, Parameter, Plant, Signal
    from .model.results import (
        Check,
        CompensatorResult,
        Derivation,
        GainResult,
        PoleChoice,
        ReferenceGainResult,
        SeparatedLoop,
        StructureReport,
    )
    from .render.export import ExportResult
    from .render.memo import MemoDocument, MemoResult


def __getattr__(name: str):
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


from .runtime.version import __version__  # noqa: E402

__all__ = [
    "BudgetExceeded",
    "Check",
    "CompensatorResult",
    "Derivation",
    "Design",
    "DesignFileError",
    "ExportResult",
    "ExpressionError",
    "GainResult",
    "GainsmithError",
    "GainsmithWarning",
    "MemoDocument",
    "MemoResult",
    "Parameter",
    "Plant",
    "PoleChoice",
    "ReferenceGainResult",
    "RenderError",
    "RequirementTable",
    "RevisionComparison",
    "RobustnessReport",
    "SeparatedLoop",
    "Signal",
    "SimulationRun",
    "SpecificationError",
    "StructureError",
    "StructureReport",
    "__version__",
    "build_memo",
    "compare",
    "derive",
    "export",
    "load_design",
    "parse_design",
    "robustness",
    "simulate",
    "write_memo",
]
