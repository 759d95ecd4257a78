"""The requirements table: one numbered row per requirement, judged on the shipped controller.

Every verdict of gainsmith comes from here: ``simulate``, ``memo`` and ``robustness`` print the
same rows (:class:`~symbolic.analysis.requirements.RequirementTable`) and exit with 1 when any
row fails.  The rows are

* each time-domain specification of ``[controller.specifications]``, measured on the simulated
  step response of the shipped loop (matched initial estimate; with ``[simulation] u_max`` the
  input is limited, as on the machine);
* the actuator limit: peak ``|u|`` of the linear shipped loop over the matched and the
  mismatched-estimate runs, against ``u_max``;
* zero steady-state error of the tracked output (exact DC gain of the shipped loop);
* closed-loop stability of the shipped loop at the nominal parameters, and its poles against
  the requested ones;
* stability of the shipped loop over the declared parameter ranges (a grid with every corner:
  evidence, not a proof);
* the same, certified over the whole box (gains fixed, and gain-scheduled): proved, a
  counterexample, or undecided -- only a proof passes (:mod:`symbolic.analysis.certify`);
* gain and phase margins of the shipped loop broken at the plant input (single input);
* estimator speed: the slowest observer pole at least twice as fast as the slowest controller
  pole;
* for a design written as a nonlinear ``[model]``: reference steps and the recovery from
  initial offsets on the nonlinear plant (:mod:`symbolic.analysis.nonlinear_rows`);
* every numeric and symbolic cross-check of the derivation, and the hand-calculated claims.

The thresholds that no design file states (margins, estimator speed) are common practice and
are marked so in the table.  "Every requirement met" is written only when every row passes.

Caution: the table describes the linear model and the simulation.  A controller for a machine
that moves, heats or flies must also be tested on the hardware with reduced limits and an
independent stop, and checked against the applicable standards, local codes and licensed
practice.
"""

from __future__ import annotations

import math

import numpy as np

from ..derivation.numeric import check_eigenvalues
from ..verification.shipped import ShippedController, closed_loop, poles_stable
from .certify import box_certificates
from .margins import MarginReport
from .nonlinear_rows import nonlinear_rows
from .nonlinear_study import nonlinear_study
from .requirements import Requirement, RequirementTable
from .shipped_stability import RangeStability, range_stability, shipped_margins

__all__ = [
    "GAIN_MARGIN_DB",
    "PHASE_MARGIN_DEG",
    "ESTIMATOR_SPEED_RATIO",
    "requirement_table",
    "robustness_table",
]

#: Smallest acceptable gain margin, both directions, dB (common practice, no source).
GAIN_MARGIN_DB = 6.0
#: Smallest acceptable phase margin, degrees (common practice, no source).
PHASE_MARGIN_DEG = 30.0
#: The slowest observer pole at least this many times faster than the slowest controller pole
#: (common practice, no source; textbooks quote 2 to 6).
ESTIMATOR_SPEED_RATIO = 2.0
#: Relative slack of an upper-bound comparison (round-off of the measurement).
SLACK = 1e-9

_COMMON = "common practice, no source"


def _g(x: float, digits: int = 4) -> str:
    return f"{float(x):.{digits}g}"


# --------------------------------------------------------------------------------------------
# The table
# --------------------------------------------------------------------------------------------
def _upper_bound_row(key, label, unit, requested, value, basis, source) -> dict:
    if value is None:
        achieved, passed, short = "not reached in the run", False, "the response never got there"
        if key == "peak_time":
            achieved, passed, short = "no peak (no overshoot)", True, ""
    else:
        passed = value <= requested * (1 + SLACK)
        achieved = f"{_g(value)}{unit}"
        short = ""
        if not passed:
            excess = value - requested
            short = f"{_g(excess, 3)}{unit} over the limit of {_g(requested)}{unit}" + (
                f" ({100 * excess / requested:.3g} %)" if requested > 0 else ""
            )
    return dict(
        key=key,
        label=label,
        requested=f"≤ {_g(requested)}{unit}",
        achieved=achieved,
        passed=passed,
        shortfall=short,
        basis=basis,
        source=source,
        requested_value=requested,
        achieved_value=value,
    )


_SPEC_ROWS = (
    ("overshoot_percent", "overshoot", " %", "overshoot_percent"),
    ("settling_time", "settling time", " s", None),
    ("rise_time", "rise time (10-90 %)", " s", "rise_time"),
    ("peak_time", "peak time", " s", "peak_time"),
)


