"""The design workflow: a validated design in, a finished :class:`Derivation` out.

One direction of flow: :func:`derive` chooses the poles by the design's rules
(:mod:`symbolic.derivation.pole_rules`), derives the closed forms within a time budget
(:mod:`symbolic.derivation.closed_form` in a child process), checks the plant's structure
(:mod:`symbolic.derivation.structure`), evaluates the gains at the design's parameter values
and cross-checks every number against SciPy (:mod:`symbolic.derivation.gains`), adds the
extensions the design asks for (:mod:`symbolic.derivation.extensions`) and returns frozen
result objects.  Renderers (terminal, JSON, memo) consume these objects and never re-derive
anything.

The refinement of specification-based poles on the simulated step of the shipped loop is a
verification and lives above this layer: :func:`derive` takes it as the ``refine`` hook, and
:func:`symbolic.derive` (:mod:`symbolic.api`) passes
:func:`symbolic.verification.refine.refine_controller_poles`.
"""

from __future__ import annotations

import dataclasses
import functools
import time
from collections.abc import Callable
from typing import Any

import numpy as np
import sympy as sp

from ..model.design import Design
from ..model.results import Check, Derivation, GainResult, NumericPlant, PoleChoice
from ..runtime.budget import Outcome, run_bounded_steps
from ..runtime.errors import BudgetExceeded, DesignFileError, StructureError
from . import closed_form as cf
from .extensions import add_extensions, cancel_extensions, start_extensions
from .gains import compensator, feedback_gains, pole_checks, reference_gain, separated_loop
from .numeric import evaluate_matrix
from .optimal import optimal_checks
from .pole_rules import select_controller_poles, select_observer_poles, shipped_pole_sets
from .structure import plant_structure, values_text

__all__ = ["COMPENSATOR_CLOSED_FORM_MAX_ORDER", "RefineHook", "closed_form_stage", "derive"]

#: Closed-form transfer function of the compensator up to this order.
COMPENSATOR_CLOSED_FORM_MAX_ORDER = 3

#: ``refine(design, ctrl, num, pole_sets) -> (PoleChoice, refinement)``: the refinement of a
#: specification-based :class:`PoleChoice` (see :func:`derive`).
RefineHook = Callable[[Design, PoleChoice, NumericPlant, Callable], tuple[PoleChoice, Any]]


# --------------------------------------------------------------------------
# The symbolic stages
# --------------------------------------------------------------------------
def closed_form_stage(design: Design, ctrl: PoleChoice, obs: PoleChoice) -> cf.ClosedForms:
    """K, L, the structure matrices and the reference gain in closed form (the first stage of
    the bounded child)."""
    p = design.plant
    return cf.closed_forms(
        sp.Matrix(p.A),
        sp.Matrix(p.B),
        sp.Matrix(p.C),
        sp.Matrix(p.D),
        design.tracking.output,
        ctrl.coefficients,
        obs.coefficients,
    )


def _separated_stage(
    design: Design, K: sp.Matrix, L: sp.Matrix, ctrl: PoleChoice, obs: PoleChoice
) -> cf.SeparatedForms:
    p = design.plant
    return cf.separated_forms(
        sp.Matrix(p.A),
        sp.Matrix(p.B),
        sp.Matrix(p.C),
        sp.Matrix(p.D),
        K,
        L,
        ctrl.coefficients,
        obs.coefficients,
        compensator=p.order <= COMPENSATOR_CLOSED_FORM_MAX_ORDER,
    )


def _numeric_plant(design: Design) -> NumericPlant:
    values = design.values
    mats = {}
    for name in ("A", "B", "C", "D"):
        M = getattr(design.plant, name)
        val = evaluate_matrix(M, values)
        bad = np.argwhere(~np.isfinite(val))
        if bad.size:
            i, j = bad[0]
            raise DesignFileError(
                f"'{M[i, j]}' is not a finite real number at the evaluated parameter values"
                f" ({values_text(design)})",
                design.path,
                f"plant.{name}[{i}][{j}]",
            )
        mats[name] = val
    return NumericPlant(**mats)


