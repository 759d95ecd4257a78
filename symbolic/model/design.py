"""The validated design: frozen dataclasses, one per table of the design file.

Built only by :mod:`symbolic.input` (which validates every key first); read by every
layer above.  Nothing here parses or computes.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import sympy as sp

from .specifications import Specifications

__all__ = [
    "Claims",
    "ControllerRequest",
    "Design",
    "DiscreteRequest",
    "NonlinearModel",
    "ObserverRequest",
    "OperatingPoint",
    "Parameter",
    "Plant",
    "Revision",
    "Signal",
    "SimulationRequest",
    "TrackingRequest",
    "DEFAULT_OBSERVER_SPEED_FACTOR",
    "DEFAULT_REMAINING_POLE_FACTOR",
    "OBSERVER_KINDS",
    "TRACKING_METHODS",
    "CONTROLLER_METHODS",
    "OBSERVER_METHODS",
]

#: Observer poles this many times faster than the controller poles unless the
#: file says otherwise.  Common practice, no source: 2 to 6 times is the range
#: usually quoted; 4 keeps the estimator well ahead of the loop without making
#: the observer gain (and its noise amplification) needlessly large.
DEFAULT_OBSERVER_SPEED_FACTOR = 4.0

#: Non-dominant controller poles sit this many times farther left than the
#: dominant pair (common practice, no source).
DEFAULT_REMAINING_POLE_FACTOR = 5.0

#: ``[tracking] method``: a feed-forward reference gain N, or integral action on the error.
TRACKING_METHODS = ("reference_gain", "integral")
#: ``[observer] kind``: the full-order observer (n states) or Luenberger's reduced-order one
#: (n - p states).
OBSERVER_KINDS = ("full", "reduced")
#: ``[controller] method``: explicit poles, time-domain specifications, or the optimal
#: (linear-quadratic) rule; optional, the keys given imply the first two.
CONTROLLER_METHODS = ("poles", "specifications", "optimal")
#: ``[observer] method``: explicit poles, the speed factor, or the optimal (Kalman–Bucy) rule.
OBSERVER_METHODS = ("poles", "speed_factor", "optimal")


@dataclass(frozen=True)
class Parameter:
    """A named plant parameter with its nominal (evaluated) value."""

    name: str
    symbol: sp.Symbol
    value: sp.Rational
    unit: str = ""
    description: str = ""
    range: tuple[sp.Rational, sp.Rational] | None = None


@dataclass(frozen=True)
class Signal:
    """A named state, input or output with its unit."""

    name: str
    unit: str = ""
    description: str = ""


@dataclass(frozen=True)
class Plant:
    """The linear plant x' = A x + B u, y = C x + D u (SymPy matrices)."""

    A: sp.ImmutableMatrix
    B: sp.ImmutableMatrix
    C: sp.ImmutableMatrix
    D: sp.ImmutableMatrix
    states: tuple[Signal, ...]
    inputs: tuple[Signal, ...]
    outputs: tuple[Signal, ...]

    @property
    def order(self) -> int:
        return self.A.shape[0]

    @property
    def n_inputs(self) -> int:
        return self.B.shape[1]

    @property
    def n_outputs(self) -> int:
        return self.C.shape[0]

    @property
    def free_symbols(self) -> set[sp.Symbol]:
        out: set[sp.Symbol] = set()
        for M in (self.A, self.B, self.C, self.D):
            out |= M.free_symbols
        return out


@dataclass(frozen=True)
class ControllerRequest:
    """Either explicit poles or specifications (then the rule for the rest)."""

    poles: tuple[sp.Expr, ...] | None = None
    specifications: Specifications | None = None
    remaining_pole_factor: float = DEFAULT_REMAINING_POLE_FACTOR
    remaining_poles: tuple[sp.Expr, ...] | None = None
    #: Refine the dominant pair on the simulated step of the shipped loop (symbolic.verification.refine);
    #: ``[controller] refine = false`` keeps the second-order pair as it is.
    refine: bool = True
    #: ``method = "optimal"``: the state weights Q (n × n, symmetric positive semidefinite) and
    #: the input weights R (m × m, symmetric positive definite) of the cost ∫ xᵀQx + uᵀRu dt,
    #: rows of floats; specifications may be given too (judged, and compared in the memo).
    state_weights: tuple[tuple[float, ...], ...] | None = None
    input_weights: tuple[tuple[float, ...], ...] | None = None

    @property
    def optimal(self) -> bool:
        """Whether the poles come from the optimal (linear-quadratic) rule."""
        return self.state_weights is not None


@dataclass(frozen=True)
class ObserverRequest:
    """Either explicit observer poles or a speed factor.

    ``kind = "reduced"`` asks, besides the full-order observer, for Luenberger's
    reduced-order observer of n - p states (:mod:`symbolic.derivation.reduced`); its poles
    are ``reduced_poles`` when ``observer.poles`` lists exactly n - p of them,
    otherwise they are taken from the full-order observer poles by the rule of
    :func:`symbolic.derivation.pole_rules.reduced_observer_poles`.
    """

    poles: tuple[sp.Expr, ...] | None = None
    speed_factor: float = DEFAULT_OBSERVER_SPEED_FACTOR
    speed_factor_is_default: bool = True
    kind: str = "full"
    reduced_poles: tuple[sp.Expr, ...] | None = None
    #: ``method = "optimal"``: the intensity W of white process noise on ẋ (n × n, positive
    #: semidefinite) and V of the measurement noise (p × p, positive definite), rows of floats.
    process_noise: tuple[tuple[float, ...], ...] | None = None
    measurement_noise: tuple[tuple[float, ...], ...] | None = None

    @property
    def optimal(self) -> bool:
        """Whether the poles come from the optimal (Kalman–Bucy) rule."""
        return self.process_noise is not None


