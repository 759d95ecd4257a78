"""The hand-calculation check for the terminal, as JSON, and for the memo (``gainsmith check``).

Renders a finished :class:`~symbolic.analysis.claims.ClaimReport`; the verdicts and their
explanations come from :mod:`symbolic.analysis.claims`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from ..analysis.claim_wording import entry_name
from ..analysis.claims import ClaimReport, check_claims
from ..model.design import Claims
from ..model.numbers import format_number, format_pole
from ..model.results import Derivation
from .mathvalues import latex_matrix, latex_number, own_math
from .report import complex_pairs

__all__ = ["claims_json", "format_claims", "memo_claims"]

_TITLES = {
    "K": "K, state-feedback gain (u = −K x̂ + N r)",
    "L": "L, observer gain (x̂' = A x̂ + B u + L (y − C x̂ − D u))",
    "reference_gain": "N, reference gain",
}


def _finite_or_none(x: float | None) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _rows(M: np.ndarray) -> list[list[float | None]]:
    return [[_finite_or_none(x) for x in row] for row in np.atleast_2d(M)]


def claims_json(report: ClaimReport, derivation: Derivation | None = None) -> dict[str, Any]:
    """The machine-readable result of ``gainsmith check --json``.

    Matrices are lists of rows, poles are [re, im] pairs, numbers that are
    not finite (no reference gain exists) are null.
    """
    out: dict[str, Any] = {
        "holds": report.holds,
        "tolerance": report.tolerance,
        "tolerance_source": report.tolerance_source,
    }
    if derivation is not None:
        out["design_file"] = derivation.design.path
        out["derivation_checks_passed"] = derivation.passed
    out["claims"] = [
        {
            "name": v.name,
            "claimed": _rows(v.claimed),
            "derived": _rows(v.derived),
            "difference": _rows(v.difference),
            "relative_error": _finite_or_none(v.relative_error),
            "achieved_poles": None if v.achieved_poles is None else complex_pairs(v.achieved_poles),
            "requested_poles": None
            if v.requested_poles is None
            else complex_pairs(v.requested_poles),
            "pole_error": _finite_or_none(v.pole_error),
            "pole_tolerance": v.pole_tolerance,
            "achieved_dc_gain": _finite_or_none(v.achieved_dc_gain),
            "holds": v.holds,
            "explanation": v.explanation,
        }
        for v in report.verdicts
    ]
    return out


def _cell(x: float, digits: int) -> str:
    return format_number(x, digits) if math.isfinite(float(x)) else "—"


def _table(header: Sequence[str], rows: Sequence[Sequence[str]], indent: str = "    ") -> list[str]:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    lines = [indent + "  ".join(h.ljust(w) for h, w in zip(header, widths)).rstrip()]
    lines.append(indent + "  ".join("-" * w for w in widths))
    for r in rows:
        lines.append(indent + "  ".join(c.rjust(w) for c, w in zip(r, widths)).rstrip())
    return lines


def format_claims(report: ClaimReport, derivation: Derivation) -> str:
    """A terminal report: entry by entry, poles achieved vs requested, a verdict per claim.

    Parameters
    ----------
    report : ClaimReport
        From :func:`~symbolic.analysis.claims.check_claims`.
    derivation : Derivation
        The derivation the report was made from (title, file, checks).
    """
    design = derivation.design
    out: list[str] = []
    w = out.append
    w(f"Hand-calculation check: {design.title}")
    w(f"design file {design.path}")
    w(
        f"tolerance {report.tolerance:g} (relative), from {report.tolerance_source};"
        " 4 significant figures round to within 5e-4 (common practice, no source)"
    )
    if not derivation.passed:
        w(
            "warning: some of gainsmith's own cross-checks failed for this design; run"
            " `gainsmith derive` before trusting the derived values below"
        )
    for v in report.verdicts:
        w("")
        w(f"{_TITLES.get(v.name, v.name)}: {'HOLDS' if v.holds else 'DOES NOT HOLD'}")
        short = "N" if v.name == "reference_gain" else v.name
        rows = []
        for idx in np.ndindex(v.claimed.shape):
            c, d, diff = (float(M[idx]) for M in (v.claimed, v.derived, v.difference))
            entry = entry_name(short, idx, v.claimed.shape)
            rel = f"{abs(diff) / abs(d):.2e}" if math.isfinite(d) and d != 0.0 else "—"
            rows.append([entry, _cell(c, 10), _cell(d, 10), _cell(diff, 3), rel])
        out.extend(_table(["entry", "claimed", "derived", "difference", "relative"], rows))
        rel_text = f"{v.relative_error:.2e}" if math.isfinite(v.relative_error) else "undefined"
        w(f"    ‖claimed − derived‖ / ‖derived‖ = {rel_text}   (tolerance {v.tolerance:g})")
        if v.achieved_poles is not None and v.requested_poles is not None:
            matrix = "A − B K" if v.name == "K" else "A − L C"
            w(f"    poles of {matrix} with the claimed {v.name}:")
            prow = [
                [format_pole(r, 8), format_pole(a, 8)]
                for r, a in zip(v.requested_poles, v.achieved_poles)
            ]
            out.extend(_table(["requested", "achieved"], prow, indent="      "))
            pole_tol = v.tolerance if v.pole_tolerance is None else v.pole_tolerance
            tol_note = f"{pole_tol:.3g}"
            if pole_tol != v.tolerance:
                tol_note += ", the tolerance to the power 1/multiplicity for a repeated pole"
            w(f"    largest relative pole error {v.pole_error:.2e}   (tolerance {tol_note})")
        if v.achieved_dc_gain is not None:
            w(
                "    steady-state gain r → tracked output with gainsmith's K and the claimed N:"
                f" {format_number(v.achieved_dc_gain, 8)}"
            )
        w(f"    {v.explanation}")
    w("")
    failing = [v.name for v in report.verdicts if not v.holds]
    total = len(report.verdicts)
    if not failing:
        w(f"every claim holds ({total} of {total})")
    else:
        w(f"CLAIMS DO NOT HOLD: {', '.join(failing)} ({len(failing)} of {total})")
    return "\n".join(out)


#: How the memo names each claimed gain (its design-file key is ``name``).
_CLAIM_LABELS = {
    "K": "gain $K$",
    "L": "observer gain $L$",
    "reference_gain": "reference gain $N$",
}


def memo_claims(derivation: Derivation, claims: Claims) -> dict[str, Any]:
    """Context of the memo's "hand calculation check" section (formatted, not re-derived)."""
    report = check_claims(derivation, claims)
    rows = []
    for v in report.verdicts:
        rows.append(
            {
                "name": v.name,
                "label": own_math(_CLAIM_LABELS.get(v.name, "")),
                "claimed": own_math(latex_matrix(np.atleast_2d(v.claimed), 6)),
                "derived": own_math(latex_matrix(np.atleast_2d(v.derived), 6))
                if v.derived is not None and np.all(np.isfinite(v.derived))
                else own_math("\\text{none}"),
                "error": own_math(latex_number(v.relative_error, 2)),
                "holds": v.holds,
                "explanation": v.explanation,
            }
        )
    verdict = "Every claim holds" if report.holds else "At least one claim does not hold"
    summary = (
        f"The design file carries hand-calculated gains. {verdict} at a relative tolerance of"
        f" {report.tolerance:g} ({report.tolerance_source or 'default'}); each claimed gain is also"
        " judged by the poles it actually places."
    )
    return {"summary": summary, "rows": rows, "holds": report.holds}
