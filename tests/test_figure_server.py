"""The figure server: warm workers started by the memo command draw the memo's figures.

The server is only an accelerator: the files must be byte for byte those drawn in this
process, the main process of a memo must never load matplotlib, and whatever the server
cannot draw (a maker that does not pickle, a dead worker) is drawn here instead.
"""

from __future__ import annotations

import functools
import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from symbolic.render import figure_server, figures

ROOT = Path(__file__).resolve().parents[1]
WORKED = ROOT / "worked_designs"


def _memo_in_fresh_interpreter(out: Path, design: Path, **env: str) -> dict:
    code = f"""
        import contextlib, io, json, sys
        from symbolic import cli
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
            code = cli.main(["memo", {str(design)!r}, "-o", {str(out)!r}, "--no-pdf"])
        from symbolic.render import figure_server
        print(json.dumps({{"code": code, "server": figure_server.server_running(),
                          "matplotlib_here": "matplotlib" in sys.modules}}))
    """
    done = subprocess.run(
        [sys.executable, "-c", textwrap.dedent(code)],
        cwd=ROOT,
        env={**os.environ, "SOURCE_DATE_EPOCH": "1764633600", **env},
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_memo_figures_come_from_the_server_identical_and_matplotlib_stays_out(
    tmp_path, worked_memo
):
    out = _memo_in_fresh_interpreter(tmp_path / "served", WORKED / "hoist_winch.toml")
    # the winch memo lists an open item (its actuator limit): exit code 1, memo written
    assert out == {"code": 1, "server": True, "matplotlib_here": False}
    served = sorted((tmp_path / "served" / "figures").iterdir())
    assert len(served) == 28  # the hoist winch: 14 figures, PDF and PNG
    # the same bytes as those drawn in a process without the server (the test run's own
    # build, drawn by forked workers) and as the committed figures
    local = worked_memo("hoist_winch").folder / "figures"
    for path in served:
        assert path.read_bytes() == (local / path.name).read_bytes(), path.name
        assert path.read_bytes() == (WORKED / "figures" / path.name).read_bytes(), path.name


def test_the_variable_turns_the_server_off(tmp_path):
    # the server starts before the design file is read, so a missing file shows it
    missing = tmp_path / "missing.toml"
    off = _memo_in_fresh_interpreter(tmp_path / "off", missing, GAINSMITH_FIGURE_SERVER="0")
    assert off == {"code": 2, "server": False, "matplotlib_here": False}


def _line_figure(values):
    fig = figures.blank_figure((2.0, 1.5))
    fig.add_subplot(1, 1, 1).plot(values)
    return fig


def _run_in_child(body: str) -> dict:
    code = "import json\nfrom symbolic.render import figure_server\n" + textwrap.dedent(body)
    done = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr[-3000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_what_the_server_cannot_draw_is_drawn_here():
    """An unpicklable maker (a lambda) and every figure after the server was killed are
    drawn in this process, with the same bytes as the server's."""
    out = _run_in_child(
        """
        import functools, os, signal
        from tests.test_figure_server import _line_figure
        assert figure_server.start_server(workers=2)
        makers = {
            "served": functools.partial(_line_figure, [1.0, 3.0, 2.0]),
            "lambda": lambda: _line_figure([1.0, 3.0, 2.0]),
        }
        with figure_server.deferred_figures() as batch:
            figure_server.render_figures(makers)
            files = batch.result()
        same = files["served.png"] == files["lambda.png"] and files["served.pdf"] == files["lambda.pdf"]
        os.kill(figure_server.server_process().pid, signal.SIGKILL)
        figure_server.server_process().join()
        with figure_server.deferred_figures() as batch:
            figure_server.render_figures({"after": functools.partial(_line_figure, [1.0, 3.0, 2.0])})
            after = batch.result()
        figure_server.stop_server()
        print(json.dumps({"same": same, "after": after["after.png"] == files["served.png"],
                          "names": sorted(files) + sorted(after)}))
        """
    )
    assert out == {
        "same": True,
        "after": True,
        "names": ["lambda.pdf", "lambda.png", "served.pdf", "served.png", "after.pdf", "after.png"],
    }


def test_stopping_the_server_leaves_no_worker_behind():
    out = _run_in_child(
        """
        import functools, os, time
        from tests.test_figure_server import _line_figure
        assert figure_server.start_server(workers=2)
        first = figure_server.server_process().pid
        with figure_server.deferred_figures() as batch:
            figure_server.render_figures({"a": functools.partial(_line_figure, [0.0, 1.0]),
                                     "b": functools.partial(_line_figure, [1.0, 0.0])})
            batch.result()
        children = [int(p) for p in open(f"/proc/{first}/task/{first}/children").read().split()]
        figure_server.stop_server()
        time.sleep(0.5)
        alive = [p for p in [first, *children] if os.path.exists(f"/proc/{p}")
                 and open(f"/proc/{p}/stat").read().split()[2] != "Z"]
        print(json.dumps({"workers": 1 + len(children), "alive": alive}))
        """
    )
    assert out == {"workers": 2, "alive": []}


def test_no_server_when_matplotlib_is_loaded_already():
    pytest.importorskip("matplotlib")
    import matplotlib  # noqa: F401

    assert not figure_server.start_server()
    assert not figure_server.server_running()
    files = figure_server.render_figures({"x": functools.partial(_line_figure, [1.0, 2.0])})
    assert sorted(files) == ["x.pdf", "x.png"] and files["x.png"].startswith(b"\x89PNG")


def test_records_travel_as_plain_namespaces(tmp_path):
    """Dataclass arguments of a maker are sent as SimpleNamespace copies of their fields and
    properties, so the worker never imports the module that defines them (here the
    simulation's Response, whose module loads SciPy)."""
    import pickle
    import types

    import numpy as np

    from symbolic.analysis.margins import MarginReport

    response = _run_in_child(
        """
        import pickle, sys
        from symbolic import derive, load_design
        from symbolic.analysis.study import simulation_study
        d = derive(load_design("worked_designs/belt_drive.toml"), budget=0)
        case = simulation_study(d).cases[0].response
        payload = pickle.dumps(figure_server.portable([case, {"k": (case, 2.0)}]))
        open(PATH, "wb").write(payload)
        print(json.dumps({"name": case.name, "samples": int(case.time.size)}))
        """.replace("PATH", repr(str(tmp_path / "payload")))
    )
    out = _run_in_child(
        f"""
        import pickle, sys
        value = pickle.loads(open({str(tmp_path / "payload")!r}, "rb").read())
        print(json.dumps({{"name": value[0].name, "samples": int(value[1]["k"][0].time.size),
                          "loaded": sorted(m for m in sys.modules
                                           if m.startswith(("scipy", "sympy", "symbolic._sim")))}}))
        """
    )
    assert out == {"name": response["name"], "samples": response["samples"], "loaded": []}
    # properties are evaluated and copied; the copy pickles
    fields = {f: None for f in MarginReport.__dataclass_fields__}
    report = MarginReport(**{**fields, "checks": (), "frequency": np.ones(3)})
    plain = figure_server.portable(report)
    assert isinstance(plain, types.SimpleNamespace) and plain.passed is report.passed
    assert pickle.loads(pickle.dumps(plain)).frequency.tolist() == [1.0, 1.0, 1.0]
