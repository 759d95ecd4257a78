"""The public entry points of the package, above every layer: what a notebook user calls.

Each function takes a design (a :class:`~symbolic.model.design.Design`, a path to a design
file, or a finished :class:`~symbolic.model.results.Derivation`) and returns a result object;
nothing is printed (the command line prints, :mod:`symbolic.cli`).  The result objects show
themselves in Jupyter (``_repr_html_`` / ``_repr_markdown_``).

===================  =============================================================
:func:`derive`       K, L, the reference gain, the separated loop, every check
:func:`simulate`     the shipped controller's step responses and the requirements
:func:`robustness`   parameter mismatch, sensitivities, margins over the ranges
:func:`build_memo`   the memo's sources and figures, in memory
:func:`write_memo`   the memo published to a folder (PDF with TeX)
:func:`export`       C99 or Python code of the gains or of the digital controller
:func:`compare`      what changed between two revisions of a design
===================  =============================================================

:func:`symbolic.derive` is :func:`derive` here.  It is the derivation of
:func:`symbolic.derivation.pipeline.derive` with the refinement of specification-based
poles on the simulated step of the shipped loop
(:func:`symbolic.verification.refine.refine_controller_poles`), which the derivation layer
takes as a hook because the refinement belongs to the verification layer above it.
"""

from __future__ import annotations

import os
from typing import TYPE_CHECKING

from .derivation import pipeline
from .model.design import Design
from .model.results import Derivation
from .verification.refine import refine_controller_poles

if TYPE_CHECKING:  # pragma: no cover - the analysis and render layers load on first use
    from .analysis.revision_diff import RevisionComparison
    from .analysis.robust import RobustnessReport
    from .analysis.study import SimulationRun
    from .render.export import ExportResult
    from .render.memo import MemoDocument, MemoResult

__all__ = ["build_memo", "compare", "derive", "export", "robustness", "simulate", "write_memo"]

#: What the functions below accept: a design, the path of a design file, or a derivation.
Subject = Design | Derivation | str | os.PathLike


def derive(design: Design, *, budget: float | None = None) -> Derivation:
    """Derive K, L, the reference gain and the separated loop, and check them.

    Poles from specifications (``[controller]`` without ``poles``) are refined until the
    simulated step of the shipped loop meets them, unless ``[controller] refine = false``
    (:func:`symbolic.verification.refine.refine_controller_poles`).

    Parameters
    ----------
    design : Design
        From :func:`symbolic.load_design`.
    budget : float, optional
        Seconds allowed for all symbolic stages together (default: the design
        file's ``options.symbolic_budget_seconds``, 10 s).  Zero or negative
        runs the symbolic stages in this process without a limit.

    Returns
    -------
    Derivation

    Raises
    ------
    StructureError
        When the plant is uncontrollable or unobservable at the evaluated
        parameter values.

    Examples
    --------
    >>> import symbolic
    >>> design = symbolic.parse_design(b'''
    ... [plant]
    ... A = [[0, 1], [0, 0]]
    ... B = [[0], [1]]
    ... C = [[1, 0]]
    ... [controller]
    ... poles = [-2, -3]
    ... ''')
    >>> derive(design, budget=0).K.closed_form
    Matrix([[6, 5]])
    """
    return pipeline.derive(design, budget=budget, refine=refine_controller_poles)


def derived(subject: Subject) -> Derivation:
    """The derivation of ``subject``: itself if it is one, else :func:`derive` of the design
    (loaded first when ``subject`` is a path)."""
    if isinstance(subject, Derivation):
        return subject
    if isinstance(subject, Design):
        return derive(subject)
    from .input.reader import load_design

    return derive(load_design(subject))


def simulate(subject: Subject) -> SimulationRun:
    """Simulate the shipped controller and judge every requirement on it.

    Returns
    -------
    SimulationRun
        ``.study`` (the step responses, matched and mismatched estimate, the limited input,
        the observer-speed sweep), ``.requirements`` (the numbered rows) and ``.passed``.

    Examples
    --------
    >>> import symbolic
    >>> run = symbolic.simulate("worked_designs/focus_actuator.toml")  # doctest: +SKIP
    >>> run.passed  # doctest: +SKIP
    True
    """
    from .analysis.study import simulation_run

    return simulation_run(derived(subject))