@dataclass(frozen=True)
class TrackingRequest:
    """Which output the reference acts on, and how its steady-state error is removed.

    ``method = "integral"`` adds integral action (:mod:`symbolic.derivation.integral`);
    ``integral_pole`` (real, negative) overrides the default rule for the extra pole.
    """

    output: int = 0
    method: str = "reference_gain"
    integral_pole: sp.Expr | None = None


@dataclass(frozen=True)
class DiscreteRequest:
    """A digital implementation at a fixed sample time (``[discrete] sample_time``, seconds)."""

    sample_time: sp.Rational

    @property
    def seconds(self) -> float:
        return float(self.sample_time)


@dataclass(frozen=True)
class SimulationRequest:
    """Settings of the step-response simulation (all optional)."""

    initial_state: tuple[float, ...] | None = None
    initial_estimate: tuple[float, ...] | None = None
    horizon: float | None = None
    samples: int = 2001
    u_max: float | None = None
    reference: float = 1.0


@dataclass(frozen=True)
class Claims:
    """An engineer's hand-calculated gains to be checked."""

    K: tuple[tuple[float, ...], ...] | None = None
    L: tuple[tuple[float, ...], ...] | None = None
    reference_gain: float | None = None
    tolerance: float = 1e-3


@dataclass(frozen=True)
class Revision:
    """One entry of the design file's revision history (``[[revisions]]``)."""

    revision: str
    #: ISO 8601 calendar date, ``YYYY-MM-DD``
    date: str
    change: str
    author: str = ""


@dataclass(frozen=True)
class OperatingPoint:
    """The equilibrium the plant is linearised about: ``f(x*, u*, p) = 0``, ``y* = h(x*, u*, p)``.

    Each value is exact: a number, or an expression over the parameters when the equilibrium
    was solved in closed form (``closed_form``); otherwise numbers at the nominal values.
    """

    states: tuple[sp.Expr, ...]
    inputs: tuple[sp.Expr, ...]
    outputs: tuple[sp.Expr, ...]
    #: the names the design file fixed (the rest were solved for)
    given: tuple[str, ...]
    closed_form: bool = True
    #: how many real equilibria met the file's conditions before one was chosen
    candidates: int = 1


@dataclass(frozen=True)
class NonlinearModel:
    """The ``[model]`` table: ``x' = f(x, u, p)``, ``y = h(x, u, p)`` and its operating point.

    ``state_symbols`` and ``input_symbols`` are the SymPy symbols the expressions use for the
    states and inputs (real symbols named as the signals); the design's plant holds the
    Jacobians at :attr:`operating_point`, the linearisation every later stage designs for.
    """

    state_equations: tuple[sp.Expr, ...]
    output_equations: tuple[sp.Expr, ...]
    state_symbols: tuple[sp.Symbol, ...]
    input_symbols: tuple[sp.Symbol, ...]
    operating_point: OperatingPoint
    #: ``[low, high]`` where the model holds, per state (None: no bound); a trajectory that
    #: leaves it counts as not converging
    state_ranges: tuple[tuple[float, float] | None, ...]
    #: reference steps (output units, deviations from y*) simulated on the nonlinear plant
    steps: tuple[float, ...]
    #: the initial offset from x* along each state axis the loop must recover from (None: none
    #: required; the estimate is reported)
    required_offsets: tuple[float | None, ...]


@dataclass(frozen=True)
class Design:
    """A validated design file."""

    path: str
    sha256: str
    title: str
    author: str
    revision: str
    parameters: tuple[Parameter, ...]
    plant: Plant
    controller: ControllerRequest
    observer: ObserverRequest
    tracking: TrackingRequest = TrackingRequest()
    simulation: SimulationRequest = SimulationRequest()
    claims: Claims | None = None
    symbolic_budget_seconds: float = 10.0
    overrides: tuple[str, ...] = field(default=())
    discrete: DiscreteRequest | None = None
    #: the revision history, oldest first, as the file lists it
    revisions: tuple[Revision, ...] = ()
    #: the nonlinear model the plant was linearised from (``[model]``); None: ``[plant]`` given
    model: NonlinearModel | None = None
    #: the design file's text as read (for the memo's appendix)
    text: str = field(default="", repr=False, compare=False)

    @property
    def name(self) -> str:
        """The file's stem, used to name outputs."""
        return Path(self.path).stem

    @property
    def slug(self) -> str:
        """A file-name-safe form of :attr:`name` (letters, digits, "_" and "-") for outputs."""
        text = re.sub(r"[^A-Za-z0-9_]+", "-", self.name).strip("-_")
        return text[:80] or "design"

    @property
    def values(self) -> dict[sp.Symbol, sp.Rational]:
        """Substitution map symbol -> evaluated value."""
        return {p.symbol: p.value for p in self.parameters}

    @property
    def symbols(self) -> dict[str, sp.Symbol]:
        return {p.name: p.symbol for p in self.parameters}
