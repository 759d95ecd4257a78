"""Robustness of a finished design: parameter mismatch, gain sensitivities, stability margins.

The controller (K, N) and the observer (L) are designed at the nominal
parameter values (:func:`symbolic.derive`).  The true plant has other values
(A_t, B_t, C_t, D_t); the observer keeps the nominal model (A, B, C, D).

The mismatched loop
-------------------
With the plant ẋ = A_t x + B_t u, y = C_t x + D_t u, the observer
x̂' = A x̂ + B u + L (y − C x̂ − D u) and the control u = −K x̂ + N r, the
estimation error e = x − x̂ obeys (derived step by step in
:func:`~symbolic.analysis.mismatch.mismatch_loop`; ΔA = A_t − A and so on)::

    ẋ = (A_t − B_t K) x + B_t K e + B_t N r
    ė = (ΔA − ΔB K − L (ΔC − ΔD K)) x + (A − L C + (ΔB − L ΔD) K) e + (ΔB − L ΔD) N r

The lower-left block, the *coupling* ΔA − ΔB K − L (ΔC − ΔD K), is what
breaks the separation principle: it vanishes when the true plant equals the
model, and the matrix becomes the block-triangular separated loop whose
eigenvalues are the controller and observer poles.

The study
---------
* eigenvalues of the 2n mismatched loop over a grid of the parameter ranges
  (``points`` values per parameter with a range, which includes all 2^k
  corners; parameters without a range stay nominal), plus the nominal point;
* the Routh–Hurwitz conditions of the state-feedback loop A_t − B_t K (K
  fixed at its nominal value) in closed form in the true parameters for
  n ≤ 3, and a numeric stability boundary on the grid otherwise;
* normalised sensitivities (p/g)·∂g/∂p of every gain entry g to every
  parameter p, in closed form and at the nominal values;
* gain, phase and delay margins of the loop broken at the plant input, for
  state feedback with the true state and for the observer-based
  compensator (:mod:`symbolic.analysis.margins`), side by side.

The parts live in :mod:`symbolic.analysis.parameter_grid`, :mod:`symbolic.analysis.mismatch`,
:mod:`symbolic.analysis.routh` and :mod:`symbolic.analysis.sensitivity`; this module runs
them together (:func:`robustness_study`).  The report is rendered by
:mod:`symbolic.render.robust_pages` (terminal, JSON) and :mod:`symbolic.render.robust_memo`.

Caution: every number here describes the linear model.  Before a loop built
from these gains drives a machine that moves, heats or flies, test it on the
real plant with reduced limits and an independent emergency stop; a design
that is robust on paper can still fail through saturation, sampling delay,
sensor noise or dynamics the model leaves out.

References
----------
.. [1] E. J. Routh, *A Treatise on the Stability of a Given State of
   Motion*, Macmillan, 1877.
.. [2] A. Hurwitz, "Ueber die Bedingungen, unter welchen eine Gleichung nur
   Wurzeln mit negativen reellen Theilen besitzt", *Mathematische Annalen*
   46:273–284, 1895. doi:10.1007/BF01446812
.. [3] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010,
   Sec. 5-6 (Routh's stability criterion) and Sec. 10-5 (observer-based
   control, the separation of controller and observer poles).
.. [4] D. G. Luenberger, "An introduction to observers", *IEEE Transactions
   on Automatic Control* 16(6):596–602, 1971. doi:10.1109/TAC.1971.1099826
.. [5] P. M. Frank, *Introduction to System Sensitivity Theory*, Academic
   Press, 1978, Ch. 2 (the normalised, or relative, sensitivity
   (p/g)·∂g/∂p).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any

from ..model.results import Check, Derivation
from ..verification.shipped_assembly import shipped_controller
from .certify import box_certificates
from .margins import MarginComparison, compare_margins
from .mismatch import MismatchStudy, mismatch_study
from .routh import StateFeedbackStability, state_feedback_stability
from .sensitivity import SensitivityTable, gain_sensitivities
from .verdict import robustness_table

__all__ = ["CAUTION", "RobustnessReport", "robustness_study"]


@dataclass(frozen=True)
class RobustnessReport:
    """Everything ``gainsmith robustness`` reports."""

    derivation: Derivation
    mismatch: MismatchStudy
    stability: StateFeedbackStability
    sensitivities: SensitivityTable
    margins: MarginComparison | None
    checks: tuple[Check, ...]
    notes: tuple[str, ...]
    points: int
    timings: dict[str, float] = field(default_factory=dict, compare=False)
    #: the shipped controller's stability (nominal, over the ranges) and margins
    #: (:func:`symbolic.analysis.verdict.robustness_table`); None when not computed
    shipped: Any = None
    #: certified stability over the box (:func:`symbolic.analysis.certify.box_certificates`);
    #: None without ranges
    certificate: Any = None

    @property
    def passed(self) -> bool:
        """No unstable point, margins computed, every check passed, and the shipped controller
        stable over the ranges with its margins met."""
        return (
            self.mismatch.all_stable
            and self.margins is not None
            and all(c.passed is not False for c in self.checks)
            and (self.shipped is None or self.shipped.passed)
        )

    def _repr_html_(self) -> str:  # Jupyter: the shipped controller's requirements rows
        verdict = "passed" if self.passed else "NOT passed"
        rows = "" if self.shipped is None else self.shipped._repr_html_()
        return f"<p><b>robustness {verdict}</b></p>{rows}"


CAUTION = (
    "These results describe the linear model. Before a loop built from these gains drives a"
    " machine that moves, heats or flies, test it on the real plant with reduced limits and an"
    " independent emergency stop: saturation, sampling delay, sensor noise and unmodelled dynamics"
    " erode these margins."
)


def robustness_study(
    d: Derivation, points: int = 5, *, budget: float | None = None, factor: bool = True
) -> RobustnessReport:
    """Mismatch study, Routh–Hurwitz conditions, sensitivities and margins of a derivation.

    The sensitivities always come from :func:`gain_sensitivities` with the exact
    derivatives of the closed-form gains when these exist, so ``gainsmith robustness`` and
    the memo print the same numbers; ``factor=False`` (the memo, which prints the
    sensitivities as numbers only) merely skips factoring their formulas for display.
    """
    timings = {}
    t = time.perf_counter()
    study = mismatch_study(d, points)
    timings["mismatch"] = time.perf_counter() - t
    t = time.perf_counter()
    stability = state_feedback_stability(d, study)
    timings["routh_hurwitz"] = time.perf_counter() - t
    t = time.perf_counter()
    sens = gain_sensitivities(d, budget=budget, factor=factor)
    timings["sensitivities"] = time.perf_counter() - t
    t = time.perf_counter()
    notes: list[str] = list(sens.notes)
    margins = None
    if d.plant.B.shape[1] == 1:
        margins = compare_margins(d)
        notes.extend(margins.notes)
        for r in (margins.state_feedback, margins.observer_based):
            notes.extend(r.notes)
    else:
        notes.append(
            "stability margins are computed for single-input plants only (the loop broken at the"
            " plant input); this plant has several inputs"
        )
    timings["margins"] = time.perf_counter() - t
    checks = list(study.checks)
    if margins is not None:
        checks.extend(margins.checks)
        checks.extend(margins.state_feedback.checks)
        checks.extend(margins.observer_based.checks)
    if not study.grid.varied:
        notes.append("no parameter has a range: the mismatch study has only the nominal point")
    t = time.perf_counter()
    ctrl = shipped_controller(d)
    shipped = robustness_table(d, ctrl, points)
    timings["shipped"] = time.perf_counter() - t
    return RobustnessReport(
        shipped=shipped,
        certificate=box_certificates(d, ctrl),  # kept from the table's rows (same controller)
        derivation=d,
        mismatch=study,
        stability=stability,
        sensitivities=sens,
        margins=margins,
        checks=tuple(checks),
        notes=tuple(notes),
        points=points,
        timings=timings,
    )
