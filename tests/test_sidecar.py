"""The SciPy sidecar: same results as a local call, and SciPy stays out of the main process.

Each check runs in a fresh interpreter: the sidecar only takes calls while the
calling process has not imported SciPy, and the test process has.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
WORKED = ROOT / "worked_designs"


def _python(code: str, **env: str) -> dict:
    """Run ``code`` in a fresh interpreter; it prints one JSON object as its last line."""
    done = subprocess.run(
        [sys.executable, "-c", textwrap.dedent(code)],
        cwd=ROOT,
        env={**os.environ, **env},
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr[-3000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


DERIVE = """
    import json, os, sys, warnings
    from symbolic.runtime import sidecar as _sidecar
    started = _sidecar.start() if os.environ.get("START") == "1" else False
    from symbolic import derive, load_design
    from symbolic.render.report import derivation_json
    d = derive(load_design({path!r}))
    out = derivation_json(d)
    out.pop("timings", None)
    print(json.dumps({{
        "started": started,
        "running": _sidecar.running(),
        "scipy_here": sorted(m for m in sys.modules if m == "scipy" or m.startswith("scipy.")),
        "result": out,
    }}, sort_keys=True, default=str))
"""


@pytest.mark.parametrize("name", sorted(p.stem for p in WORKED.glob("*.toml")))
def test_derivation_is_the_same_with_and_without_the_sidecar(name):
    """Every worked design, the hoist winch's sampled-data model, integral action and
    reduced observer included."""
    code = DERIVE.format(path=str(WORKED / f"{name}.toml"))
    remote = _python(code, START="1")
    local = _python(code, START="0")
    assert remote["started"] and remote["running"]
    # the point of the sidecar: the main process never loaded SciPy ...
    assert remote["scipy_here"] == []
    # ... and without it the same derivation loads SciPy here
    assert "scipy.signal" in local["scipy_here"]
    assert remote["result"] == local["result"]


def test_calls_run_in_the_sidecar_and_fall_back_when_it_dies():
    out = _python(
        """
        import json, os, signal
        import numpy as np
        from symbolic.runtime import sidecar as _sidecar
        from symbolic.derivation.numeric import pole_residual, scipy_placement
        assert _sidecar.start()
        there = _sidecar.call(os.getpid)
        A = np.array([[0.0, 1.0], [-2.0, -0.5]]); B = np.array([[0.0], [1.0]])
        K_remote, how = scipy_placement(A, B, [-3.0, -4.0])
        res_remote = pole_residual(np.linalg.eigvals(A - B @ K_remote), [-3.0, -4.0])
        # a forked child of this process must not use the parent's pipe
        pid = os.fork()
        if pid == 0:
            os._exit(0 if not _sidecar.running() else 1)
        _, status = os.waitpid(pid, 0)
        os.kill(_sidecar._state["process"].pid, signal.SIGKILL)
        _sidecar._state["process"].join()
        K_local, _ = scipy_placement(A, B, [-3.0, -4.0])   # falls back to this process
        print(json.dumps({
            "here": os.getpid(), "there": there, "how": how,
            "child_saw_no_sidecar": os.WEXITSTATUS(status) == 0,
            "running_after_kill": _sidecar.running(),
            "K_remote": K_remote.tolist(), "K_local": K_local.tolist(),
            "res_remote": res_remote,
        }))
        """
    )
    assert out["there"] != out["here"]
    assert out["how"] == "scipy.signal.place_poles"
    assert out["child_saw_no_sidecar"]
    assert not out["running_after_kill"]
    assert out["K_remote"] == out["K_local"]
    assert out["res_remote"] < 1e-9


def test_errors_and_warnings_from_the_sidecar_are_those_of_a_local_call():
    out = _python(
        """
        import json, sys, warnings
        from symbolic.runtime import sidecar as _sidecar
        from symbolic.runtime.errors import GainsmithWarning, SpecificationError
        from symbolic.derivation.dominant import dominant_pair
        from symbolic.model.specifications import Specifications
        assert _sidecar.start()
        # overshoot so large that the damping ratio leaves the rise-time fit: a warning
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            pair = _sidecar.call(dominant_pair, Specifications(overshoot_percent=80.0, rise_time=0.5))
        warned = [str(w.message) for w in caught if issubclass(w.category, GainsmithWarning)]
        scipy_after_warning = "scipy" in sys.modules
        try:
            _sidecar.call(dominant_pair, Specifications(overshoot_percent=5.0))
        except SpecificationError as exc:
            error = str(exc)
        print(json.dumps({"warned": warned, "poles": [str(p) for p in pair.poles],
                          "scipy_after_warning": scipy_after_warning, "error": error}))
        """
    )
    assert len(out["warned"]) == 1 and "rise-time fit" in out["warned"][0]
    assert not out["scipy_after_warning"]  # the warning came back from the sidecar
    assert "overshoot" in out["error"] or "speed" in out["error"]


@pytest.mark.parametrize("command", sorted(__import__("symbolic.cli").cli.SIDECAR_COMMANDS))
def test_commands_with_a_sidecar_never_load_scipy_themselves(command, tmp_path):
    """derive and export load no SciPy at all; the memo loads SciPy for its simulation but
    leaves scipy.signal (place_poles, ss2tf, freqresp) to the sidecar."""
    extra = {
        "export": ["--lang", "c", "-o", str(tmp_path / "out")],
        "memo": ["-o", str(tmp_path / "memo"), "--no-pdf"],
    }.get(command, [])
    out = _python(
        f"""
        import contextlib, io, json, sys
        from symbolic import cli
        with contextlib.redirect_stdout(io.StringIO()):
            code = cli.main({[command, str(WORKED / "belt_drive.toml"), *extra]!r})
        print(json.dumps({{"code": code,
                          "scipy_here": sorted(m for m in sys.modules if m.startswith("scipy"))}}))
        """
    )
    # the belt drive's memo lists open items (its requirements table fails): exit 1
    assert out["code"] == (1 if command == "memo" else 0)
    if command == "memo":
        assert "scipy.integrate" in out["scipy_here"]  # the simulation's, loaded here
        assert not [m for m in out["scipy_here"] if m.startswith("scipy.signal")]
    else:
        assert out["scipy_here"] == []


def test_the_command_exits_fast_with_every_output_flushed(tmp_path):
    """``run`` ends the process with os._exit after flushing: the JSON on stdout is whole,
    and the exit codes and the one-line error are those of main."""
    done = subprocess.run(
        [sys.executable, "-m", "symbolic", "derive", str(WORKED / "belt_drive.toml"), "--json"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["passed"] is True
    bad = tmp_path / "bad.toml"
    bad.write_text("[plant]\nA = [[0]]\nB = [[1]]\nC = [[1]]\n[controler]\n")
    done = subprocess.run(
        [sys.executable, "-m", "symbolic", "derive", str(bad)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and "controler" in done.stderr
