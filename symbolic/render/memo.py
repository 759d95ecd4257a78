"""The design memo: one document per output format, and its figures, from one derivation.

Flow: :func:`build_context` assembles the template context from the section builders
(:mod:`symbolic.render.memo_design`, :mod:`symbolic.render.memo_gains`,
:mod:`symbolic.render.memo_extended`, ...).  Plain strings are escaped by the template
environments themselves; only formulas that our own code typeset are marked trusted
(:class:`~symbolic.render.mathvalues.OwnMath`).  :func:`build_memo` renders that context
once per format of :data:`symbolic.render.formats.FORMATS` (each format marks the trusted
math its own way), :func:`assemble_memo` adds the simulation, the claims, the robustness
study and the figures, and :func:`write_memo` compiles the PDF (locked down, see
:mod:`symbolic.render.pdf`) and publishes every file atomically
(:mod:`symbolic.runtime.publish`), returning a :class:`MemoResult`.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from ..model.numbers import format_pole
from ..model.results import Derivation
from ..runtime.errors import RenderError
from .comparison_memo import optimal_context
from .formats import FORMATS, LATEX, MARKDOWN, render_template
from .mathtex import pole_latex, symbol_latex
from .mathvalues import own_math
from .memo_design import front_matter, plant_context, poles_context
from .memo_extended import extended_sections, memo_extended_sections
from .memo_gains import gains_context, shipped_context, verification_context
from .memo_prose import code_words, typeset_prose
from .memo_references import references

__all__ = [
    "PDF_SKIPPED",
    "MemoDocument",
    "MemoResult",
    "assemble_memo",
    "build_context",
    "build_memo",
    "memo_robustness_section",
    "write_memo",
]

#: Why a memo has no PDF on a machine without TeX, and how to get one.
PDF_SKIPPED = (
    "PDF skipped: no TeX engine found (install TeX Live's pdflatex and latexmk, e.g."
    " apt-get install texlive-latex-recommended texlive-fonts-recommended latexmk)"
)


@dataclass(frozen=True)
class MemoDocument:
    """The rendered memo: one source per output format, and figure files, by file name."""

    name: str
    #: the source of each format of :data:`symbolic.render.formats.FORMATS`, by format name
    sources: Mapping[str, str]
    figures: dict[str, bytes]
    #: the requirements table the memo's verdict shows (symbolic.analysis.requirements.RequirementTable)
    requirements: object = None

    @property
    def tex(self) -> str:
        """The LaTeX source."""
        return self.sources[LATEX.name]

    @property
    def markdown(self) -> str:
        """The Markdown source."""
        return self.sources[MARKDOWN.name]


@dataclass(frozen=True)
class MemoResult:
    """What :func:`write_memo` wrote, and the verdict of the memo."""

    #: the output folder
    output: Path
    #: every file written, as published (documents, figures, the PDF)
    files: tuple[Path, ...]
    figure_count: int
    #: the requirements table of the memo (symbolic.analysis.verdict.RequirementTable)
    requirements: object
    #: whether a PDF was compiled and written
    pdf: bool = False
    #: seconds the PDF compile took, None when no PDF was compiled
    pdf_seconds: float | None = None
    #: what a reviewer should know that does not stop the memo (e.g. :data:`PDF_SKIPPED`)
    warnings: tuple[str, ...] = ()

    @property
    def passed(self) -> bool:
        """Every row of the requirements table passes."""
        return self.requirements.passed

    @property
    def documents(self) -> tuple[str, ...]:
        """File names of the memo documents (one per format, and the PDF), sorted."""
        suffixes = {fmt.suffix for fmt in FORMATS} | {".pdf"}
        return tuple(
            sorted(p.name for p in self.files if p.suffix in suffixes and p.parent == self.output)
        )

    def to_json(self) -> dict:
        """The files written and the requirements table (``gainsmith memo --json``)."""
        return {
            "output": str(self.output),
            "files": sorted(str(p.relative_to(self.output)) for p in self.files),
            "pdf": self.pdf,
            "requirements": self.requirements.to_json(),
            "passed": self.passed,
        }


def _requirements_context(table) -> dict:
    """The requirements table for the templates: its JSON form plus two counts, and what
    must change for each row that fails (the conclusion's list)."""
    ctx = table.to_json()
    ctx["count"] = len(ctx["rows"])
    ctx["failed"] = sum(not r["passed"] for r in ctx["rows"])
    ctx["changes"] = [
        {
            "number": r["number"],
            "label": r["label"],
            "achieved": r["achieved"],
            "requested": r["requested"],
            "remedy": _remedy(r["key"]),
        }
        for r in ctx["rows"]
        if not r["passed"]
    ]
    return ctx


_SPECIFICATION_KEYS = ("overshoot_percent", "settling_time", "rise_time", "peak_time")
_DEFAULT_REMEDY = "review the design against this requirement before release"
#: What usually makes a failed requirement pass, by the key of its row (common practice,
#: no source): the conclusion lists it beside the row.
REMEDIES = {
    "overshoot_percent": (
        "move the dominant pair (the [controller] specifications or poles); the further"
        " poles, the observer and the plant zeros are outside the second-order approximation"
    ),
    "actuator_limit": (
        "slow the controller (or the observer, for the mismatched estimate), shape the"
        " reference (a ramp instead of a step), or choose an actuator with a larger limit"
    ),
    "steady_state_error": 'use integral action ([tracking] method = "integral")',
    "nominal_stability": "the gains do not stabilise the nominal plant: see the checks",
    "closed_loop_poles": "the gains do not place the requested poles: see the checks",
    "parameter_ranges": (
        "make the loop robust over the ranges: slower controller or observer poles,"
        " integral action, or gains scheduled over the parameters (gainsmith schedule)"
    ),
    "margins": (
        "raise the margins: slower controller poles, a slower observer (the observer-based"
        " loop has the smaller margins), or more damping in the dominant pair"
    ),
    "estimator_speed": "make the observer faster (observer.speed_factor or [observer] poles)",
    "cross_checks": "a check of the derivation failed: do not use these gains",
    "claims": "the hand calculation and the derivation disagree: find which is wrong",
}
REMEDIES["gain_margin"] = REMEDIES["phase_margin"] = REMEDIES["margins"]


def _remedy(key: str) -> str:
    if key in _SPECIFICATION_KEYS:
        return REMEDIES["overshoot_percent"]
    return REMEDIES.get(key, _DEFAULT_REMEDY)


def build_context(
    d: Derivation, study=None, claims=None, requirements=None, controller=None
) -> dict:
    """The template context shared by every memo format.

    ``requirements`` is the :class:`symbolic.analysis.requirements.RequirementTable` of the shipped
    ``controller`` (:class:`symbolic.verification.shipped.ShippedController`); both are computed here
    when not given.
    """
    if controller is None:
        from ..verification.shipped_assembly import shipped_controller

        controller = shipped_controller(d)
    if requirements is None:
        from ..analysis.study import simulation_study
        from ..analysis.verdict import requirement_table

        requirements = requirement_table(d, simulation_study(d, sweep=False, controller=controller))
    return {
        **front_matter(d.design),
        **plant_context(d),
        **poles_context(d),
        **gains_context(d),
        **verification_context(d),
        "requirements": _requirements_context(requirements),
        **shipped_context(d, controller),
        "optimal": optimal_context(d, controller),
        "notes": list(d.notes),
        "references": references(d),
        "simulation": study,
        "claims": claims,
    }


def memo_robustness_section(d: Derivation) -> tuple[dict | None, dict[str, bytes]]:
    """The robustness section: mismatch study, Routh-Hurwitz, sensitivities, margins.

    The study itself lives in :mod:`symbolic.analysis.robust`; here its plain data is
    marked up (formulas our own code typeset become trusted, in one place).
    """
    from .robust_memo import memo_robustness

    ctx, figures = memo_robustness(d)
    prefix = d.design.slug + "-"
    for cap in ctx["figures"]:
        cap["stem"] = own_math(
            cap["stem"][len(prefix) :] if cap["stem"].startswith(prefix) else cap["stem"]
        )
    for cond in ctx["routh_hurwitz_conditions"]:
        cond["expression"] = own_math(cond.pop("expression_latex"))
        cond["name_latex"] = own_math(cond["name_latex"])
        cond["lines"] = [own_math(x) for x in cond.pop("lines_latex")]
    conditions = ctx["routh_hurwitz_conditions"]
    # a condition that fits on one line stays in the body, a longer one goes to the appendix
    ctx["routh_body"] = [line for c in conditions if len(c["lines"]) == 1 for line in c["lines"]]
    ctx["routh_appendix"] = [line for c in conditions if len(c["lines"]) > 1 for line in c["lines"]]
    ctx["routh_in_appendix"] = [c["name_latex"] for c in conditions if len(c["lines"]) > 1]
    ctx["routh_polynomial"] = own_math(ctx.pop("routh_polynomial_latex"))
    pole = complex(*ctx["least_stable_parts"])  # the member of its pair above the real axis
    ctx["least_stable_math"] = own_math(pole_latex(pole, 4))
    ctx["least_stable_pair"] = "j" in format_pole(pole, 4)
    parameters = ctx["sensitivity_headers"][1:]
    ctx["sensitivity_heads"] = [
        own_math("Gain"),
        *(own_math(f"${symbol_latex(p)}$") for p in parameters),
    ]
    ctx["sensitivity_table"] = [
        {
            "label": own_math(f"${label}$"),  # the gain's label (symbolic.model.labels)
            "values": [ctx["sensitivities"][row[0]][p] for p in parameters],
        }
        for row, label in zip(
            ctx["sensitivity_rows"], ctx.pop("sensitivity_gains_latex"), strict=True
        )
    ]
    for row, table_row in zip(ctx["sensitivity_rows"], ctx["sensitivity_table"], strict=True):
        row[0] = table_row["label"]
    ctx["sensitivity_colspec"] = own_math(
        "@{}l" + "r" * (len(ctx["sensitivity_headers"]) - 1) + "@{}"
    )
    return ctx, figures


def build_memo(
    d: Derivation,
    study_context: dict | None = None,
    figures: dict[str, bytes] | None = None,
    claims_context: dict | None = None,
    robustness_context: dict | None = None,
    extended_context: dict | None = None,
    requirements=None,
    controller=None,
    comparison=None,
    loop_shapes_context: dict | None = None,
    nonlinear_context: dict | None = None,
) -> MemoDocument:
    """Render the memo source of every format from a finished derivation (with a
    :class:`~symbolic.analysis.revision_diff.RevisionComparison`, the section "Changes since
    revision X")."""
    from .memo_changes import changes_context

    ctx = build_context(d, study_context, claims_context, requirements, controller)
    ctx["changes"] = changes_context(comparison)
    ctx["robustness"] = robustness_context
    from .certificate_memo import memo_certificate

    ctx["certificate"] = memo_certificate(d, controller)
    ctx["loop_shapes"] = loop_shapes_context
    from .nonlinear_memo import model_context

    ctx["model"] = model_context(d)
    ctx["nonlinear"] = nonlinear_context
    ctx.update(extended_sections(d) if extended_context is None else extended_context)
    name = d.design.slug
    # file names are our own slug (letters, digits, '-'), safe to trust in every format
    ctx["figure_prefix"] = own_math(f"figures/{name}-")
    ctx["design_name"] = own_math(name)
    ctx["figures"] = sorted({Path(f).stem[len(name) + 1 :] for f in (figures or {})})
    typeset_prose(ctx, code_words(d.design))  # formulas as math, names as code
    sources = {fmt.name: render_template(fmt.name, fmt.template, fmt.mark(ctx)) for fmt in FORMATS}
    return MemoDocument(name=name, sources=sources, figures=dict(figures or {}))


def assemble_memo(d: Derivation, comparison=None) -> MemoDocument:
    """Simulate, check the claims, study robustness and render: everything but the PDF and
    the files.  ``d`` comes from :func:`symbolic.derive`."""
    from ..analysis.study import simulation_study
    from ..analysis.verdict import requirement_table
    from .figure_server import deferred_figures
    from .loop_shape_memo import memo_loop_shapes
    from .study_memo import memo_simulation

    design = d.design
    with deferred_figures() as batch:  # every figure is drawn by one set of workers
        study = simulation_study(d)
        study_ctx, figures = memo_simulation(d, study)
        claims_ctx = claims = None
        if design.claims is not None:
            from ..analysis.claims import check_claims
            from .claims_pages import memo_claims

            claims_ctx = memo_claims(d, design.claims)
            claims = check_claims(d, design.claims)
        nonlinear, nonlinear_ctx, nonlinear_figures = _nonlinear(d, study)
        table = requirement_table(d, study, claims=claims, nonlinear=nonlinear)
        robustness_ctx, robustness_figures = memo_robustness_section(d)
        extended_ctx, extended_figures = memo_extended_sections(d)
        shapes_ctx, shapes_figures = memo_loop_shapes(d, study.controller, study)
        names = {
            **figures,
            **robustness_figures,
            **extended_figures,
            **shapes_figures,
            **nonlinear_figures,
        }
        batch.start()  # the figures are drawn while the templates render; contents come later
        doc = build_memo(
            d,
            study_ctx,
            names,
            claims_ctx,
            robustness_ctx,
            extended_ctx,
            table,
            study.controller,
            comparison,
            shapes_ctx,
            nonlinear_ctx,
        )
        files = batch.result()
    if set(files) != set(names):
        raise RuntimeError(f"figure files {sorted(set(files) ^ set(names))} were not expected")
    return dataclasses.replace(doc, figures=files, requirements=table)


def _nonlinear(d: Derivation, study):
    """The nonlinear-plant study, its memo context and figures (all None/{} without a model)."""
    if d.design.model is None:
        return None, None, {}
    from ..analysis.nonlinear_study import nonlinear_study
    from .nonlinear_memo import memo_nonlinear

    result = nonlinear_study(d, study.controller, study.horizon)
    ctx, figures = memo_nonlinear(d, result)
    return result, ctx, figures


def _compile(doc: MemoDocument, out: Path) -> tuple[bytes, float]:
    """The PDF of the LaTeX source and the seconds it took; on failure the TeX log is kept."""
    from .pdf import compile_pdf

    t1 = time.perf_counter()
    assets = {f"figures/{k}": v for k, v in doc.figures.items() if k.endswith(".pdf")}
    try:
        data = compile_pdf(doc.tex, assets, log_path=None)
    except RenderError as exc:
        log = out / f"{doc.name}.log"
        try:
            out.mkdir(parents=True, exist_ok=True)
            compile_pdf(doc.tex, assets, log_path=log)
        except RenderError:
            pass
        raise RenderError(f"PDF compile failed: {exc} (TeX log kept in {log})") from exc
    return data, time.perf_counter() - t1


def write_memo(d: Derivation, out_dir: str | Path, pdf: bool = True, comparison=None) -> MemoResult:
    """Simulate, render, compile and publish the memo of a derivation.

    The memo is written whether or not every row of the requirements table passes (it
    lists the open items); :attr:`MemoResult.passed` tells which.  Without a TeX engine
    the PDF is skipped with a warning (:data:`PDF_SKIPPED`).

    Raises
    ------
    RenderError
        The PDF compile failed (the TeX log is kept beside the memo; the previous memo is
        left as it was), or the files cannot be written.
    """
    from ..runtime.publish import publish
    from .pdf import find_tex_engine

    doc = assemble_memo(d, comparison)
    files: dict[str, bytes] = {
        f"{doc.name}{fmt.suffix}": doc.sources[fmt.name].encode("utf-8") for fmt in FORMATS
    }
    for fname, data in doc.figures.items():
        files[f"figures/{fname}"] = data
    out = Path(out_dir)
    seconds, warnings = None, ()
    if pdf and find_tex_engine() is None:
        warnings = (PDF_SKIPPED,)
    elif pdf:
        files[f"{doc.name}.pdf"], seconds = _compile(doc, out)
    out.mkdir(parents=True, exist_ok=True)
    written = publish(files, out)
    return MemoResult(
        output=out,
        files=tuple(written),
        figure_count=len(doc.figures),
        requirements=doc.requirements,
        pdf=f"{doc.name}.pdf" in files,
        pdf_seconds=seconds,
        warnings=warnings,
    )
