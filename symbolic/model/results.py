"""The result objects of a derivation: frozen dataclasses with named fields.

Everything :func:`symbolic.derive` finds is one :class:`Derivation`; the renderers
read it and nothing else.  No algorithm lives here.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import sympy as sp

if TYPE_CHECKING:  # annotations only: these types are built by the layers above
    from ..derivation.closed_form import AckermannSteps
    from ..derivation.digital import DigitalController
    from ..derivation.integral import IntegralAction
    from ..derivation.reduced import ReducedObserver
    from ..derivation.specs import DominantPair
    from .design import Design, Signal

__all__ = [
    "Check",
    "CompensatorResult",
    "Derivation",
    "GainResult",
    "NumericPlant",
    "OptimalPoles",
    "PoleChoice",
    "ReferenceGainResult",
    "SeparatedLoop",
    "StructureReport",
]

#: The Laplace variable of every characteristic polynomial.
s = sp.Symbol("s")


@dataclass(frozen=True)
class Check:
    """One numeric or exact verification.

    ``passed`` is None for a check that could not be run (``note`` says why).
    """

    name: str
    value: float | None
    tolerance: float | None
    passed: bool | None
    note: str = ""


@dataclass(frozen=True)
class OptimalPoles:
    """The algebraic Riccati equation behind an optimal pole choice, at the nominal values.

    For the controller: ``weight`` Q, ``input_weight`` R, ``riccati`` P of
    ``AᵀP + PA − PBR⁻¹BᵀP + Q = 0`` and ``gain`` the optimal K = R⁻¹BᵀP (m × n).  For the
    observer: the process noise W, the measurement noise V, P of
    ``AP + PAᵀ − PCᵀV⁻¹CP + W = 0`` and the Kalman–Bucy gain L = PCᵀV⁻¹ (n × p).
    """

    kind: str  # "controller" or "observer"
    weight: np.ndarray
    input_weight: np.ndarray
    riccati: np.ndarray
    gain: np.ndarray
    poles: np.ndarray  # the eigenvalues of A − BK (A − LC) before rounding
    residual: float  # relative residual of the Riccati equation
    digits: int  # significant digits the poles are rounded to
    rounding: float  # what that rounding does to the gain, relative, entry by entry


@dataclass(frozen=True)
class PoleChoice:
    """Requested poles and how they were chosen."""

    poles: tuple[sp.Expr, ...]
    origin: str  # "given", "specifications", "speed factor", "optimal"
    rule: str  # one sentence for the reader
    coefficients: tuple[sp.Expr, ...]  # [1, a_{n-1}, …, a_0]
    dominant: DominantPair | None = None
    #: the Riccati solution when the origin is "optimal"
    optimal: OptimalPoles | None = None

    @property
    def values(self) -> np.ndarray:
        return np.array([complex(p) for p in self.poles])

    @property
    def polynomial(self) -> sp.Expr:
        n = len(self.coefficients) - 1
        return sp.Add(*[c * s ** (n - i) for i, c in enumerate(self.coefficients)])


@dataclass(frozen=True)
class StructureReport:
    """Controllability or observability of the plant."""

    kind: str  # "controllability" or "observability"
    matrix: sp.Matrix | None  # closed form (None if over budget)
    determinant: sp.Expr | None  # factored, single input / single output only
    conditions: tuple[str, ...]  # e.g. ("kf = 0",): where the property is lost
    numeric_rank: int
    order: int
    condition_number: float
    value: np.ndarray  # numeric matrix at the evaluated values

    @property
    def full_rank(self) -> bool:
        return self.numeric_rank == self.order

    @property
    def adjective(self) -> str:
        return "uncontrollable" if self.kind == "controllability" else "unobservable"


@dataclass(frozen=True)
class GainResult:
    """A feedback gain (K) or observer gain (L)."""

    name: str  # "K" or "L"
    value: np.ndarray  # numeric, at the evaluated parameter values
    closed_form: sp.Matrix | None
    method: str
    unique: bool
    steps: AckermannSteps | None = None  # of the dual pair for L
    charpoly: tuple[sp.Expr, ...] | None = None  # det(sI − closed-loop matrix), closed form


@dataclass(frozen=True)
class ReferenceGainResult:
    """Feed-forward gain N in u = −K x̂ + N r for zero steady-state step error."""

    value: np.ndarray  # (m, 1)
    closed_form: sp.Expr | None
    zero_polynomial: (
        tuple[sp.Expr, ...] | None
    )  # numerator of the tracked output's transfer function
    tracked: Signal
    tracked_index: int
    method: str


@dataclass(frozen=True)
class SeparatedLoop:
    """The 2n closed loop in (state x, estimation error e = x − x̂) coordinates."""

    value: np.ndarray
    closed_form: sp.Matrix | None
    charpoly: tuple[sp.Expr, ...] | None
    factors_as_expected: bool | None
    poles: np.ndarray  # eigenvalues, computed


@dataclass(frozen=True)
class CompensatorResult:
    """Observer plus feedback seen as a transfer function from y to u.

    U(s)/Y(s) = −num(s)/den(s) (negative feedback convention: u = −C(s) y
    with C(s) = num/den).  Single-input, single-output plants only.
    """

    numerator: np.ndarray | None
    denominator: np.ndarray | None
    numerator_closed_form: tuple[sp.Expr, ...] | None
    denominator_closed_form: tuple[sp.Expr, ...] | None
    state_matrix: np.ndarray  # F = A − BK − LC + LDK


@dataclass(frozen=True)
class NumericPlant:
    """The plant at the evaluated parameter values."""

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray


@dataclass(frozen=True)
class Derivation:
    """Everything :func:`derive` found, ready for the renderers."""

    design: Design
    plant: NumericPlant
    controller_poles: PoleChoice
    observer_poles: PoleChoice
    controllability: StructureReport
    observability: StructureReport
    K: GainResult
    L: GainResult
    reference: ReferenceGainResult | None
    separated: SeparatedLoop
    compensator: CompensatorResult | None
    checks: tuple[Check, ...]
    notes: tuple[str, ...]
    closed_form: bool
    plant_charpoly: tuple[sp.Expr, ...] | None
    timings: dict[str, float] = field(default_factory=dict, compare=False)
    integral: IntegralAction | None = None  # [tracking] method = "integral"
    reduced_observer: ReducedObserver | None = None  # [observer] kind = "reduced"
    discrete: DigitalController | None = None  # [discrete] sample_time
    #: how the specification-based poles were checked and refined on the simulated step of the
    #: shipped loop (:class:`symbolic.verification.refine.Refinement`); None for given poles
    refinement: Any = None

    @property
    def passed(self) -> bool:
        """True when no check failed (checks that could not run do not fail)."""
        return all(c.passed is not False for c in self.checks)

    @property
    def parameter_values(self) -> dict[str, float]:
        return {p.name: float(p.value) for p in self.design.parameters}

    def _repr_markdown_(self) -> str:  # Jupyter
        lines = [f"**{self.design.title}** — K = {np.array2string(self.K.value, precision=6)}"]
        if self.K.closed_form is not None:
            lines.append(f"$$K = {sp.latex(self.K.closed_form)}$$")
        if self.L.closed_form is not None:
            lines.append(f"$$L = {sp.latex(self.L.closed_form)}$$")
        lines.append("checks: " + ("all passed" if self.passed else "**some failed**"))
        return "\n\n".join(lines)
