"""Pole rules: how each set of closed-loop poles of a design is chosen, dispatched by name.

Four sets of poles are chosen by rule: the controller poles, the full-order observer poles,
the integral pole of integral action and the poles of the reduced-order observer.  Each rule
is one function, registered under a name for its kind in :data:`RULES` by the
:func:`pole_rule` decorator; the design file says which rule applies to each kind
(:func:`requested_rule`), and :func:`choose` looks the rule up and calls it.  The name of a
controller or observer rule is the ``origin`` of the :class:`~symbolic.model.results.PoleChoice`
it returns.  Adding a rule (an optimal-control rule, say) means writing one function with the
signature of its kind, registering it, and naming it in :func:`requested_rule`.

The signatures, by kind:

* ``"controller"``: ``rule(design) -> PoleChoice``;
* ``"observer"``: ``rule(design, controller: PoleChoice) -> PoleChoice``;
* ``"integral"``: ``rule(design, controller_poles) -> (pole, sentence)``;
* ``"reduced observer"``: ``rule(design, observer_poles) -> (poles, sentence)``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from numbers import Real
from typing import TYPE_CHECKING

import numpy as np
import sympy as sp

from ..model.results import PoleChoice
from ..runtime import sidecar as _sidecar
from . import closed_form as cf
from .dominant import dominant_pair, refined_pair, round_sig3
from .optimal import optimal_controller_choice, optimal_observer_choice

if TYPE_CHECKING:
    from ..model.design import Design
    from .specs import DominantPair

__all__ = [
    "DEFAULT_INTEGRAL_POLE_FACTOR",
    "RULES",
    "choose",
    "default_integral_pole",
    "integral_pole_for",
    "pole_rule",
    "poles_for_pair",
    "reduced_observer_poles",
    "reduced_poles_for",
    "remaining_poles",
    "requested_rule",
    "select_controller_poles",
    "select_observer_poles",
    "shipped_pole_sets",
]

#: The rules by kind, then by name.
RULES: dict[str, dict[str, Callable]] = {
    "controller": {},
    "observer": {},
    "integral": {},
    "reduced observer": {},
}

#: The integral pole sits at this multiple of the slowest controller pole's real part unless
#: ``tracking.integral_pole`` says otherwise.  Common practice, no source: a little faster than
#: the dominant poles, so that the integral mode does not add a slow tail to the step response,
#: yet not so fast that k_i (and the overshoot it causes after a saturation) grows large.
DEFAULT_INTEGRAL_POLE_FACTOR = sp.Rational(3, 2)


def pole_rule(kind: str, name: str) -> Callable[[Callable], Callable]:
    """Register the decorated function as the rule ``name`` for the ``kind`` poles."""

    def register(func: Callable) -> Callable:
        RULES[kind][name] = func
        return func

    return register


def requested_rule(kind: str, design: Design) -> str:
    """The name of the rule the design file asks for, for the ``kind`` poles.

    ``method = "optimal"`` selects ``"optimal"``; explicit poles in the design file select
    ``"given"``; otherwise the controller poles come from the specifications, the observer
    poles from the speed factor, the integral pole from the default rule and the reduced
    observer's from the full-order observer's.
    """
    if kind == "controller":
        if design.controller.optimal:
            return "optimal"
        return "given" if design.controller.poles is not None else "specifications"
    if kind == "observer":
        if design.observer.optimal:
            return "optimal"
        return "given" if design.observer.poles is not None else "speed factor"
    if kind == "integral":
        return "given" if design.tracking.integral_pole is not None else "default"
    if kind == "reduced observer":
        return "given" if design.observer.reduced_poles is not None else "full-order observer"
    raise ValueError(f"unknown kind of poles {kind!r}; expected one of {tuple(RULES)}")


def _checked_rule(kind: str, name: str) -> Callable:
    """The registered rule, or a ValueError naming the rules there are."""
    if kind not in RULES:
        raise ValueError(f"unknown kind of poles {kind!r}; expected one of {tuple(RULES)}")
    rules = RULES[kind]
    if name not in rules:
        raise ValueError(f"unknown {kind} pole rule {name!r}; expected one of {tuple(rules)}")
    return rules[name]


def choose(kind: str, design: Design, *args, rule: str | None = None):
    """The ``kind`` poles of a design by ``rule`` (default: :func:`requested_rule`).

    ``args`` are what the rules of that kind take after the design (see the module notes).
    """
    name = requested_rule(kind, design) if rule is None else rule
    return _checked_rule(kind, name)(design, *args)


def select_controller_poles(design: Design) -> PoleChoice:
    """The controller poles: given, or from specifications plus the rule for the rest."""
    return choose("controller", design)


def select_observer_poles(design: Design, controller: PoleChoice) -> PoleChoice:
    """Observer poles: given, or the controller poles scaled by the speed factor."""
    return choose("observer", design, controller)


def integral_pole_for(design, controller_poles: tuple[sp.Expr, ...]) -> tuple[sp.Expr, str]:
    """The integral pole of integral action and its rule in one sentence."""
    return choose("integral", design, controller_poles)


def reduced_poles_for(design, observer_poles: tuple[sp.Expr, ...]) -> tuple[tuple, str]:
    """The reduced-order observer's poles and their rule in one sentence."""
    return choose("reduced observer", design, observer_poles)


