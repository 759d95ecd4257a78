"""The ``gainsmith`` command line.

Exit codes: 0 success, 1 a check or claim failed, 2 bad input (one-line
message, no traceback), 3 an internal error (a bug; set GAINSMITH_DEBUG=1 for
the traceback).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections.abc import Sequence

from .runtime.errors import GainsmithError

__all__ = ["main", "run"]

EXIT_OK, EXIT_FAILED_CHECK, EXIT_BAD_INPUT, EXIT_BUG = 0, 1, 2, 3

#: Commands that get the SciPy sidecar (symbolic.runtime.sidecar): those whose main process
#: need not load ``scipy.signal`` (the slowest part of SciPy to import).  The memo loads
#: the rest of SciPy for its simulation, but leaves ``place_poles``, ``ss2tf`` and
#: ``freqresp`` to the sidecar, which loads them while the memo loads SymPy and
#: matplotlib.  The other commands load ``scipy.signal`` here anyway (a second copy in
#: the sidecar would only take CPU from them).
SIDECAR_COMMANDS = frozenset({"derive", "export", "memo"})


def _overrides(pairs: Sequence[str] | None, design: str) -> dict[str, str]:
    from .runtime.errors import DesignFileError

    out: dict[str, str] = {}
    for item in pairs or ():
        name, sep, value = item.partition("=")
        if not sep or not name.strip() or not value.strip():
            # same one-line shape as every other input error: FILE: KEY: problem
            raise DesignFileError("expected NAME=VALUE, e.g. --set m=3.1", design, f"--set {item}")
        out[name.strip()] = value.strip()
    return out


def _load(args):
    from .input.reader import load_design

    return load_design(args.design, _overrides(args.set, args.design))


def _cmd_derive(args) -> int:
    from . import derive
    from .render.report import derivation_json, derivation_summary, dumps

    d = derive(_load(args))
    if args.json:
        print(dumps(derivation_json(d)))
    else:
        print(derivation_summary(d))
    return EXIT_OK if d.passed else EXIT_FAILED_CHECK


def _cmd_memo(args) -> int:
    from . import derive
    from .render.memo import write_memo

    design = _load(args)
    previous = _previous_revision(args)  # --compare OLD: read before any work
    t0 = time.perf_counter()
    d = derive(design)
    comparison = None if previous is None else _compare(previous, d)
    result = write_memo(d, args.output, pdf=not args.no_pdf, comparison=comparison)
    if args.json:
        from .render.report import dumps

        for warning in result.warnings:
            print(warning, file=sys.stderr)
        print(dumps(result.to_json()))
        return EXIT_OK if result.passed else EXIT_FAILED_CHECK
    print(
        f"memo written to {result.output}/: "
        + ", ".join(result.documents)
        + f" and {result.figure_count} figure files ({time.perf_counter() - t0:.1f} s)"
    )
    if result.pdf_seconds is not None:
        print(f"PDF compiled in {result.pdf_seconds:.1f} s")
    for warning in result.warnings:
        print(warning, file=sys.stderr)
    print(result.requirements.verdict)
    for item in result.requirements.open_items:
        print(f"  open item {item}")
    return EXIT_OK if result.passed else EXIT_FAILED_CHECK


def _cmd_simulate(args) -> int:
    from . import derive
    from .analysis.study import simulation_run
    from .render.report import dumps
    from .render.study_pages import simulation_json, simulation_text

    run = simulation_run(derive(_load(args)))
    if args.json:
        print(dumps(simulation_json(run.study, run.requirements)))
    else:
        print(simulation_text(run.study, run.derivation, run.requirements))
    return EXIT_OK if run.passed else EXIT_FAILED_CHECK


def _cmd_check(args) -> int:
    from . import derive
    from .analysis.claims import claimed_tolerance, hand_check
    from .render.claims_pages import claims_json, format_claims
    from .render.report import dumps

    design = _load(args)
    tolerance = claimed_tolerance(design, args.tolerance)  # refused before the derivation
    d = derive(design)
    report = hand_check(d, tolerance)
    if args.json:
        print(dumps(claims_json(report, d)))
    else:
        print(format_claims(report, d))
    return EXIT_OK if report.holds else EXIT_FAILED_CHECK


def _cmd_export(args) -> int:
    from . import derive
    from .render.export import check_export_options, export_code, write_export
    from .render.gain_formulas import CODE_WORDS

    design = _load(args)
    options = {"lang": args.lang, "digital": args.digital, "form": args.form}
    check_export_options(design, **options)
    result = export_code(derive(design), **options)
    check = result.check
    print(
        f"{'pass' if check.passed else 'FAIL'}  {check.what}: {check.difference:.2e}"
        f" <= {check.tolerance:g}"
    )
    if not result.derivation_passed:
        print("FAIL  some checks of the derivation failed: run `gainsmith derive` for details")
    if not result.passed:
        print(
            "nothing written: code for a loop around a machine is exported only when every check passes"
        )
        return EXIT_FAILED_CHECK
    for path in write_export(result, args.output):
        print(f"wrote {path}")
    for f in result.factors:
        print(
            f"  the gains do not exist where {f.condition}: returns {f.code} ({CODE_WORDS[f.code]})"
        )
    for text in result.not_exported:
        print(f"  not exported: {text}")
    return EXIT_OK


def _cmd_schedule(args) -> int:
    from . import derive
    from .analysis.schedule import schedule_axes
    from .render.report import dumps
    from .render.schedule_pages import publish_schedule, schedule_json, schedule_text

    design = _load(args)
    schedule_axes(design, args.points, args.vary)  # refuse a bad request before the derivation
    result = publish_schedule(
        derive(design), out_dir=args.output, points=args.points, vary=args.vary
    )
    if args.json:
        print(dumps(schedule_json(result)))
    else:
        print(schedule_text(result.schedule, result.files))
    return EXIT_OK if result.passed else EXIT_FAILED_CHECK


def _cmd_robustness(args) -> int:
    from . import derive
    from .analysis.parameter_grid import parameter_grid
    from .analysis.robust import robustness_study
    from .render.report import dumps
    from .render.robust_pages import robustness_json, robustness_text

    design = _load(args)
    parameter_grid(design, args.points)  # refuse a bad grid before the derivation
    report = robustness_study(derive(design), args.points)
    if args.json:
        print(dumps(robustness_json(report)))
    else:
        print(robustness_text(report))
    return EXIT_OK if report.passed else EXIT_FAILED_CHECK


def _previous_revision(args):
    """The design of ``memo --compare OLD``, or None without the option."""
    if getattr(args, "compare", None) is None:
        return None
    from .input.reader import load_design

    return load_design(args.compare)


def _compare(old, new):
    from .api import compare

    return compare(old, new)


def _cmd_compare(args) -> int:
    from .input.reader import load_design
    from .render.report import dumps
    from .render.revision_pages import comparison_json, comparison_text

    old, new = load_design(args.old), load_design(args.new)  # both refused before any work
    t0 = time.perf_counter()
    result = _compare(old, new)
    if args.json:
        print(dumps(comparison_json(result)))
    else:
        print(comparison_text(result))
        print(f"(compared in {time.perf_counter() - t0:.1f} s)")
    return EXIT_OK if result.passed else EXIT_FAILED_CHECK


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("design", help="the design file (TOML)")
    p.add_argument(
        "--set",
        action="append",
        metavar="NAME=VALUE",
        help="evaluate at another parameter value (repeatable)",
    )


def _json_flag(p: argparse.ArgumentParser, text: str = "print machine-readable results") -> None:
    p.add_argument("--json", action="store_true", help=text)


def _add_derive(sub) -> None:
    p = sub.add_parser(
        "derive", help="derive K, L and the reference gain; check them against SciPy"
    )
    _common(p)
    _json_flag(p)
    p.set_defaults(func=_cmd_derive)


def _add_memo(sub) -> None:
    p = sub.add_parser("memo", help="write the design memo (.tex, .md, figures, and .pdf with TeX)")
    _common(p)
    p.add_argument("-o", "--output", default="memo", help="output folder (default: ./memo)")
    p.add_argument("--no-pdf", action="store_true", help="do not compile the PDF")
    p.add_argument(
        "--compare",
        metavar="OLD",
        help='add a section "Changes since revision X" against the earlier design file OLD',
    )
    _json_flag(p, "print the files written and the requirements table")
    p.set_defaults(func=_cmd_memo)


def _add_simulate(sub) -> None:
    p = sub.add_parser("simulate", help="simulate the step response and compare with the specs")
    _common(p)
    _json_flag(p)
    p.set_defaults(func=_cmd_simulate)


def _add_check(sub) -> None:
    p = sub.add_parser("check", help="check hand-calculated gains in the [claimed] table")
    _common(p)
    p.add_argument(
        "--tolerance",
        type=float,
        default=None,
        help="relative tolerance (default: the file's, else 1e-3)",
    )
    _json_flag(p)
    p.set_defaults(func=_cmd_check)


def _add_export(sub) -> None:
    p = sub.add_parser(
        "export", help="write the gain formulas, or the digital controller, as C99 or Python code"
    )
    _common(p)
    p.add_argument("--lang", choices=("c", "python"), required=True, help="target language")
    p.add_argument("-o", "--output", default="export", help="output folder (default: ./export)")
    p.add_argument(
        "--digital",
        action="store_true",
        help="write the digital controller (difference equations at the [discrete] sample"
        " time) instead of the gain formulas",
    )
    p.add_argument(
        "--form",
        choices=("current", "predictor", "reduced"),
        default=None,
        help="observer of the digital controller (default: reduced with [observer] kind ="
        ' "reduced", else current)',
    )
    p.set_defaults(func=_cmd_export)


def _add_schedule(sub) -> None:
    p = sub.add_parser("schedule", help="evaluate the gains over the parameter ranges (CSV + plot)")
    _common(p)
    p.add_argument("-o", "--output", default="schedule", help="output folder (default: ./schedule)")
    p.add_argument(
        "--points", type=int, default=11, help="grid points per varying parameter (default 11)"
    )
    p.add_argument(
        "--vary",
        action="append",
        metavar="NAME",
        help="vary only these parameters (repeatable; default: every parameter with a range)",
    )
    _json_flag(p, "print a machine-readable summary")
    p.set_defaults(func=_cmd_schedule)


def _add_robustness(sub) -> None:
    p = sub.add_parser("robustness", help="parameter mismatch, sensitivities and stability margins")
    _common(p)
    p.add_argument(
        "--points", type=int, default=5, help="grid points per parameter range (default 5)"
    )
    _json_flag(p)
    p.set_defaults(func=_cmd_robustness)


def _add_compare(sub) -> None:
    p = sub.add_parser(
        "compare",
        help="what changed between two revisions of a design (exit 0 when NEW meets every"
        " requirement)",
    )
    p.add_argument("old", metavar="OLD", help="the earlier design file (TOML)")
    p.add_argument("new", metavar="NEW", help="the later design file (TOML)")
    _json_flag(p, "print every compared item, machine-readable")
    p.set_defaults(func=_cmd_compare)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="gainsmith",
        description=(
            "Observer-based state-feedback design from one design file: closed-form gains,"
            " SciPy cross-checks, simulation and a review memo."
        ),
    )
    from .runtime.version import __version__

    parser.add_argument("--version", action="version", version=f"gainsmith {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for add in (
        _add_derive,
        _add_memo,
        _add_simulate,
        _add_check,
        _add_export,
        _add_schedule,
        _add_robustness,
        _add_compare,
    ):
        add(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command in SIDECAR_COMMANDS and os.environ.get("GAINSMITH_SIDECAR", "1") != "0":
        from .runtime import sidecar as _sidecar

        _sidecar.start()  # SciPy loads there while SymPy loads here
    if args.command == "memo" and os.environ.get("GAINSMITH_FIGURE_SERVER", "1") != "0":
        from .render import figure_server

        figure_server.start_server()  # matplotlib loads and warms up there; figures are drawn there
    try:
        return int(args.func(args))
    except GainsmithError as exc:
        print(f"gainsmith: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("gainsmith: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug: one line unless asked for the traceback
        if os.environ.get("GAINSMITH_DEBUG"):
            raise
        print(
            f"gainsmith: internal error ({type(exc).__name__}: {exc}); this is a bug — rerun with"
            " GAINSMITH_DEBUG=1 for the traceback",
            file=sys.stderr,
        )
        return EXIT_BUG


def run() -> None:
    """The console script (``gainsmith``) and ``python -m symbolic``: :func:`main`, then exit.

    The work is done and every output file published when :func:`main` returns; what is
    left is the interpreter's teardown of SymPy, SciPy and matplotlib, measured at about
    0.8 s after a memo.  So the streams are flushed, the SciPy sidecar and the figure
    server (if any) are stopped, and the process exits at once with :func:`os._exit`.  Library callers of
    :func:`main` (the tests) keep the normal exit.
    """
    code = main()
    sidecar = sys.modules.get(f"{__package__}.runtime.sidecar")
    if sidecar is not None:
        sidecar.stop()
    figure_server = sys.modules.get(f"{__package__}.render.figure_server")
    if figure_server is not None:
        figure_server.stop_server()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a closed pipe (| head): nothing more to say
            pass
    os._exit(code)


if __name__ == "__main__":  # pragma: no cover
    run()