class _Budget:
    """One time budget shared by the symbolic stages of a derivation (a deadline)."""

    def __init__(self, seconds: float):
        self.unbounded = seconds <= 0
        self.seconds = seconds
        self.deadline = time.monotonic() + seconds

    def run_steps(
        self, func, args, whats: tuple[str, ...], notes: list[str], reported: int | None = None
    ):
        """Successive stages in one child (one fork): results (None where missing), the
        seconds each took, and why the missing ones are missing (None when none is).

        A note is added when one of the first ``reported`` stages (default: all) is
        missing; the callers of the later ones report those themselves."""
        reported = len(whats) if reported is None else reported
        left = None if self.unbounded else self.deadline - time.monotonic()
        if left is not None and left <= 0.05:
            notes.append(
                f"{whats[0]} was skipped: the symbolic budget of {self.seconds:g} s was used up;"
                " numeric results are given instead of closed forms"
            )
            return [None] * len(whats), [0.0] * len(whats), f"{whats[0]} was skipped"
        results, at, stopped = run_bounded_steps(func, args, seconds=left, what=whats[0])
        took = [b - a for a, b in zip([0.0, *at], at, strict=False)]
        reason = None
        if stopped is not None and len(results) < len(whats):
            what = whats[len(results)]
            reason = str(stopped).replace(whats[0], what)
            if "did not finish" in reason:
                reason = f"{what} did not finish within {self.seconds:g} s"
            if len(results) < reported:
                notes.append(
                    f"{reason} (the symbolic budget, options.symbolic_budget_seconds);"
                    " numeric results are given instead of closed forms"
                )
        pad = len(whats) - len(results)
        return list(results) + [None] * pad, took + [0.0] * pad, reason


def _symbolic_stages(design: Design, ctrl: PoleChoice, obs: PoleChoice, after=()):
    """The closed forms, then the separated loop built from them (None when there are no
    closed-form gains), then each of ``after`` called with the closed-form K or None (a
    generator: each stage is kept as soon as it is done, see
    :func:`symbolic.runtime.budget.run_bounded_steps`)."""
    forms = closed_form_stage(design, ctrl, obs)
    yield forms
    if forms.controller is not None and forms.observer is not None:
        yield _separated_stage(design, forms.controller.gain, forms.observer.gain.T, ctrl, obs)
    else:
        yield None
    for step in after:
        yield step(forms.controller.gain if forms.controller is not None else None)


# --------------------------------------------------------------------------
# The workflow
# --------------------------------------------------------------------------
def derive(
    design: Design, *, budget: float | None = None, refine: RefineHook | None = None
) -> Derivation:
    """Derive K, L, the reference gain and the separated loop, and check them.

    Parameters
    ----------
    design : Design
        From :func:`symbolic.load_design`.
    budget : float, optional
        Seconds allowed for all symbolic stages together (default: the design
        file's ``options.symbolic_budget_seconds``, 10 s).  Zero or negative
        runs the symbolic stages in this process without a limit.
    refine : callable, optional
        ``refine(design, ctrl, num, pole_sets) -> (PoleChoice, refinement)``, called for
        controller poles from specifications when ``[controller] refine`` is true: ``ctrl``
        is the :class:`PoleChoice` from the specifications, ``num`` the plant at the evaluated
        values and ``pole_sets`` the poles of the shipped loop by the design's rules for a
        dominant pair (:func:`symbolic.derivation.pole_rules.shipped_pole_sets`).  The refined
        choice replaces ``ctrl`` and ``refinement`` is recorded; it must have the attributes
        ``met`` and ``sentence`` (:class:`symbolic.verification.refine.Refinement`).
        Default: no refinement (:func:`symbolic.derive` passes
        :func:`symbolic.verification.refine.refine_controller_poles`).

    Returns
    -------
    Derivation

    Raises
    ------
    StructureError
        When the plant is uncontrollable or unobservable at the evaluated
        parameter values.
    """
    t0 = time.perf_counter()
    ctrl = select_controller_poles(design)
    num = _numeric_plant(design)
    refinement = None
    if refine is not None and ctrl.origin == "specifications" and design.controller.refine:
        ctrl, refinement = refine(design, ctrl, num, shipped_pole_sets(design, ctrl))
    obs = select_observer_poles(design, ctrl)
    pending = start_extensions(design, ctrl, obs, num, budget)
    try:
        result = _derive(design, budget, ctrl, obs, num, pending, t0)
        if refinement is not None:
            notes = result.notes
            if not refinement.met:
                notes = notes + (
                    "the specifications are not all met on the simulated step of the shipped"
                    " loop: dominant pair " + refinement.sentence,
                )
            result = dataclasses.replace(result, refinement=refinement, notes=notes)
        return add_extensions(result, budget, pending)
    except BaseException:
        cancel_extensions(pending)
        raise


