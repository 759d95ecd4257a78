"""Memo context of the section "Changes since revision X": a revision comparison as plain data.

Built from a finished :class:`~symbolic.analysis.revision_diff.RevisionComparison`
(``gainsmith memo NEW --compare OLD``); every value is plain text, escaped by the template
environment of each format (:mod:`symbolic.render.formats`), none is trusted.
"""

from __future__ import annotations

from ..analysis.revision_diff import SECTIONS, RevisionComparison
from .revision_pages import SECTION_TITLES, change_words, display_texts

__all__ = ["changes_context"]


def changes_context(c: RevisionComparison | None) -> dict | None:
    """The section's context, or None (no section) without a comparison.

    Returns
    -------
    dict or None
        ``old_label`` (``revision B``, or the old file's name), ``old_file``, ``old_sha`` (and its first 16 digits, ``old_sha_short``),
        ``old_verdict``, ``new_verdict``, ``verdict_change`` (``now fails``, ``now passes``
        or ''), ``changed_count``, ``tolerance`` (text), ``sections`` (title and rows of
        ``item``, ``old``, ``new``, ``change`` for each section with a change),
        ``unchanged_sections`` (titles) and ``same_order``.
    """
    if c is None:
        return None
    sections, unchanged = [], []
    for name in SECTIONS:
        title, _covers = SECTION_TITLES[name]
        rows = [
            dict(zip(("old", "new"), display_texts(d)), item=d.item, change=change_words(d))
            for d in c.section(name)
            if d.changed
        ]
        if rows:
            sections.append({"title": title, "rows": rows})
        else:
            unchanged.append(title.lower())
    verdict_change = ""
    if c.verdict_changed:
        verdict_change = "now passes" if c.new.passed else "now fails"
    return {
        "old_label": c.old.label,
        "old_file": c.old.name,
        "old_sha": c.old.sha256,
        "old_sha_short": c.old.sha256[:16],
        "old_verdict": c.old.verdict,
        "new_verdict": c.new.verdict,
        "verdict_change": verdict_change,
        "changed_count": len(c.changes),
        "tolerance": f"{c.relative_tolerance:g} relative plus {c.absolute_tolerance:g} absolute",
        "sections": sections,
        "unchanged_sections": unchanged,
        "same_order": c.same_order,
    }
