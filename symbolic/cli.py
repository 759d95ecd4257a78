"""The ``gainsmith`` command line.

Exit codes: 0 success, 1 a check or claim failed, 2 bad input (one-line
message, no traceback), 3 an internal error (a bug; set GAINSMITH_DEBUG=1 for
the traceback).
"""

from __future__ import annotations

import argparse
import os
import sys
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
    from .input.design import load_design

    return load_design(args.design, _overrides(args.set, args.design))


def _cmd_derive(args) -> int:
    from .api import derive
    from .render.report import derivation_json, derivation_summary, dumps

    d = derive(_load(args))
    if args.json:
        print(dumps(derivation_json(d)))
    else:
        print(derivation_summary(d))
    return EXIT_OK if d.passed else EXIT_FAILED_CHECK


def _cmd_memo(args) -> int:
    from .render.memo import write_memo

    return write_memo(_load(args), args.output, pdf=not args.no_pdf, as_json=args.json)


def _cmd_simulate(args) -> int:
    from .analysis.study import run_simulate

    return run_simulate(_load(args), as_json=args.json)


def _cmd_check(args) -> int:
    from .analysis.claims import run_check

    return run_check(_load(args), tolerance=args.tolerance, as_json=args.json)


def _cmd_export(args) -> int:
    from .render.export import run_export

    return run_export(
        _load(args), lang=args.lang, out_dir=args.output, digital=args.digital, form=args.form
    )


def _cmd_schedule(args) -> int:
    from .analysis.schedule import run_schedule

    return run_schedule(
        _load(args), out_dir=args.output, points=args.points, vary=args.vary, as_json=args.json
    )


def _cmd_robustness(args) -> int:
    from .analysis.robust import run_robustness

    return run_robustness(_load(args), points=args.points, as_json=args.json)


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

    def common(p: argparse.ArgumentParser) -> None:
        p.add_argument("design", help="the design file (TOML)")
        p.add_argument(
            "--set",
            action="append",
            metavar="NAME=VALUE",
            help="evaluate at another parameter value (repeatable)",
        )

    p = sub.add_parser(
        "derive", help="derive K, L and the reference gain; check them against SciPy"
    )
    common(p)
    p.add_argument("--json", action="store_true", help="print machine-readable results")
    p.set_defaults(func=_cmd_derive)

    p = sub.add_parser("memo", help="write the design memo (.tex, .md, figures, and .pdf with TeX)")
    common(p)
    p.add_argument("-o", "--output", default="memo", help="output folder (default: ./memo)")
    p.add_argument("--no-pdf", action="store_true", help="do not compile the PDF")
    p.add_argument(
        "--json", action="store_true", help="print the files written and the requirements table"
    )
    p.set_defaults(func=_cmd_memo)

    p = sub.add_parser("simulate", help="simulate the step response and compare with the specs")
    common(p)
    p.add_argument("--json", action="store_true", help="print machine-readable results")
    p.set_defaults(func=_cmd_simulate)

    p = sub.add_parser("check", help="check hand-calculated gains in the [claimed] table")
    common(p)
    p.add_argument(
        "--tolerance",
        type=float,
        default=None,
        help="relative tolerance (default: the file's, else 1e-3)",
    )
    p.add_argument("--json", action="store_true", help="print machine-readable results")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser(
        "export", help="write the gain formulas, or the digital controller, as C99 or Python code"
    )
    common(p)
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

    p = sub.add_parser("schedule", help="evaluate the gains over the parameter ranges (CSV + plot)")
    common(p)
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
    p.add_argument("--json", action="store_true", help="print a machine-readable summary")
    p.set_defaults(func=_cmd_schedule)

    p = sub.add_parser("robustness", help="parameter mismatch, sensitivities and stability margins")
    common(p)
    p.add_argument(
        "--points", type=int, default=5, help="grid points per parameter range (default 5)"
    )
    p.add_argument("--json", action="store_true", help="print machine-readable results")
    p.set_defaults(func=_cmd_robustness)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command in SIDECAR_COMMANDS and os.environ.get("GAINSMITH_SIDECAR", "1") != "0":
        from .runtime import sidecar as _sidecar

        _sidecar.start()  # SciPy loads there while SymPy loads here
    if args.command == "memo" and os.environ.get("GAINSMITH_FIGURE_SERVER", "1") != "0":
        from .render import figures as _figures

        _figures.start_server()  # matplotlib loads and warms up there; figures are drawn there
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
    sidecar = sys.modules.get(f"{__package__}._sidecar")
    if sidecar is not None:
        sidecar.stop()
    figures = sys.modules.get(f"{__package__}._figures")
    if figures is not None:
        figures.stop_server()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # a closed pipe (| head): nothing more to say
            pass
    os._exit(code)


if __name__ == "__main__":  # pragma: no cover
    run()