def _derive(
    design: Design,
    budget: float | None,
    ctrl: PoleChoice,
    obs: PoleChoice,
    num: NumericPlant,
    pending: dict,
    t0: float,
) -> Derivation:
    """:func:`derive` without the extensions; the main symbolic child also runs the steps
    in ``pending`` that are callables, and replaces each by its outcome."""
    timings: dict[str, float] = {}
    notes: list[str] = []
    checks: list[Check] = []
    m, p = design.plant.n_inputs, design.plant.n_outputs
    values = design.values
    forms, sep_forms = _closed_forms(design, budget, ctrl, obs, pending, notes, timings)
    controllability, observability = plant_structure(design, forms, num, notes)
    K, L = feedback_gains(design, forms, num, ctrl, obs, notes, checks)
    pole_checks(num, K, L, ctrl, obs, notes, checks)
    checks.extend(optimal_checks(num, K, L, ctrl, obs))
    separated = separated_loop(num, K, L, ctrl, obs, sep_forms, checks)
    A, B, C, D = num.A, num.B, num.C, num.D
    reference = reference_gain(design, forms, A, B, C, D, K.value, values, checks, notes)
    comp = compensator(A, B, C, D, K.value, L.value, sep_forms, values, checks)
    _design_notes(ctrl, obs, K, L, notes)
    timings["total"] = time.perf_counter() - t0
    return Derivation(
        design=design,
        plant=num,
        controller_poles=ctrl,
        observer_poles=obs,
        controllability=controllability,
        observability=observability,
        K=K,
        L=L,
        reference=reference,
        separated=separated,
        compensator=comp,
        checks=tuple(checks),
        notes=tuple(notes),
        closed_form=forms is not None and (m == 1 or p == 1),
        plant_charpoly=forms.plant_charpoly if forms else None,
        timings=timings,
    )


def _closed_forms(
    design: Design,
    budget: float | None,
    ctrl: PoleChoice,
    obs: PoleChoice,
    pending: dict,
    notes: list[str],
    timings: dict[str, float],
) -> tuple[cf.ClosedForms | None, cf.SeparatedForms | None]:
    """The closed forms and the separated loop, in one bounded child that also runs the
    callable steps of ``pending`` (each replaced by its outcome); None where missing."""
    symbolic_budget = _Budget(design.symbolic_budget_seconds if budget is None else budget)
    m, p = design.plant.n_inputs, design.plant.n_outputs
    forms = sep_forms = None
    timings["closed_form"] = timings["separated"] = 0.0
    after = {k: job for k, job in pending.items() if isinstance(job, functools.partial)}
    if m == 1 or p == 1:
        whats = (
            "the closed-form derivation",
            "the separated-loop derivation",
            *(f"the closed form of the {key.replace('_', ' ')}" for key in after),
        )
        try:
            results, took, reason = symbolic_budget.run_steps(
                _symbolic_stages,
                (design, ctrl, obs, tuple(after.values())),
                whats,
                notes,
                reported=2,
            )
        except StructureError as exc:
            raise StructureError(exc.problem, design.path, exc.key) from exc
        forms, sep_forms = results[0], results[1]
        timings["closed_form"], timings["separated"] = took[0], took[1]
        for key, outcome, what in zip(after, results[2:], whats[2:], strict=True):
            pending[key] = (
                outcome
                if outcome is not None
                else Outcome(error=BudgetExceeded(f"{what} did not run ({reason})"))
            )
    else:
        for key in after:
            del pending[key]
    return forms, sep_forms


def _design_notes(
    ctrl: PoleChoice, obs: PoleChoice, K: GainResult, L: GainResult, notes: list[str]
) -> None:
    """Notes on the observer's speed and on gains that are not unique."""
    slow_c = min(abs(complex(z).real) for z in ctrl.values)
    slow_o = min(abs(complex(z).real) for z in obs.values)
    if slow_o < 2 * slow_c:
        notes.append(
            f"the slowest observer pole decays only {slow_o / slow_c:.2g} times as fast as the"
            " slowest controller pole; estimation errors will show in the response (common"
            " practice, no source: make the observer 2 to 6 times faster)"
        )
    if not K.unique:
        notes.append("several inputs: K is one of many gains that place these poles (not unique)")
    if not L.unique:
        notes.append("several outputs: L is one of many gains that place these poles (not unique)")