# --------------------------------------------------------------------------
# Exact numbers
# --------------------------------------------------------------------------
def _exact(x: float) -> sp.Rational:
    """A float rounded for display (shortest repr) as an exact rational."""
    return sp.Rational(repr(float(x)))


def _exact_complex(z: complex) -> sp.Expr:
    re, im = _exact(z.real), _exact(z.imag)
    return re + sp.I * im if im != 0 else re


# --------------------------------------------------------------------------
# Controller poles
# --------------------------------------------------------------------------
@pole_rule("controller", "given")
def given_controller_poles(design: Design) -> PoleChoice:
    """The controller poles as the design file lists them (``controller.poles``)."""
    poles = design.controller.poles
    coeffs = cf.desired_coefficients(poles)
    return PoleChoice(poles, "given", "controller poles as given in the design file", coeffs)


@pole_rule("controller", "specifications")
def poles_from_specifications(design: Design) -> PoleChoice:
    """The dominant pair that meets the specifications, and the remaining poles by rule."""
    pair = _sidecar.call(dominant_pair, design.controller.specifications)  # root finding: SciPy
    return poles_for_pair(design, pair)


@pole_rule("controller", "optimal")
def optimal_controller_poles(design: Design) -> PoleChoice:
    """The poles of the linear-quadratic regulator of the design's weights (``controller.method
    = "optimal"``), by :func:`symbolic.derivation.optimal.optimal_controller_choice`."""
    return optimal_controller_choice(design)


def poles_for_pair(design: Design, pair: DominantPair) -> PoleChoice:
    """The controller poles for a dominant pair: the pair and the remaining poles by rule."""
    req = design.controller
    n = design.plant.order
    dominant = tuple(_exact_complex(p) for p in pair.poles)
    if req.remaining_poles is not None:
        rest = req.remaining_poles
        rule = "the remaining poles as given in the design file (controller.remaining_poles)"
    else:
        rest = tuple(
            _exact_complex(p) for p in remaining_poles(pair, n - 2, req.remaining_pole_factor)
        )
        rule = (
            f"the remaining {n - 2} pole(s) real, {req.remaining_pole_factor:g} times farther left"
            " than the dominant pair, spread by 10 % so that no pole repeats (common practice,"
            " no source: they then decay that much faster and the pair dominates)"
            if n > 2
            else "second-order plant: the dominant pair is the whole set"
        )
    poles = dominant + tuple(rest)
    return PoleChoice(poles, "specifications", rule, cf.desired_coefficients(poles), pair)


def remaining_poles(pair: DominantPair, count: int, factor: float = 5.0) -> tuple[complex, ...]:
    """Default places for the ``count`` closed-loop poles beyond the dominant pair.

    Parameters
    ----------
    pair : DominantPair
        The dominant pair.
    count : int
        Number of further poles, ``n - 2`` for an ``n``-state plant; ``>= 0``.
    factor : float, default 5.0
        How many times farther from the imaginary axis than the pair the
        nearest further pole lies; finite and ``>= 1``.  Below about 5 the
        pair no longer dominates clearly (common practice, no source).

    Returns
    -------
    tuple of complex
        Real poles ``-factor*sigma*(1 + 0.1*k)``, ``k = 0 .. count-1``, each
        rounded away from zero to three significant figures.

    Raises
    ------
    ValueError
        When ``count`` is not a non-negative integer or ``factor`` is not a
        finite number of at least 1.

    Notes
    -----
    The rule is a default; the design file may give explicit poles instead.
    A factor of 5 is common practice, no source: the further poles decay
    about five times faster than the dominant pair, so the second-order
    predictions stay roughly right.  The 10 % spread keeps the poles
    distinct, so numeric pole placement and eigenvalue checks stay well
    conditioned (SciPy 1.17's ``place_poles`` was measured to fail silently
    for poles 1e-8 apart).  Rounding away from zero only makes them faster.
    Fast poles need large gains: check actuator limits and noise.

    Examples
    --------
    >>> from symbolic.model.specifications import Specifications
    >>> pair = dominant_pair(Specifications(settling_time=2.0))
    >>> remaining_poles(pair, 2)
    ((-10.8+0j), (-11.9+0j))
    """
    if isinstance(count, bool) or not isinstance(count, int) or count < 0:
        raise ValueError(f"count must be a non-negative integer, got {count!r}")
    if (
        isinstance(factor, bool)
        or not isinstance(factor, Real)
        or not math.isfinite(factor)
        or factor < 1.0
    ):
        raise ValueError(f"factor must be a finite number >= 1, got {factor!r}")
    # p_k = -factor * sigma * (1 + 0.1 k)   (common practice, no source)
    return tuple(
        complex(-round_sig3(float(factor) * pair.real_part * (1.0 + 0.1 * k), up=True), 0.0)
        for k in range(count)
    )


