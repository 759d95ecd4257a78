"""The ``[[revisions]]`` tables: the revision history of the design, oldest first.

Each entry names its ``revision`` (the label, e.g. ``"A"``), its ``date`` (a TOML date,
``2025-11-20``, or the same as a string), what changed (``change``) and, optionally, who
made the change (``author``).  The memo prints them as its revision history.
"""

from __future__ import annotations

import datetime as dt
import re
from typing import Any

from ..model.design import Revision
from .fields import FieldReader

__all__ = ["MAX_REVISIONS", "read_revisions"]

#: The most entries a revision history may have.
MAX_REVISIONS = 200

_REVISION_KEYS = ("revision", "date", "author", "change")
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


def read_revisions(fields: FieldReader, data: Any) -> tuple[Revision, ...]:
    """Validate ``[[revisions]]`` (optional): a list of tables with the keys above."""
    if data is None:
        return ()
    if not isinstance(data, list):
        fields.fail("revisions", "expected a list of [[revisions]] tables")
    if len(data) > MAX_REVISIONS:
        fields.fail("revisions", f"{len(data)} entries; the limit is {MAX_REVISIONS}")
    return tuple(_revision(fields, entry, f"revisions[{i}]") for i, entry in enumerate(data))


def _revision(fields: FieldReader, entry: Any, key: str) -> Revision:
    entry = fields.table(entry, key, _REVISION_KEYS)
    for required in ("revision", "date", "change"):
        if required not in entry:
            fields.fail(
                f"{key}.{required}", "missing: every revision needs revision, date and change"
            )
    label = fields.string(entry["revision"], f"{key}.revision").strip()
    change = fields.string(entry["change"], f"{key}.change").strip()
    for name, text in (("revision", label), ("change", change)):
        if not text:
            fields.fail(f"{key}.{name}", "must not be empty")
    return Revision(
        revision=label,
        date=_date(fields, entry["date"], f"{key}.date"),
        change=change,
        author=fields.string(entry.get("author"), f"{key}.author").strip(),
    )


def _date(fields: FieldReader, value: Any, key: str) -> str:
    """A calendar date as ``YYYY-MM-DD``: a TOML date or an ISO 8601 date string."""
    if isinstance(value, dt.datetime):
        fields.fail(key, "expected a date (YYYY-MM-DD), got a date and time")
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, str) and _ISO_DATE.match(value):
        try:
            return dt.date.fromisoformat(value).isoformat()
        except ValueError:
            fields.fail(key, f"not a calendar date: '{value}'")
    fields.fail(key, "expected a date written YYYY-MM-DD, e.g. 2025-11-20")