def _spec_rows(d, study) -> list[dict]:
    spec = d.design.controller.specifications
    if spec is None:
        return []
    judged = study.judged
    limited = judged.response.saturated
    basis = "simulated step of the shipped loop, matched estimate" + (
        ", input limited to ±u_max" if limited else ""
    )
    rows = []
    for key, label, unit, field in _SPEC_ROWS:
        requested = getattr(spec, key)
        if requested is None:
            continue
        if key == "settling_time":
            band = spec.settling_band
            label = f"settling time ({band * 100:g} % band)"
            field = "settling_time_2pct" if band >= 0.02 else "settling_time_1pct"
        value = getattr(judged.metrics, field)
        if key == "overshoot_percent" and value is None and judged.metrics.final_value is not None:
            value = 0.0
        rows.append(
            _upper_bound_row(
                key,
                label,
                unit,
                float(requested),
                value,
                basis,
                f"[controller.specifications] {key}",
            )
        )
    return rows


def _actuator_row(d, study, unit: str) -> dict | None:
    u_max = d.design.simulation.u_max
    if u_max is None:
        return None
    runs = [c for c in study.cases if c.response.slug != "state_feedback"]
    peaks = [(c.metrics.peak_control or 0.0, c.response.name) for c in runs]
    peak, where = max(peaks)
    u = f" {unit}" if unit else ""
    passed = peak <= u_max * (1 + SLACK)
    return dict(
        key="actuator_limit",
        label="actuator limit (peak input)",
        requested=f"|u| ≤ {_g(u_max)}{u}",
        achieved=f"{_g(peak)}{u} ({where})",
        passed=passed,
        shortfall=""
        if passed
        else f"the linear loop asks for {_g(peak)}{u}, {_g(peak / u_max, 3)} times the limit",
        basis="simulated step of the linear shipped loop, matched and mismatched estimate",
        source="[simulation] u_max",
        requested_value=float(u_max),
        achieved_value=float(peak),
    )


def _steady_state_row(study) -> dict:
    final = study.judged_linear.metrics.final_value
    r = study.reference
    if final is None:
        return dict(
            key="steady_state_error",
            label="steady-state error of the tracked output",
            requested="0",
            achieved="no steady state (loop not stable)",
            passed=False,
            shortfall="the loop has no steady state",
            basis="DC gain of the shipped loop",
            source=_COMMON,
        )
    err = r - final
    passed = abs(err) <= 1e-6 * max(1.0, abs(r))
    return dict(
        key="steady_state_error",
        label="steady-state error of the tracked output",
        requested="0 (relative 1e-6)",
        achieved=f"{_g(err, 3)}" if abs(err) > 1e-12 * max(1.0, abs(r)) else "0",
        passed=passed,
        shortfall="" if passed else f"the output settles at {_g(final)} for a step of {_g(r)}",
        basis="exact DC gain of the shipped loop",
        source="tracking of the reference (" + _COMMON + ")",
        requested_value=0.0,
        achieved_value=float(err),
    )


def _stability_rows(ctrl: ShippedController) -> list[dict]:
    poles = ctrl.closed_loop_poles
    stable = poles_stable(poles, ctrl.digital)
    if ctrl.digital:
        measure = float(np.max(np.abs(poles)))
        achieved = f"largest |z| = {_g(measure)}"
        requested = "all |z| < 1"
    else:
        measure = float(np.max(poles.real))
        achieved = f"slowest Re(s) = {_g(measure)} 1/s"
        requested = "all Re(s) < 0"
    rows = [
        dict(
            key="nominal_stability",
            label="closed-loop stability, nominal plant",
            requested=requested,
            achieved=achieved,
            passed=stable,
            shortfall="" if stable else "the shipped loop is unstable at the nominal parameters",
            basis="eigenvalues of the shipped loop (plant and controller)",
            source="stability",
            achieved_value=measure,
        )
    ]
    want = ctrl.requested_poles
    F, _G = closed_loop(ctrl)
    check = check_eigenvalues(F, want, achieved=poles)
    res, tol, ok = check.residual, check.tolerance, check.passed
    rows.append(
        dict(
            key="closed_loop_poles",
            label="closed-loop poles as requested",
            requested=f"{len(want)} poles (controller and observer)",
            achieved=f"largest relative deviation {res:.2g}",
            passed=bool(ok),
            shortfall="" if ok else f"deviation {res:.2g} exceeds the tolerance {tol:.1g}",
            basis="eigenvalues of the shipped loop against the requested poles"
            + (" (z = e^{sT})" if ctrl.digital else "")
            + (f"; {check.explanation}" if check.explanation else ""),
            source="[controller] and [observer] poles",
            requested_value=float(tol),
            achieved_value=float(res),
        )
    )
    return rows