def shipped_pole_sets(design: Design, base: PoleChoice):
    """``(sigma, omega_d) -> (controller poles with the integral pole last, shipped observer
    poles, PoleChoice)`` by the design's rules: what the refinement of the dominant pair
    (the ``refine`` hook of :func:`symbolic.derivation.pipeline.derive`) varies."""
    spec = design.controller.specifications

    def sets(sigma: float, omega_d: float):
        choice = poles_for_pair(design, refined_pair(spec, base.dominant, sigma, omega_d))
        obs = select_observer_poles(design, choice)
        cpoles = choice.values
        if design.tracking.method == "integral":
            cpoles = np.append(cpoles, complex(integral_pole_for(design, choice.poles)[0]))
        opoles = obs.values
        if design.observer.kind == "reduced":
            opoles = np.array([complex(z) for z in reduced_poles_for(design, obs.poles)[0]])
        return cpoles, opoles, choice

    return sets


# --------------------------------------------------------------------------
# Observer poles
# --------------------------------------------------------------------------
@pole_rule("observer", "given")
def given_observer_poles(design: Design, controller: PoleChoice) -> PoleChoice:
    """The observer poles as the design file lists them (``observer.poles``)."""
    poles = design.observer.poles
    return PoleChoice(
        poles,
        "given",
        "observer poles as given in the design file",
        cf.desired_coefficients(poles),
    )


@pole_rule("observer", "speed factor")
def observer_poles_by_speed_factor(design: Design, controller: PoleChoice) -> PoleChoice:
    """The controller poles scaled by ``observer.speed_factor``."""
    req = design.observer
    f = _exact(req.speed_factor)
    poles = tuple(sp.expand(f * p) for p in controller.poles)
    why = (
        " (default; common practice, no source: observers are usually made 2 to 6 times faster"
        " than the controller)"
        if req.speed_factor_is_default
        else " (observer.speed_factor)"
    )
    rule = f"observer poles = {req.speed_factor:g} × controller poles{why}"
    return PoleChoice(poles, "speed factor", rule, cf.desired_coefficients(poles))


@pole_rule("observer", "optimal")
def optimal_observer_poles(design: Design, controller: PoleChoice) -> PoleChoice:
    """The poles of the steady-state Kalman–Bucy filter of the design's noise intensities
    (``observer.method = "optimal"``); they do not depend on the controller."""
    return optimal_observer_choice(design)


# --------------------------------------------------------------------------
# The integral pole
# --------------------------------------------------------------------------
@pole_rule("integral", "given")
def given_integral_pole(design, controller_poles: tuple[sp.Expr, ...]) -> tuple[sp.Expr, str]:
    """The integral pole as the design file gives it (``tracking.integral_pole``)."""
    return (
        design.tracking.integral_pole,
        "integral pole as given in the design file (tracking.integral_pole)",
    )


@pole_rule("integral", "default")
def default_integral_pole_of(design, controller_poles: tuple[sp.Expr, ...]) -> tuple[sp.Expr, str]:
    """The integral pole by :func:`default_integral_pole`."""
    return default_integral_pole(controller_poles)


def _same_number(a: sp.Expr, b: sp.Expr) -> bool:
    """Whether two exact numbers (poles) are equal: exactly, or to 50 significant digits."""
    difference = sp.expand(a - b)
    if difference.is_Rational or difference.is_zero is not None:
        return bool(difference.is_zero)
    return abs(complex(sp.N(difference, 50))) <= 1e-40 * max(1.0, abs(complex(sp.N(b, 20))))


