"""The extensions of a derivation: integral action, the reduced-order observer, the digital
controller.

Each builds on a finished :class:`~symbolic.model.results.Derivation`, but its closed forms
start at once (:func:`start_extensions`) so that they run beside the main symbolic stage;
:func:`add_extensions` collects them into the derivation, with their checks and notes.
"""

from __future__ import annotations

import dataclasses
import functools
import time
import warnings

from ..model.design import Design
from ..model.results import Derivation, NumericPlant, PoleChoice
from ..runtime.errors import GainsmithWarning
from .digital import digital_controller
from .gains_in_z import start_closed_forms
from .integral import integral_action
from .integral_forms import start_closed_form
from .reduced import closed_form_outcome, reduced_observer

__all__ = ["add_extensions", "cancel_extensions", "start_extensions"]


def start_extensions(
    design: Design, ctrl: PoleChoice, obs: PoleChoice, num: NumericPlant, budget: float | None
) -> dict:
    """The closed forms of the extensions the design asks for, started now so that they run
    beside the main symbolic stage: the integral action's and the digital controller's in
    children of their own, the reduced observer's (which needs the closed-form K) as a
    callable for the main stage's child to run after K.  Keyed by the
    :class:`Derivation` field each belongs to."""
    pending: dict = {}
    if design.tracking.method == "integral":
        job = start_closed_form(design, ctrl.poles, budget=budget)
        if job is not None:
            pending["integral"] = job
    if design.discrete is not None:
        job = start_closed_forms(design, ctrl.poles, obs.poles, budget=budget)
        if job is not None:
            pending["discrete"] = job
    if design.observer.kind == "reduced":
        pending["reduced_observer"] = functools.partial(
            closed_form_outcome, design, num.C, obs.poles, ctrl.coefficients
        )
    return pending


def cancel_extensions(pending: dict) -> None:
    """Stop the children that :func:`start_extensions` started."""
    for job in pending.values():
        if not isinstance(job, functools.partial):
            job.cancel()


def add_extensions(d: Derivation, budget: float | None, pending: dict) -> Derivation:
    """Integral action, reduced-order observer and digital controller, when the design asks.

    Their checks and notes join the derivation's (their warnings are carried as notes).
    """
    design = d.design
    if not (
        design.tracking.method == "integral"
        or design.observer.kind == "reduced"
        or design.discrete is not None
    ):
        return d
    extra: dict = {}
    t = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GainsmithWarning)
        if design.tracking.method == "integral":
            extra["integral"] = integral_action(d, budget=budget, pending=pending.get("integral"))
        if design.observer.kind == "reduced":
            extra["reduced_observer"] = reduced_observer(
                d, budget=budget, pending=pending.get("reduced_observer")
            )
        if design.discrete is not None:
            extra["discrete"] = digital_controller(
                d, budget=budget, pending=pending.get("discrete")
            )
    d.timings["extensions"] = time.perf_counter() - t
    parts = list(extra.values())
    return dataclasses.replace(
        d,
        checks=d.checks + tuple(c for x in parts for c in x.checks),
        notes=d.notes + tuple(n for x in parts for n in x.notes),
        **extra,
    )
