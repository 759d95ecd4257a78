"""A revision comparison for the terminal and as JSON (``gainsmith compare OLD NEW``).

Renders a finished :class:`~symbolic.analysis.revision_diff.RevisionComparison`; computes
nothing.  The terminal shows the items that changed, section by section, and says of every
other section that nothing changed; the JSON holds every compared item.
"""

from __future__ import annotations

import math

from ..analysis.revision_diff import SECTIONS, RevisionComparison, relative_text
from ..analysis.revision_items import Difference

__all__ = [
    "SECTION_TITLES",
    "change_words",
    "comparison_json",
    "comparison_text",
    "display_texts",
]

#: How each section is titled for a reader, and what it covers when nothing changed.
SECTION_TITLES = {
    "design": ("Design", "title, revision, author, file, SHA-256, shipped controller"),
    "parameters": ("Parameters", "names, values, units, ranges, descriptions"),
    "plant": ("Plant", "size, signals, A, B, C, D entry by entry as expressions"),
    "requests": ("Requests", "requested poles, specifications, observer, tracking, simulation"),
    "poles": ("Chosen poles", "controller and observer poles"),
    "gains": ("Gains", "every entry at the nominal values, and the closed forms"),
    "margins": ("Margins", "the shipped loop broken at the plant input"),
    "requirements": ("Requirements", "every row of the requirements table"),
    "verdict": ("Verdict", "the overall verdict"),
}

#: Widest item and value columns of the terminal table (longer text runs on).
_ITEM_WIDTH, _VALUE_WIDTH = 30, 32


def change_words(d: Difference) -> str:
    """The change of one item in words, with its relative size and note when it has them."""
    words = d.change
    rel = relative_text(d.relative) if d.changed else ""
    if rel:
        words += f" ({rel})"
    if d.note:
        words += f"; {d.note}"
    return words


def _short_sha(sha: str) -> str:
    return sha[:12] + "…" if len(sha) > 12 else sha


def _side(label: str, r) -> str:
    return f"  {label}  {r.path}  ({r.label}, SHA-256 {_short_sha(r.sha256)})\n       {r.verdict}"


def display_texts(d: Difference) -> tuple[str, str]:
    """The old and new text of an item as shown to a reader (a SHA-256 shortened)."""
    old, new = d.old or "—", d.new or "—"
    if d.section == "design" and d.item == "SHA-256":  # in full in the JSON
        old, new = _short_sha(old), _short_sha(new)
    return old, new


def _table(items: list[Difference]) -> list[str]:
    """One line per item while item, old and new fit their columns, else three lines."""
    texts = [display_texts(d) for d in items]
    fits = [
        len(d.item) <= _ITEM_WIDTH and len(o) <= _VALUE_WIDTH and len(n) <= _VALUE_WIDTH
        for d, (o, n) in zip(items, texts, strict=True)
    ]
    rows = [(d, t) for d, t, ok in zip(items, texts, fits, strict=True) if ok]
    wi = max((len(d.item) for d, _ in rows), default=0)
    wo = max((len(o) for _, (o, _n) in rows), default=0)
    wn = max((len(n) for _, (_o, n) in rows), default=0)
    out = []
    for d, (old, new), ok in zip(items, texts, fits, strict=True):
        if ok:
            out.append(f"  {d.item:<{wi}}  {old:<{wo}} → {new:<{wn}}  {change_words(d)}")
        else:
            out += [f"  {d.item}", f"      {old}", f"    → {new}  {change_words(d)}"]
    return out


def comparison_text(c: RevisionComparison) -> str:
    """The comparison for the terminal: the two files, then each section's changes."""
    out = [
        f"Revision comparison: {c.old.label} → {c.new.label}",
        _side("old", c.old),
        _side("new", c.new),
        (
            f"Numbers within {c.relative_tolerance:g} relative (plus {c.absolute_tolerance:g}"
            " absolute) count as unchanged; expressions are compared as functions of the"
            " parameters, not as text."
        ),
        "",
    ]
    for name in SECTIONS:
        title, covers = SECTION_TITLES[name]
        items = c.section(name)
        changed = [d for d in items if d.changed]
        if not changed:
            out.append(f"{title}: no change ({covers})")
            continue
        out.append(f"{title}: {len(changed)} of {len(items)} items changed")
        out.extend(_table(changed))
    out.append("")
    if c.unchanged:
        out.append("No change: the two revisions are the same design with the same results.")
    elif not c.same_order:
        out.append(
            f"The plants differ in order ({c.old.order} and {c.new.order} states): their"
            " matrices and gains are compared by shape and value only."
        )
    out.append(f"{c.new.label}: {c.new.verdict}")
    return "\n".join(out)


def _number(x) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _item_json(d: Difference) -> dict:
    return {
        "item": d.item,
        "old": d.old,
        "new": d.new,
        "change": d.change,
        "changed": d.changed,
        "old_value": _number(d.old_value),
        "new_value": _number(d.new_value),
        "relative": _number(d.relative),
        "note": d.note,
    }


def _side_json(r) -> dict:
    return {
        "path": r.path,
        "name": r.name,
        "title": r.title,
        "revision": r.revision,
        "author": r.author,
        "sha256": r.sha256,
        "order": r.order,
        "controller": r.controller,
        "passed": r.passed,
        "verdict": r.verdict,
    }


def comparison_json(c: RevisionComparison) -> dict:
    """The machine-readable comparison (``gainsmith compare --json``): every item."""
    return {
        "old": _side_json(c.old),
        "new": _side_json(c.new),
        "tolerance": {"relative": c.relative_tolerance, "absolute": c.absolute_tolerance},
        "unchanged": c.unchanged,
        "same_order": c.same_order,
        "verdict_changed": c.verdict_changed,
        "passed": c.passed,
        "changed_count": len(c.changes),
        "sections": {
            name: {
                "changed": sum(d.changed for d in c.section(name)),
                "items": [_item_json(d) for d in c.section(name)],
            }
            for name in SECTIONS
        },
    }
