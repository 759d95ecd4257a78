"""The design file's revision history (``[[revisions]]``): read, validated, and shown in the memo."""

from __future__ import annotations

import pytest

from symbolic import load_design, parse_design
from symbolic.runtime.errors import DesignFileError

from .conftest import WORKED, WORKED_FILES
from .test_design import BASE, add, check_error

HISTORY = """
[[revisions]]
revision = "A"
date = 2025-10-01
author = "J. Doe"
change = "First issue."

[[revisions]]
revision = "B"
date = "2025-11-15"
change = "Observer made faster."
"""


def test_history_is_read_oldest_first_and_names_the_current_revision():
    design = parse_design(add(HISTORY), "history.toml")
    assert [(r.revision, r.date, r.author) for r in design.revisions] == [
        ("A", "2025-10-01", "J. Doe"),
        ("B", "2025-11-15", ""),
    ]
    assert design.revision == "B"  # no top-level revision: the last entry's
    assert parse_design(BASE, "none.toml").revisions == ()


def test_the_design_keeps_its_text_for_the_appendix():
    text = add(HISTORY)
    assert parse_design(text, "history.toml").text == text


def _one(**fields: str) -> str:
    lines = "\n".join(f"{k} = {v}" for k, v in fields.items())
    return add("\n[[revisions]]\n" + lines + "\n")


GOOD = {"revision": '"A"', "date": "2025-10-01", "change": '"First issue."'}

BAD = [
    # a top-level key must come before the first table
    ("not-a-list", 'revisions = "A"\n' + BASE, "revisions", r"expected a list"),
    ("unknown-key", _one(**GOOD, colour='"red"'), "revisions[0].colour", r"unknown key"),
    ("close-key", _one(**GOOD, autor='"x"'), "revisions[0].autor", r"did you mean 'author'"),
    (
        "no-change",
        _one(revision='"A"', date="2025-10-01"),
        "revisions[0].change",
        r"missing",
    ),
    ("no-date", _one(revision='"A"', change='"x"'), "revisions[0].date", r"missing"),
    (
        "empty-change",
        _one(**{**GOOD, "change": '"  "'}),
        "revisions[0].change",
        r"must not be empty",
    ),
    (
        "number-revision",
        _one(**{**GOOD, "revision": "2"}),
        "revisions[0].revision",
        r"expected a string",
    ),
    ("date-words", _one(**{**GOOD, "date": '"last Tuesday"'}), "revisions[0].date", r"YYYY-MM-DD"),
    (
        "date-impossible",
        _one(**{**GOOD, "date": '"2025-02-30"'}),
        "revisions[0].date",
        r"not a calendar date",
    ),
    (
        "date-and-time",
        _one(**{**GOOD, "date": "2025-10-01T10:00:00"}),
        "revisions[0].date",
        r"date and time",
    ),
    ("date-number", _one(**{**GOOD, "date": "20251001"}), "revisions[0].date", r"YYYY-MM-DD"),
    (
        "revision-not-last",
        add(
            '\n[[revisions]]\nrevision = "A"\ndate = 2025-10-01\nchange = "x"\n',
            'revision = "B"\n' + BASE,
        ),
        "revision",
        r"not the revision of the last \[\[revisions\]\] entry \('A'\)",
    ),
]


@pytest.mark.parametrize("text, key, problem", [case[1:] for case in BAD], ids=[c[0] for c in BAD])
def test_bad_revision_history_is_one_line_naming_the_key(write_design, text, key, problem):
    path = write_design(text)
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    check_error(info.value, path, key, problem, DesignFileError)


def test_too_long_a_history_is_refused(write_design):
    entry = '\n[[revisions]]\nrevision = "A"\ndate = 2025-10-01\nchange = "x"\n'
    path = write_design(add(entry * 201))
    with pytest.raises(DesignFileError) as info:
        load_design(path)
    check_error(info.value, path, "revisions", r"201 entries; the limit is 200", DesignFileError)


@pytest.mark.parametrize("path", WORKED_FILES, ids=lambda p: p.stem)
def test_worked_memos_print_their_history(path):
    design = load_design(path)
    assert design.revisions, "every worked design keeps a revision history"
    tex = (WORKED / f"{path.stem}.tex").read_text(encoding="utf-8")
    history = tex.split(r"\section*{Revision history}")[1].split(r"\end{longtable}")[0]
    for r in design.revisions:
        assert f"{r.revision} & {r.date.replace('-', '{-}')} &" in history
