"""The requirements table: one numbered row per requirement, judged on the shipped controller.

Every verdict of gainsmith comes from here: ``simulate``, ``memo`` and ``robustness`` print the
same rows and exit with 1 when any row fails.  The rows are

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
* gain and phase margins of the shipped loop broken at the plant input (single input);
* estimator speed: the slowest observer pole at least twice as fast as the slowest controller
  pole;
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
from dataclasses import dataclass

import numpy as np

from ..derivation.numeric import check_eigenvalues
from ..verification.shipped import ShippedController, batch_loop_poles, closed_loop, poles_stable
from .margins import BrokenLoop, MarginReport, broken_loop_margins

__all__ = [
    "GAIN_MARGIN_DB",
    "PHASE_MARGIN_DEG",
    "ESTIMATOR_SPEED_RATIO",
    "RangeStability",
    "Requirement",
    "RequirementTable",
    "range_stability",
    "requirement_table",
    "robustness_table",
    "shipped_loop",
    "shipped_margins",
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


@dataclass(frozen=True)
class Requirement:
    """One row of the requirements table.

    Attributes
    ----------
    number : str
        ``R1``, ``R2``, … in table order.
    key : str
        Machine-readable name (``overshoot_percent``, ``actuator_limit``, ``gain_margin`` …).
    label, requested, achieved : str
        Plain text for the reader.
    passed : bool
    shortfall : str
        By how much a failing row misses ('' when it passes).
    basis : str
        How "achieved" was obtained.
    source : str
        Where the requirement comes from (the design file's key, or a rule of thumb).
    requested_value, achieved_value : float or None
        The numbers behind the text (JSON).
    """

    number: str
    key: str
    label: str
    requested: str
    achieved: str
    passed: bool
    shortfall: str
    basis: str
    source: str
    requested_value: float | None = None
    achieved_value: float | None = None


@dataclass(frozen=True)
class RequirementTable:
    """The numbered rows and the controller they judge."""

    controller: str
    rows: tuple[Requirement, ...]

    @property
    def passed(self) -> bool:
        return all(r.passed for r in self.rows)

    @property
    def open_items(self) -> tuple[str, ...]:
        """What failed and by how much, one line per failing row."""
        return tuple(
            f"{r.number} {r.label}: {r.shortfall or 'not met'}" for r in self.rows if not r.passed
        )

    @property
    def verdict(self) -> str:
        failed = sum(not r.passed for r in self.rows)
        if not failed:
            return f"every requirement met ({len(self.rows)} of {len(self.rows)})"
        return f"NOT ACCEPTABLE: {failed} of {len(self.rows)} requirements not met"

    def to_json(self) -> dict:
        return {
            "controller": self.controller,
            "passed": self.passed,
            "verdict": self.verdict,
            "rows": [
                {
                    "number": r.number,
                    "key": r.key,
                    "label": r.label,
                    "requested": r.requested,
                    "achieved": r.achieved,
                    "passed": r.passed,
                    "shortfall": r.shortfall,
                    "basis": r.basis,
                    "source": r.source,
                    "requested_value": _finite(r.requested_value),
                    "achieved_value": _finite(r.achieved_value),
                }
                for r in self.rows
            ],
            "open_items": list(self.open_items),
        }


def _finite(x) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _g(x: float, digits: int = 4) -> str:
    return f"{float(x):.{digits}g}"


# --------------------------------------------------------------------------------------------
# Margins of the shipped loop
# --------------------------------------------------------------------------------------------
def shipped_loop(ctrl: ShippedController) -> BrokenLoop:
    """The shipped loop broken at the plant input, as a continuous realisation.

    The controller keeps its own demanded input in its observer, so from the measurement to
    the demand it is ``ξ⁺ = (A_o + B_ou C_c) ξ + (B_oy + B_ou D_cy) y``, ``u = C_c ξ + D_cy y``;
    in series with the plant, ``L = −K(·) G(·)`` (negative feedback closes it).  A digital
    controller is joined to the ZOH plant and the discrete loop is mapped to the w-plane by the
    bilinear transform ``z = (1 + wT/2)/(1 − wT/2)``: the unit circle maps onto the imaginary
    axis and the values of L are kept, so gain and phase margins (and stability) are those of
    the discrete loop (G. F. Franklin, J. D. Powell and M. L. Workman, *Digital Control of
    Dynamic Systems*, 3rd ed., 1998, Sec. 7.3 -- from memory); only the frequency axis is
    warped.

    Raises
    ------
    ValueError
        For several plant inputs, or a discrete loop with a pole at z = −1.
    """
    p = ctrl.plant
    eq = ctrl.equations
    if p.B.shape[1] != 1:
        raise ValueError("the loop broken at the plant input needs a single input")
    A, B = (p.A, p.B) if not ctrl.digital else ctrl.sampled_plant
    C, D = ctrl.measurement if ctrl.measurement is not None else (p.C, p.D)
    Ak = eq.state_matrix + eq.control_matrix @ eq.output_state
    Bk = eq.measurement_matrix + eq.control_matrix @ eq.output_measurement
    Ck, Dk = eq.output_state, eq.output_measurement
    n, nk = A.shape[0], Ak.shape[0]
    AL = np.block([[A, np.zeros((n, nk))], [Bk @ C, Ak]])
    BL = np.vstack([B, Bk @ D])
    CL = -np.hstack([Dk @ C, Ck])
    DL = -Dk @ D
    if ctrl.digital:
        AL, BL, CL, DL = _bilinear_to_w(AL, BL, CL, DL, float(ctrl.sample_time))
    return BrokenLoop(
        "shipped",
        AL,
        BL,
        CL,
        DL,
        f"the shipped controller ({ctrl.description}) in series with the plant",
    )


def _bilinear_to_w(Ad, Bd, Cd, Dd, T: float):
    """w-plane realisation of ``H(z) = C (zI − A)⁻¹ B + D`` with ``z = (α + w)/(α − w)``.

    With ``E = (I + A)⁻¹``: ``A_w = α E (A − I)``, ``B_w = E B``, ``C_w = C (αI − A_w)``,
    ``D_w = D − C E B``, ``α = 2/T`` (substitute and expand ``(zI − A)⁻¹``).
    """
    alpha = 2.0 / T
    eye = np.eye(Ad.shape[0])
    if np.linalg.cond(eye + Ad) > 1e12:
        raise ValueError("the discrete loop has a pole at z = -1; margins not computed")
    E = np.linalg.inv(eye + Ad)
    Aw = alpha * E @ (Ad - eye)
    return Aw, E @ Bd, Cd @ (alpha * eye - Aw), Dd - Cd @ E @ Bd


def shipped_margins(ctrl: ShippedController) -> tuple[MarginReport | None, str]:
    """Margins of the shipped loop, or None and the reason they were not computed."""
    try:
        loop = shipped_loop(ctrl)
    except ValueError as exc:
        return None, str(exc)
    return broken_loop_margins(loop), ""


# --------------------------------------------------------------------------------------------
# Stability over the parameter ranges
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RangeStability:
    """The shipped controller (fixed gains) on the plant at every grid point of the ranges."""

    points: int  # grid points evaluated (corners included), nominal excluded
    varied: tuple[str, ...]
    unstable_count: int
    worst_point: dict[str, float] | None  # where the loop is least stable
    worst_measure: float  # largest Re (s-plane) or largest |z| (digital)
    digital: bool
    per_axis: int

    @property
    def passed(self) -> bool:
        return self.unstable_count == 0


def range_stability(d, ctrl: ShippedController, points: int = 5) -> RangeStability | None:
    """Grid check of the shipped loop over the declared ranges; None when no range is declared."""
    from .parameter_grid import evaluate_on_grid, parameter_grid

    grid = parameter_grid(d.design, points)
    if not grid.varied:
        return None
    values = grid.values[: grid.size]
    plant = d.design.plant
    mats = [evaluate_on_grid(M, grid.symbols, values) for M in (plant.A, plant.B, plant.C, plant.D)]
    finite = np.all([np.all(np.isfinite(M), axis=(1, 2)) for M in mats], axis=0)
    poles = np.full((values.shape[0], 1), np.inf, dtype=complex)
    if np.any(finite):
        sub = [M[finite] for M in mats]
        got = batch_loop_poles(ctrl, *sub)
        poles = np.full((values.shape[0], got.shape[1]), np.inf, dtype=complex)
        poles[finite] = got
    if ctrl.digital:
        measure = np.max(np.abs(poles), axis=1)
        stable = measure < 1.0 - 1e-10
    else:
        measure = np.max(poles.real, axis=1)
        scale = np.maximum(1.0, np.max(np.abs(np.where(np.isfinite(poles), poles, 0)), axis=1))
        stable = measure < -1e-10 * scale
    worst = int(np.argmax(measure))
    return RangeStability(
        points=int(values.shape[0]),
        varied=grid.varied,
        unstable_count=int(np.count_nonzero(~stable)),
        worst_point={n: float(v) for n, v in zip(grid.names, values[worst], strict=True)},
        worst_measure=float(measure[worst]),
        digital=ctrl.digital,
        per_axis=points,
    )


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
    raw.extend(_margin_rows(ctrl, *margins))
    raw.append(_speed_row(ctrl))
    raw.append(_checks_row(d))
    raw.append(_claims_row(claims))
    rows = tuple(
        Requirement(number=f"R{i}", **row)
        for i, row in enumerate((r for r in raw if r is not None), start=1)
    )
    return RequirementTable(ctrl.description, rows)
