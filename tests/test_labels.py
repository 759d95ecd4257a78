"""One name per gain entry in every output (symbolic.model.labels.gain_label).

The convention is the one control texts use for vectors and matrices,
counted from 1 (common practice, no source): K_2 for the second entry of a
row gain, L_3 for the third of a column gain, K_1,2 for row 1, column 2 of a
matrix gain.  The tests check that the terminal, the claim check, the
robustness JSON, the schedule CSV and the memo all write it so.
"""

from __future__ import annotations

import csv
import io
import json
import re

import pytest

from symbolic import derive, load_design, parse_design
from symbolic.analysis.claims import check_claims
from symbolic.cli import main
from symbolic.model.design import Claims
from symbolic.model.labels import gain_label
from symbolic.render.claims_pages import format_claims
from symbolic.render.memo_math import gain_block
from symbolic.render.report import derivation_summary
from symbolic.render.robust_memo import memo_robustness

from .conftest import WORKED


@pytest.mark.parametrize(
    "name, row, column, shape, text, tex",
    [
        ("K", 0, 0, (1, 4), "K_1", "K_{1}"),
        ("K", 0, 3, (1, 4), "K_4", "K_{4}"),
        ("L", 2, 0, (4, 1), "L_3", "L_{3}"),
        ("K", 0, 1, (2, 4), "K_1,2", "K_{1,2}"),
        ("K", 1, 0, (2, 4), "K_2,1", "K_{2,1}"),
        ("L", 11, 9, (12, 10), "L_12,10", "L_{12,10}"),  # no K_{1210} ambiguity
        ("N", 0, 0, (1, 1), "N", "N"),
        ("N", 1, 0, (2, 1), "N_2", "N_{2}"),
    ],
)
def test_gain_label(name, row, column, shape, text, tex):
    assert gain_label(name, row, column, shape) == text
    assert gain_label(name, row, column, shape, "tex") == tex


@pytest.mark.parametrize("row, column", [(1, 0), (0, 4), (-1, 0)])
def test_gain_label_refuses_an_entry_outside_the_gain(row, column):
    with pytest.raises(IndexError):
        gain_label("K", row, column, (1, 4))


@pytest.fixture(scope="module")
def focus():
    # focus actuator (worked design): one input, one output, two states
    return derive(load_design(WORKED / "focus_actuator.toml"), budget=0)


TEXT = ["K_1", "K_2", "L_1", "L_2"]
OLD = re.compile(r"\b[KL]\[\d\]")  # the former 0-based K[0][1] style


def test_terminal_writes_the_labels(focus):
    out = derivation_summary(focus)
    for label in TEXT:
        assert re.search(rf"^    {label} = ", out, re.M), label
    assert not OLD.search(out)


def test_claim_check_writes_the_labels(focus):
    K = focus.K.value[0]
    wrong = (float(K[0]), float(K[1]) * 1.1)  # K_2 off by 10 %
    report = check_claims(focus, Claims(K=(wrong,)))
    (verdict,) = report.verdicts
    assert not verdict.holds and "its entry K_2 alone differs by 10 %" in verdict.explanation
    text = format_claims(report, focus)
    assert re.search(r"^\s+K_1\s", text, re.M) and re.search(r"^\s+K_2\s", text, re.M)
    assert not OLD.search(text)


def test_robustness_json_keys_are_the_labels(capsys):
    path = WORKED / "focus_actuator.toml"
    main(["robustness", "--json", str(path), "--points", "2"])
    out = json.loads(capsys.readouterr().out)
    assert list(out["sensitivities"]) == [*TEXT, "N"]


def test_schedule_csv_columns_are_the_labels(tmp_path, capsys):
    path = WORKED / "focus_actuator.toml"
    assert main(["schedule", str(path), "-o", str(tmp_path), "--points", "2"]) == 0
    capsys.readouterr()
    (table,) = tmp_path.glob("*.csv")
    header = next(csv.reader(io.StringIO(table.read_text())))
    assert header[4:9] == [*TEXT, "N"]


def test_memo_writes_the_labels_in_tex(focus):
    K = gain_block("K", focus.K.closed_form, focus.K.value)
    assert [str(e["label"]) for e in K["entries"]] == ["K_{1}", "K_{2}"]
    ctx, _figures = memo_robustness(focus, 2, budget=0)
    assert ctx["sensitivity_gains_latex"] == ["K_{1}", "K_{2}", "L_{1}", "L_{2}", "N"]
    assert [row[0] for row in ctx["sensitivity_rows"]] == [*TEXT, "N"]


# Two inputs (an invented demo: two heaters on two coupled zones): K is 2×2.
TWO_INPUTS = """
title = "Two coupled zones (demo values)"
[parameters.a]
value = 0.5
[plant]
A = [[0, 1], ["-a", -1]]
B = [[1, 0], [0, 1]]
C = [[1, 0]]
[controller]
poles = ["-2", "-3"]
[observer]
poles = ["-10", "-11"]
"""


def test_a_matrix_gain_is_labelled_by_row_and_column():
    d = derive(parse_design(TWO_INPUTS, "zones.toml"), budget=0)
    assert d.K.value.shape == (2, 2)
    wrong = [list(map(float, row)) for row in d.K.value]
    wrong[0][1] += 5.0  # moves a pole: A − BK changes in row 1, column 2
    report = check_claims(d, Claims(K=tuple(map(tuple, wrong))))
    text = format_claims(report, d)
    rows = [ln.split()[0] for ln in text.splitlines() if re.match(r"^\s+K_\d,\d\s", ln)]
    assert rows == ["K_1,1", "K_1,2", "K_2,1", "K_2,2"]
    block = gain_block("K", None, d.K.value)
    assert [str(e["label"]) for e in block["entries"]] == [
        "K_{1,1}",
        "K_{1,2}",
        "K_{2,1}",
        "K_{2,2}",
    ]
