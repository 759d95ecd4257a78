"""The robustness study for the terminal and as JSON (``gainsmith robustness``).

Renders a finished :class:`~symbolic.analysis.robust.RobustnessReport`; the memo's
robustness section is laid out by :mod:`symbolic.render.robust_memo`.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Mapping, Sequence

import numpy as np

from ..analysis.margins import MarginComparison, MarginReport
from ..analysis.robust import CAUTION, RobustnessReport
from ..analysis.sensitivity import SensitivityTable
from ..model.numbers import format_pole, format_poles
from ..model.results import Check
from .loop_shape_memo import loop_shapes_json
from .study_pages import requirements_text

__all__ = [
    "check_json",
    "margin_json",
    "margin_rows",
    "pair_text",
    "point_text",
    "robustness_json",
    "robustness_text",
    "sensitivity_values",
]


def _g(x: float) -> str:
    return f"{float(x):.6g}"


def _clean(x) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def margin_json(r: MarginReport) -> dict:
    """The margins of one loop as plain numbers (None where a margin does not exist)."""
    return {
        "gain_margin_db_upper": _clean(r.gain_margin_db_upper),
        "gain_margin_db_lower": _clean(r.gain_margin_db_lower),
        "gain_factor_upper": _clean(r.gain_factor_upper),
        "gain_factor_lower": _clean(r.gain_factor_lower),
        "phase_margin_deg": _clean(r.phase_margin_deg),
        "delay_margin_s": _clean(r.delay_margin_s),
        "crossover_rad_s": _clean(r.crossover_rad_s),
        "gain_crossovers_rad_s": [float(w) for w in r.gain_crossovers_rad_s],
        "phase_margins_deg": [float(p) for p in r.phase_margins_deg],
        "phase_crossovers_rad_s": [float(w) for w in r.phase_crossovers_rad_s],
        "open_loop_unstable_poles": r.open_loop_unstable_poles,
        "imaginary_axis_poles": r.imaginary_axis_poles,
        "encirclements_counterclockwise": r.nyquist.counterclockwise,
        "nyquist_criterion_holds": r.nyquist.consistent,
        "closed_loop_stable": r.closed_loop_stable,
    }


def check_json(c: Check) -> dict:
    """One cross-check as plain data."""
    return {
        "name": c.name,
        "value": _clean(c.value),
        "tolerance": c.tolerance,
        "passed": c.passed,
        "note": c.note,
    }


def sensitivity_values(table: SensitivityTable) -> dict[str, dict[str, float | None]]:
    """``{gain: {parameter: value}}``, None where the gain is zero at the nominal values."""
    sens: dict[str, dict[str, float | None]] = {}
    for e in table.entries:
        sens.setdefault(e.gain, {})[e.parameter] = _clean(e.value)
    return sens


def robustness_json(r: RobustnessReport) -> dict:
    """The machine-readable result of ``gainsmith robustness --json``."""
    m = r.mismatch
    sens = sensitivity_values(r.sensitivities)
    return {
        "title": r.derivation.design.title,
        "design_file": r.derivation.design.path,
        "mismatch": {
            "points": int(m.grid.values.shape[0]),
            "grid_points_per_parameter": r.points,
            "varied": list(m.grid.varied),
            "unstable_points": list(m.unstable_points),
            "unstable_count": m.unstable_count,
            "worst_damping_ratio": _clean(m.worst_damping_ratio),
            "worst_damping_at": m.worst_damping_at,
            "least_stable_pole": [float(m.least_stable_pole.real), float(m.least_stable_pole.imag)],
            "at": m.least_stable_at,
            "nominal_poles": [
                [float(z.real), float(z.imag)]
                for z in sorted(m.nominal_poles, key=lambda z: (z.real, z.imag))
            ],
            "state_feedback_unstable_count": int(np.sum(~m.state_feedback_stable)),
            "stability_changes": [c.text() for c in m.changes],
        },
        "routh_hurwitz": list(r.stability.lines),
        "sensitivities": sens,
        "sensitivity_method": r.sensitivities.method,
        "margins": None
        if r.margins is None
        else {
            "state_feedback": margin_json(r.margins.state_feedback),
            "observer_based": margin_json(r.margins.observer_based),
        },
        "checks": [check_json(c) for c in r.checks],
        "notes": list(r.notes),
        "caution": CAUTION,
        "shipped_controller": None if r.shipped is None else r.shipped.to_json(),
        "certificate": None if r.certificate is None else r.certificate.to_json(),
        "loop_shapes": loop_shapes_json(r.derivation),  # S, T, noise, input disturbance
        "passed": r.passed,
    }


def _db_text(x: float | None) -> str:
    return "none" if x is None else f"{x:.3g} dB"


def pair_text(z: complex) -> str:
    """A pole as text, a complex one as the member of its pair above the real axis."""
    z = complex(z)
    text = format_pole(complex(z.real, abs(z.imag)))
    return text + " (and its conjugate)" if text.endswith("j") else text


def point_text(p: Mapping[str, float], only: Sequence[str] | None = None) -> str:
    """A parameter point as text (``m = 2, ki = 4``), only the ``only`` parameters if given."""
    keys = list(only) if only else list(p)
    return ", ".join(f"{k} = {_g(p[k])}" for k in keys) if keys else "nominal values"


def margin_rows(c: MarginComparison) -> list[tuple[str, str, str]]:
    """(quantity, state feedback, observer-based) rows of the side-by-side table."""

    def pm(r: MarginReport) -> str:
        return "none (no crossover)" if r.phase_margin_deg is None else f"{r.phase_margin_deg:.3g}°"

    def ms(x: float | None, unit: str, digits: int = 4) -> str:
        return "none" if x is None else f"{x:.{digits}g} {unit}"

    def gf(r: MarginReport) -> str:
        lo = "0" if r.gain_factor_lower is None else f"{r.gain_factor_lower:.4g}"
        hi = "∞" if r.gain_factor_upper is None else f"{r.gain_factor_upper:.4g}"
        return f"({lo}, {hi})"

    a, b = c.state_feedback, c.observer_based
    rows = [
        ("stable gain factors k", gf(a), gf(b)),
        (
            "upper gain margin (gain may grow by)",
            _db_text(a.gain_margin_db_upper),
            _db_text(b.gain_margin_db_upper),
        ),
        (
            "lower gain margin (gain may shrink by)",
            _db_text(a.gain_margin_db_lower),
            _db_text(b.gain_margin_db_lower),
        ),
        ("phase margin", pm(a), pm(b)),
        ("at gain crossover", ms(a.crossover_rad_s, "rad/s"), ms(b.crossover_rad_s, "rad/s")),
        ("delay margin", ms(a.delay_margin_s, "s"), ms(b.delay_margin_s, "s")),
        (
            "open-loop unstable poles P",
            str(a.open_loop_unstable_poles),
            str(b.open_loop_unstable_poles),
        ),
        ("poles on the imaginary axis", str(a.imaginary_axis_poles), str(b.imaginary_axis_poles)),
        (
            "encirclements of −1 (counter-clockwise)",
            str(a.nyquist.counterclockwise),
            str(b.nyquist.counterclockwise),
        ),
    ]
    return rows


def robustness_text(r: RobustnessReport) -> str:
    """The terminal report."""
    d = r.derivation
    out = [f"{d.design.title}: robustness study", f"design file {d.design.path}", ""]
    out += _mismatch_lines(r)
    out += ["", "Routh–Hurwitz"]
    for line in r.stability.lines:
        for part in textwrap.wrap(line, 100, subsequent_indent="    ") or [""]:
            out.append("  " + part)
    out.append("")
    out += _sensitivity_lines(r.sensitivities)
    out += ["", "Stability margins, loop broken at the plant input"]
    out += _margin_lines(r.margins)
    out += ["", "Checks"]
    for c in r.checks:
        status = {True: "pass", False: "FAIL", None: "n/a "}[c.passed]
        val = "" if c.value is None else f"  {c.value:.2e}"
        tol = "" if c.tolerance is None else f" <= {c.tolerance:.0e}"
        out.append(f"  {status}  {c.name}{val}{tol}" + (f"  ({c.note})" if c.note else ""))
    if r.notes:
        out += ["", "Notes"]
        out += ["  - " + note for note in r.notes]
    if r.shipped is not None:
        out.append("")
        out.extend(requirements_text(r.shipped))
    out += ["", "Caution: " + CAUTION, "", _conclusion(r)]
    return "\n".join(out)


def _mismatch_lines(r: RobustnessReport) -> list[str]:
    """The parameter-mismatch section: the grid, where the loops are stable, the worst point."""
    m = r.mismatch
    g = m.grid
    out = ["Parameter mismatch (K, N and L designed at the nominal values; the true plant varies)"]
    w = out.append
    if g.varied:
        w(
            f"  grid: {g.size} points ({r.points} per range over {', '.join(g.varied)}; corners"
            " included) and the nominal point; other parameters nominal"
        )
    else:
        w("  no parameter has a range: only the nominal point")
    n = r.derivation.plant.A.shape[0]
    total = g.values.shape[0]
    if m.all_stable:
        w(f"  observer-based loop (order {2 * n}): stable at all {total} points")
    else:
        w(
            f"  observer-based loop (order {2 * n}): UNSTABLE at {m.unstable_count} of {total} points"
        )
        for p in m.unstable_points:
            w(f"    unstable at {point_text(p, g.varied)}")
    sf_bad = int(np.sum(~m.state_feedback_stable))
    w(
        f"  state feedback with the true state (order {n}): "
        + ("stable at every point" if sf_bad == 0 else f"unstable at {sf_bad} of {total} points")
        + " (for comparison)"
    )
    w(
        f"  worst damping ratio {m.worst_damping_ratio:.4g} at"
        f" {point_text(m.worst_damping_at, g.varied)}"
    )
    w(
        f"  least stable pole {pair_text(m.least_stable_pole)} at"
        f" {point_text(m.least_stable_at, g.varied)}"
    )
    w(
        "  nominal point: "
        + format_poles(_sorted_poles(m.nominal_poles))
        + " (the controller and observer poles)"
    )
    return out


def _sensitivity_lines(s: SensitivityTable) -> list[str]:
    """The table of normalised sensitivities, one row per gain entry."""
    out = [f"Normalised sensitivities (p/g)·∂g/∂p at the nominal values [{s.method}]"]
    if not s.entries:
        return out + ["  (none)"]
    width = max(10, *(len(p) + 2 for p in s.parameters))
    out.append("  " + "gain".ljust(10) + "".join(p.rjust(width) for p in s.parameters))
    for gname in s.gains:
        cells = []
        for p in s.parameters:
            v = s.value(gname, p)
            cells.append(("-" if v is None else f"{v:.4g}").rjust(width))
        out.append("  " + gname.ljust(10) + "".join(cells))
    return out


def _margin_lines(margins: MarginComparison | None) -> list[str]:
    """The side-by-side margins of the two loops."""
    if margins is None:
        return ["  not computed (several inputs)"]
    rows = margin_rows(margins)
    w1 = max(len(q) for q, _a, _b in rows) + 2
    w2 = max(16, *(len(a) + 2 for _q, a, _b in rows))
    out = ["  " + "".ljust(w1) + "state feedback".ljust(w2) + "observer-based"]
    out += ["  " + q.ljust(w1) + a.ljust(w2) + b for q, a, b in rows]
    return out


def _conclusion(r: RobustnessReport) -> str:
    """The last line of the report: the verdict, or what failed first."""
    if r.passed:
        return "stable at every point of the study; margins met"
    if r.shipped is not None and not r.shipped.passed:
        return "THE SHIPPED CONTROLLER FAILS: " + "; ".join(r.shipped.open_items)
    if not r.mismatch.all_stable:
        return "UNSTABLE SOMEWHERE IN THE PARAMETER RANGES"
    if r.margins is None:
        return "no margins: not a single-input design"
    return "SOME CHECKS FAILED"


def _sorted_poles(poles: np.ndarray) -> list[complex]:
    """Slowest first; a conjugate pair together, the member above the real axis first."""
    return sorted((complex(z) for z in poles), key=lambda z: (-z.real, abs(z.imag), -z.imag))
