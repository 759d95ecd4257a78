"""The requirements table: numbered rows, each judged pass or fail, and the verdict they give.

The rows are assembled by :mod:`symbolic.analysis.verdict`; ``simulate``, ``memo`` and
``robustness`` print the same table and exit with 1 when any row fails.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass

__all__ = ["Requirement", "RequirementTable"]


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

    def _repr_html_(self) -> str:  # Jupyter
        """The verdict and the numbered rows as an HTML table (every value escaped)."""
        head = "".join(
            f"<th>{h}</th>" for h in ("", "requirement", "requested", "achieved", "", "basis")
        )
        body = "".join(
            "<tr>"
            + "".join(
                f"<td>{html.escape(text)}</td>"
                for text in (
                    r.number,
                    r.label,
                    r.requested,
                    r.achieved,
                    "pass" if r.passed else "FAIL",
                    r.basis,
                )
            )
            + "</tr>"
            for r in self.rows
        )
        return (
            f"<p><b>{html.escape(self.verdict)}</b> ({html.escape(self.controller)})</p>"
            f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"
        )

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