def robustness(subject: Subject, *, points: int = 5) -> RobustnessReport:
    """Parameter mismatch over the ranges, gain sensitivities and stability margins.

    Parameters
    ----------
    points : int
        Grid points per parameter range (at least 2).

    Returns
    -------
    RobustnessReport
        ``.passed`` is False when a grid point is unstable, a margin falls short or a check
        failed; ``.shipped`` holds the requirements rows of the shipped controller.
    """
    from .analysis.parameter_grid import parameter_grid
    from .analysis.robust import robustness_study

    d = derived(subject)
    parameter_grid(d.design, points)  # a bad grid is refused with the design file's name
    return robustness_study(d, points)


def build_memo(subject: Subject) -> MemoDocument:
    """The memo in memory: LaTeX and Markdown sources, figure files, the requirements table.

    Nothing is written and no PDF is compiled (:func:`write_memo` does both).  With
    ``SOURCE_DATE_EPOCH`` set, the sources are byte-identical from run to run.

    Returns
    -------
    MemoDocument
        ``.tex``, ``.markdown``, ``.figures`` (file name to bytes) and ``.requirements``.
    """
    from .render.memo import assemble_memo

    return assemble_memo(derived(subject))


def write_memo(subject: Subject, output: str | os.PathLike, *, pdf: bool = True) -> MemoResult:
    """Publish the memo into the folder ``output`` (atomically) and compile its PDF.

    Returns
    -------
    MemoResult
        The files written, the warnings (a PDF skipped for want of TeX, for one), the
        requirements table and ``.passed``.
    """
    from .render.memo import write_memo as publish_memo

    return publish_memo(derived(subject), output, pdf=pdf)


def export(
    subject: Subject,
    *,
    lang: str = "python",
    digital: bool = False,
    form: str | None = None,
    output: str | os.PathLike | None = None,
) -> ExportResult:
    """The gain formulas (or the digital controller) as C99 or Python code, self-checked.

    Parameters
    ----------
    lang : {"python", "c"}
    digital : bool
        The digital controller's difference equations instead of the gain formulas.
    form : {"current", "predictor", "reduced"}, optional
        The digital controller's observer (only with ``digital``).
    output : path, optional
        Publish the files there.  Code for a loop around a machine is written only when
        every check passed: otherwise :class:`~symbolic.RenderError` is raised and nothing
        is written.

    Returns
    -------
    ExportResult
        ``.files`` (name to text), ``.check`` (the self-check of the generated code),
        ``.passed``.
    """
    from .render.export import check_export_options, export_code, write_export

    if isinstance(subject, Derivation):
        design = subject.design
    elif isinstance(subject, Design):
        design = subject
    else:
        from .input.reader import load_design

        design = load_design(subject)
    check_export_options(design, lang=lang, digital=digital, form=form)
    result = export_code(
        derived(subject if isinstance(subject, Derivation) else design),
        lang=lang,
        digital=digital,
        form=form,
    )
    if output is not None:
        write_export(result, output)
    return result


def compare(old: Subject, new: Subject) -> RevisionComparison:
    """What changed between two revisions of a design, item by item.

    Each side is derived (:func:`derive`) and simulated, and its requirements are judged on
    its own shipped controller (:func:`simulate`); then parameters, plant entries (as
    expressions), requests, chosen poles, gains K, L, N (at each side's nominal values, and
    their closed forms), margins, every requirement row and the verdicts are compared
    (:func:`symbolic.analysis.revision_diff.compare_revisions`).

    Parameters
    ----------
    old, new : Design, Derivation or path
        The earlier and the later revision (the same file twice is allowed: no change).

    Returns
    -------
    RevisionComparison
        ``.differences`` (every item), ``.changes`` (those that changed), ``.unchanged``,
        ``.section(name)``, ``.old`` and ``.new`` (file, revision, SHA-256, verdict) and
        ``.passed`` (the new revision meets every requirement).

    Examples
    --------
    >>> import symbolic
    >>> result = symbolic.compare("worked_designs/focus_actuator.toml",
    ...                           "worked_designs/focus_actuator.toml")  # doctest: +SKIP
    >>> result.unchanged  # doctest: +SKIP
    True
    """
    from .analysis.revision_diff import compare_revisions
    from .analysis.study import simulation_run

    return compare_revisions(simulation_run(derived(old)), simulation_run(derived(new)))
