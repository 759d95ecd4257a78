"""The public API a notebook user calls: names, inputs accepted, results equal to the CLI's.

Every function of :mod:`symbolic.api` must give the verdict the command line gives (the same
requirements rows, the same exit code), accept a path, a design or a derivation alike, and
print nothing.
"""

from __future__ import annotations

import importlib.util
import os

import numpy as np
import pytest

import symbolic
from symbolic.analysis.requirements import Requirement, RequirementTable
from symbolic.cli import main

from .conftest import WORKED

FOCUS = WORKED / "focus_actuator.toml"  # meets every requirement
HOIST = WORKED / "hoist_winch.toml"  # fails the actuator limit

PUBLIC = {
    # errors
    "BudgetExceeded",
    "DesignFileError",
    "ExpressionError",
    "GainsmithError",
    "GainsmithWarning",
    "RenderError",
    "SpecificationError",
    "StructureError",
    # the design and the derivation's results
    "Check",
    "CompensatorResult",
    "Derivation",
    "Design",
    "GainResult",
    "Parameter",
    "Plant",
    "PoleChoice",
    "ReferenceGainResult",
    "SeparatedLoop",
    "Signal",
    "StructureReport",
    # the results of the entry points below
    "ExportResult",
    "MemoDocument",
    "MemoResult",
    "RequirementTable",
    "RevisionComparison",
    "RobustnessReport",
    "SimulationRun",
    # entry points
    "build_memo",
    "compare",
    "derive",
    "export",
    "load_design",
    "parse_design",
    "robustness",
    "simulate",
    "write_memo",
    "__version__",
}


def test_public_names_are_exactly_the_documented_ones():
    assert set(symbolic.__all__) == PUBLIC
    for name in PUBLIC:
        assert getattr(symbolic, name) is not None
    assert set(symbolic.__all__) <= set(dir(symbolic))


def test_entry_points_have_numpy_style_docstrings():
    for name in ("derive", "simulate", "robustness", "build_memo", "write_memo", "export"):
        doc = getattr(symbolic, name).__doc__
        assert doc and "Returns" in doc, name


def test_simulate_gives_the_command_line_verdict_and_prints_nothing(capsys):
    runs = {}
    for path in (FOCUS, HOIST):
        run = runs[path] = symbolic.simulate(path)
        assert capsys.readouterr().out == ""
        assert isinstance(run, symbolic.SimulationRun)
        code = main(["simulate", str(path)])
        capsys.readouterr()
        assert code == (0 if run.passed else 1)
        assert run.passed == all(r.passed for r in run.requirements.rows)
    assert runs[FOCUS].passed and not runs[HOIST].passed


def test_path_design_and_derivation_give_the_same_result():
    design = symbolic.load_design(FOCUS)
    d = symbolic.derive(design)
    rows = [symbolic.simulate(x).requirements.to_json() for x in (str(FOCUS), design, d)]
    assert rows[0] == rows[1] == rows[2]
    # a derivation is used as it is, not derived again
    assert symbolic.api.derived(d) is d


def test_derive_refines_specification_poles_as_the_command_does():
    # focus_actuator states specifications; the facade runs the refinement hook
    d = symbolic.derive(symbolic.load_design(FOCUS))
    assert d.controller_poles.origin == "specifications"
    assert d.refinement is not None


def test_robustness_verdict_equals_the_command_exit_code(capsys):
    report = symbolic.robustness(FOCUS, points=3)
    assert isinstance(report, symbolic.RobustnessReport)
    code = main(["robustness", str(FOCUS), "--points", "3"])
    capsys.readouterr()
    assert code == (0 if report.passed else 1)
    with pytest.raises(symbolic.DesignFileError):
        symbolic.robustness(FOCUS, points=1)


def test_build_memo_equals_the_committed_memo(monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1764633600")  # as worked_designs/regenerate.sh
    monkeypatch.setenv("GAINSMITH_FIGURE_SERVER", "0")
    doc = symbolic.build_memo(FOCUS)
    assert isinstance(doc, symbolic.MemoDocument)
    assert doc.tex == (WORKED / "focus_actuator.tex").read_text(encoding="utf-8")
    assert doc.markdown == (WORKED / "focus_actuator.md").read_text(encoding="utf-8")
    assert doc.requirements.passed


def test_write_memo_publishes_and_reports(tmp_path):
    result = symbolic.write_memo(HOIST, tmp_path / "memo", pdf=False)
    assert isinstance(result, symbolic.MemoResult)
    assert not result.passed  # the actuator limit row fails
    assert {"hoist_winch.tex", "hoist_winch.md"} <= {p.name for p in result.files}
    assert all(p.is_file() for p in result.files)


def test_export_python_code_computes_the_derived_gains(tmp_path):
    d = symbolic.derive(symbolic.load_design(FOCUS))
    result = symbolic.export(d, lang="python", output=tmp_path)
    assert isinstance(result, symbolic.ExportResult) and result.passed
    (name,) = [n for n in result.files if n.endswith(".py")]
    assert (tmp_path / name).read_bytes() == result.files[name]
    # the generated module, imported, gives K at the nominal parameters
    spec = importlib.util.spec_from_file_location("exported_gains", tmp_path / name)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    values = module.gains(**d.parameter_values)
    assert np.allclose(values["K"], d.K.value, rtol=1e-12)
    assert np.allclose(values["L"], d.L.value, rtol=1e-12)


def test_export_refuses_bad_options_before_deriving():
    with pytest.raises(symbolic.DesignFileError, match="--lang"):
        symbolic.export(FOCUS, lang="fortran")
    with pytest.raises(symbolic.DesignFileError, match="--form"):
        symbolic.export(FOCUS, form="current")


def test_requirement_table_html_escapes_every_value():
    row = Requirement("R1", "k", "<b>x</b> & y", "≤ 1", "2", False, "1 over", "sim", "file")
    table = RequirementTable("continuous <script>", (row,))
    text = table._repr_html_()
    assert "<b>x</b>" not in text and "&lt;b&gt;x&lt;/b&gt; &amp; y" in text
    assert "<script>" not in text and "FAIL" in text
    assert table.verdict in text


def test_entry_points_do_not_write_into_the_working_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    symbolic.simulate(FOCUS)
    assert os.listdir(tmp_path) == []