def _range_row(rs: RangeStability | None) -> dict | None:
    if rs is None:
        return None
    what = "|z|" if rs.digital else "Re(s)"
    where = ", ".join(
        f"{k} = {_g(v, 6)}" for k, v in (rs.worst_point or {}).items() if k in rs.varied
    )
    return dict(
        key="parameter_ranges",
        label="stability over the parameter ranges",
        requested="stable at every grid point",
        achieved=(
            f"stable at all {rs.points} points"
            if rs.passed
            else f"unstable at {rs.unstable_count} of {rs.points} points"
        ),
        passed=rs.passed,
        shortfall=""
        if rs.passed
        else f"least stable at {where}: largest {what} = {_g(rs.worst_measure)}",
        basis=(
            f"grid of {rs.per_axis} values per range over {', '.join(rs.varied)}, corners"
            " included, gains fixed at the nominal design (a grid is evidence, not a proof)"
        ),
        source="[parameters] ranges",
        achieved_value=rs.worst_measure,
    )


def _certificate_rows(d, ctrl: ShippedController) -> list[dict]:
    """Certified stability over the box of the ranges, gains fixed and gain-scheduled
    (:mod:`symbolic.analysis.certify`); no row for a case the method does not cover."""
    report = box_certificates(d, ctrl)
    return [] if report is None else report.requirement_rows()


def _margin_rows(ctrl: ShippedController, margins: MarginReport | None, why: str) -> list[dict]:
    basis = "loop broken at the plant input, shipped controller" + (
        " (discrete loop, bilinear map to the w-plane)" if ctrl.digital else ""
    )
    if margins is None:
        return [
            dict(
                key="margins",
                label="gain and phase margins",
                requested=f"≥ {GAIN_MARGIN_DB:g} dB, ≥ {PHASE_MARGIN_DEG:g}°",
                achieved=f"not computed: {why}",
                passed=False,
                shortfall=f"not assessed ({why}); assess the margins another way",
                basis=basis,
                source=_COMMON,
            )
        ]
    lo, hi = margins.gain_margin_db_lower, margins.gain_margin_db_upper
    parts, worst = [], math.inf
    for name, v in (("down", lo), ("up", hi)):
        if v is None:
            parts.append(f"{name} unlimited")
        else:
            parts.append(f"{name} {v:.3g} dB")
            worst = min(worst, v)
    gm_ok = margins.closed_loop_stable and worst >= GAIN_MARGIN_DB
    pm = margins.phase_margin_deg
    pm_ok = margins.closed_loop_stable and (pm is None or pm >= PHASE_MARGIN_DEG)
    rows = [
        dict(
            key="gain_margin",
            label="gain margin",
            requested=f"≥ {GAIN_MARGIN_DB:g} dB both ways",
            achieved=", ".join(parts),
            passed=gm_ok,
            shortfall=""
            if gm_ok
            else (
                "the loop is not stable at unit gain"
                if not margins.closed_loop_stable
                else f"{GAIN_MARGIN_DB - worst:.3g} dB short"
            ),
            basis=basis,
            source=_COMMON,
            requested_value=GAIN_MARGIN_DB,
            achieved_value=None if worst == math.inf else worst,
        ),
        dict(
            key="phase_margin",
            label="phase margin",
            requested=f"≥ {PHASE_MARGIN_DEG:g}°",
            achieved="no gain crossover"
            if pm is None
            else f"{pm:.3g}°"
            + (
                f" at {margins.crossover_rad_s:.4g} rad/s"
                if margins.crossover_rad_s is not None and not ctrl.digital
                else ""
            ),
            passed=pm_ok,
            shortfall=""
            if pm_ok
            else (
                "the loop is not stable at unit gain"
                if not margins.closed_loop_stable
                else f"{PHASE_MARGIN_DEG - pm:.3g}° short"
            ),
            basis=basis,
            source=_COMMON,
            requested_value=PHASE_MARGIN_DEG,
            achieved_value=pm,
        ),
    ]
    return rows