def default_integral_pole(controller_poles: tuple[sp.Expr, ...]) -> tuple[sp.Expr, str]:
    """The integral pole by the default rule, and the rule in one sentence.

    The pole is real, at :data:`DEFAULT_INTEGRAL_POLE_FACTOR` (1.5) times the real part of the
    slowest controller pole (common practice, no source); when that value coincides with a
    controller pole it is moved 10 % farther left until it does not, so that no pole repeats
    (``scipy.signal.place_poles`` refuses repeated poles).

    Examples
    --------
    >>> default_integral_pole((-2 + sp.I, -2 - sp.I, -10))[0]
    -3
    """
    slowest = max(sp.re(p) for p in controller_poles)
    pole = DEFAULT_INTEGRAL_POLE_FACTOR * slowest
    moved = 0
    while any(_same_number(pole, p) for p in controller_poles):
        pole = pole * sp.Rational(11, 10)
        moved += 1
    rule = (
        f"integral pole real, at {DEFAULT_INTEGRAL_POLE_FACTOR} times the real part of the"
        " slowest controller pole (default; common practice, no source: a little faster than"
        " the dominant poles so the integral mode adds no slow tail)"
    )
    if moved:
        rule += f", moved 10 % farther left {moved} time(s) so that no pole repeats"
    return pole, rule


# --------------------------------------------------------------------------
# The reduced-order observer's poles
# --------------------------------------------------------------------------
@pole_rule("reduced observer", "given")
def given_reduced_poles(design, observer_poles: tuple[sp.Expr, ...]) -> tuple[tuple, str]:
    """The reduced observer's poles as the design file lists them (``observer.poles`` with
    n - p entries)."""
    return (
        tuple(design.observer.reduced_poles),
        "reduced observer poles as given in the design file (observer.poles)",
    )


@pole_rule("reduced observer", "full-order observer")
def reduced_poles_from_full_order(design, observer_poles: tuple[sp.Expr, ...]) -> tuple[tuple, str]:
    """The first n - p full-order observer poles, by :func:`reduced_observer_poles`."""
    return reduced_observer_poles(
        tuple(observer_poles), design.plant.order - design.plant.n_outputs
    )


def reduced_observer_poles(
    full_poles: tuple[sp.Expr, ...], count: int
) -> tuple[tuple[sp.Expr, ...], str]:
    """The reduced observer's poles taken from the full-order observer's, and the rule.

    Walk the full-order poles in the order listed and keep real poles and whole conjugate
    pairs while they fit in ``count``; when one place is left and only pairs remain, use the
    real pole ``-|p|`` of the next pair (same natural frequency).

    Examples
    --------
    >>> import sympy as sp
    >>> reduced_observer_poles((-8 + 6*sp.I, -8 - 6*sp.I, -20), 2)[0]
    (-8 + 6*I, -8 - 6*I)
    >>> reduced_observer_poles((-8 + 6*sp.I, -8 - 6*sp.I, -20), 1)[0]
    (-20,)
    >>> reduced_observer_poles((-8 + 6*sp.I, -8 - 6*sp.I), 1)[0]
    (-10,)
    """
    chosen: list[sp.Expr] = []
    used: list[int] = []
    pending = list(enumerate(full_poles))
    for i, p in pending:
        if len(chosen) >= count or i in used:
            continue
        if sp.im(p) == 0:
            chosen.append(p)
            used.append(i)
            continue
        partner = next(
            (
                j
                for j, q in pending
                if j not in used and j != i and sp.simplify(q - sp.conjugate(p)) == 0
            ),
            None,
        )
        if partner is not None and len(chosen) + 2 <= count:
            chosen.extend([p, full_poles[partner]])
            used.extend([i, partner])
    note = ""
    if len(chosen) < count:
        rest = [p for i, p in pending if i not in used]
        if rest:
            radius = float(sp.sqrt(sp.re(rest[0]) ** 2 + sp.im(rest[0]) ** 2))
            chosen.append(-sp.Rational(f"{radius:.6g}"))
            note = (
                "; one place was left for a pair, so the real pole -|p| of that pair is used"
                " (rounded to 6 significant digits)"
            )
    rule = (
        f"the first {count} of the full-order observer poles, in the order listed, keeping"
        f" conjugate pairs together{note}"
    )
    return tuple(chosen), rule