def _speed_row(ctrl: ShippedController) -> dict | None:
    if ctrl.observer_poles.size == 0:
        return None
    slow_c = float(np.min(np.abs(np.real(ctrl.controller_poles))))
    slow_o = float(np.min(np.abs(np.real(ctrl.observer_poles))))
    ratio = slow_o / slow_c if slow_c > 0 else math.inf
    ok = ratio >= ESTIMATOR_SPEED_RATIO * (1 - SLACK)
    return dict(
        key="estimator_speed",
        label="estimator faster than the controller",
        requested=f"slowest observer pole ≥ {ESTIMATOR_SPEED_RATIO:g}× slowest controller pole",
        achieved=f"{_g(ratio, 3)}× ({ctrl.observer})",
        passed=ok,
        shortfall="" if ok else f"ratio {_g(ratio, 3)} < {ESTIMATOR_SPEED_RATIO:g}",
        basis="real parts of the s-plane poles of the shipped observer and of the state feedback",
        source=_COMMON,
        requested_value=ESTIMATOR_SPEED_RATIO,
        achieved_value=ratio,
    )


def _checks_row(d) -> dict:
    ran = [c for c in d.checks if c.passed is not None]
    failed = [c.name for c in ran if c.passed is False]
    ok = not failed
    return dict(
        key="cross_checks",
        label="symbolic and numeric cross-checks",
        requested="every check passes",
        achieved=f"{len(ran) - len(failed)} of {len(ran)} passed",
        passed=ok,
        shortfall=""
        if ok
        else "failed: " + "; ".join(failed[:3]) + (" …" if len(failed) > 3 else ""),
        basis="the Verification checks of the derivation",
        source="gainsmith",
    )


def _claims_row(claims) -> dict | None:
    if claims is None:
        return None
    wrong = [v.name for v in claims.verdicts if not v.holds]
    ok = not wrong
    return dict(
        key="claims",
        label="hand-calculated claims",
        requested="every claimed value confirmed",
        achieved=f"{len(claims.verdicts) - len(wrong)} of {len(claims.verdicts)} confirmed",
        passed=ok,
        shortfall="" if ok else "not confirmed: " + ", ".join(wrong),
        basis="the [claimed] table against the derivation",
        source="[claimed]",
    )


def robustness_table(d, ctrl: ShippedController, points: int = 5) -> RequirementTable:
    """The rows of the requirements table that ``gainsmith robustness`` judges: stability of
    the shipped loop at the nominal plant and over the ranges (``points`` per range), and its
    margins."""
    raw = _stability_rows(ctrl)
    raw.append(_range_row(range_stability(d, ctrl, points)))
    raw.extend(_certificate_rows(d, ctrl))
    raw.extend(_margin_rows(ctrl, *shipped_margins(ctrl)))
    rows = tuple(
        Requirement(number=f"R{i}", **row)
        for i, row in enumerate((r for r in raw if r is not None), start=1)
    )
    return RequirementTable(ctrl.description, rows)


def requirement_table(
    d,
    study,
    *,
    ranges: RangeStability | None = None,
    margins: tuple[MarginReport | None, str] | None = None,
    claims=None,
    nonlinear=None,
) -> RequirementTable:
    """Assemble the numbered rows for a derivation and its simulation study.

    Parameters
    ----------
    d : Derivation
    study : SimulationStudy
        From :func:`symbolic.analysis.study.simulation_study` (holds the shipped controller).
    ranges : RangeStability, optional
        Default: computed here (:func:`range_stability`).
    margins : (MarginReport or None, reason), optional
        Default: computed here (:func:`shipped_margins`).
    claims : ClaimReport, optional
        The ``[claimed]`` check, when the design file has one.
    nonlinear : NonlinearStudy, optional
        For a design written as a ``[model]``; default: computed here
        (:func:`~symbolic.analysis.nonlinear_study.nonlinear_study`).
    """
    ctrl = study.controller
    if ranges is None:
        ranges = range_stability(d, ctrl)
    if margins is None:
        margins = shipped_margins(ctrl)
    unit = d.design.plant.inputs[0].unit or ""
    raw = _spec_rows(d, study)
    raw.append(_actuator_row(d, study, unit))
    raw.append(_steady_state_row(study))
    raw.extend(_stability_rows(ctrl))
    raw.append(_range_row(ranges))
    raw.extend(_certificate_rows(d, ctrl))
    raw.extend(_margin_rows(ctrl, *margins))
    raw.append(_speed_row(ctrl))
    if d.design.model is not None:
        if nonlinear is None:
            nonlinear = nonlinear_study(d, ctrl, study.horizon)
        raw.extend(nonlinear_rows(d, nonlinear))
    raw.append(_checks_row(d))
    raw.append(_claims_row(claims))
    rows = tuple(
        Requirement(number=f"R{i}", **row)
        for i, row in enumerate((r for r in raw if r is not None), start=1)
    )
    return RequirementTable(ctrl.description, rows)
