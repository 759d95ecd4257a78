"""``gainsmith export``: the gain formulas, or the digital controller, as checked code.

:func:`export_code` turns a finished :class:`~symbolic.model.results.Derivation` into
files: the closed-form gains as C99 (:mod:`symbolic.render.c_code`) or as a NumPy
module (:mod:`symbolic.render.python_code`), or the digital controller's difference
equations.  Before anything is written the generated code is checked against
``derive``'s values (:func:`self_check`, or the sampled-data simulation for the digital
controller); :func:`write_export` publishes the files only when every check passed:
code that closes a loop around a machine is exported only then.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..derivation.numeric import relative_difference
from ..model.design import Design
from ..model.results import Derivation
from ..runtime.errors import DesignFileError, RenderError
from .c_code import c_sources
from .code_printers import c_identifier_prefix
from .gain_evaluator import gain_evaluator
from .gain_formulas import CODE_OK, GainFormulas, ValidityFactor, gain_formulas
from .python_code import python_source

__all__ = [
    "DIGITAL_SELF_CHECK_TOLERANCE",
    "SELF_CHECK_TOLERANCE",
    "ExportCheck",
    "ExportResult",
    "check_export_options",
    "digital_controller_files",
    "export_code",
    "self_check",
    "write_export",
]

#: Relative agreement of the exported formulas with ``derive`` at the nominal values.
SELF_CHECK_TOLERANCE = 1e-9

#: The generated digital controller must reproduce the Python simulation of the sampled loop
#: to this relative difference (same arithmetic, same order: in practice 0).
DIGITAL_SELF_CHECK_TOLERANCE = 1e-12


@dataclass(frozen=True)
class ExportCheck:
    """The generated code against the reference it must reproduce."""

    #: what was compared, e.g. "exported formulas at the nominal values vs derive (relative)"
    what: str
    difference: float
    tolerance: float

    @property
    def passed(self) -> bool:
        return self.difference <= self.tolerance


@dataclass(frozen=True)
class ExportResult:
    """The generated files (not yet written), their check, and what they do not cover."""

    #: file name -> content (ASCII)
    files: Mapping[str, bytes]
    check: ExportCheck
    #: whether every check of the derivation passed
    derivation_passed: bool
    #: where the gains do not exist: the validity factors (empty for the digital controller)
    factors: tuple[ValidityFactor, ...] = ()
    #: parts the design asks for that have no closed form, one line each
    not_exported: tuple[str, ...] = ()

    @property
    def passed(self) -> bool:
        """The code reproduces its reference and the derivation passed: it may be written."""
        return self.check.passed and self.derivation_passed


def check_export_options(design: Design, *, lang: str, digital: bool, form: str | None) -> None:
    """Refuse an unknown language, ``--form`` without ``--digital``, and ``--digital``
    without a sample time (before anything is derived).

    Raises
    ------
    DesignFileError
        With the option (or the design-file key) that is wrong.
    """
    if lang not in ("c", "python"):
        raise DesignFileError(
            f"unknown language {lang!r}: expected 'c' or 'python'", design.path, "--lang"
        )
    if form is not None and not digital:
        raise DesignFileError(
            "--form chooses the digital controller's observer: use it with --digital",
            design.path,
            "--form",
        )
    if digital and design.discrete is None:
        raise DesignFileError(
            "missing: --digital needs a [discrete] table with sample_time (seconds)",
            design.path,
            "discrete.sample_time",
        )


def _extra_reference(d: Derivation) -> dict[str, np.ndarray]:
    """derive's checked values of the extra parts."""
    out: dict[str, np.ndarray] = {}
    if getattr(d, "integral", None) is not None:
        out["K_integral"] = d.integral.K_augmented
    ro = getattr(d, "reduced_observer", None)
    if ro is not None:
        out.update(
            Ke=ro.Ke,
            A_hat=ro.observer_matrix,
            B_hat=ro.output_input,
            F_hat=ro.control_input,
            estimate_from_state=ro.estimate_from_state,
            estimate_from_output=ro.estimate_from_output,
        )
    return out


def self_check(d: Derivation, formulas: GainFormulas) -> float:
    """Largest relative difference between the cse'd formulas and derive's checked values."""
    evaluate = gain_evaluator(formulas, formulas.parts)
    got = evaluate({p.name: float(p.value) for p in d.design.parameters})
    assert d.reference is not None
    if got.code is not None and int(got.code) != CODE_OK:
        return float("inf")
    diffs = [
        relative_difference(got.K, d.K.value),
        relative_difference(got.L, d.L.value),
        relative_difference(np.atleast_1d(got.reference_gain), d.reference.value.ravel()),
    ]
    reference = _extra_reference(d)
    for name, value in (got.extra or {}).items():
        diffs.append(relative_difference(value, reference[name]))
    return max(diffs)


def digital_controller_files(
    d: Derivation, *, lang: str, form: str | None = None
) -> tuple[dict[str, bytes], float, str]:
    """The digital controller of a derivation as C99 or Python, and its self-check.

    Returns ``(files, difference, form)``: the generated Python counterpart is run on the
    measurements of :func:`symbolic.verification.sampled_data.sampled_data_study` (with the design's input
    limit) and ``difference`` is its largest relative difference from the study's inputs.

    Raises
    ------
    DesignFileError
        The design has no ``[discrete] sample_time``, or the form is not available.
    """
    from ..verification.sampled_data import sampled_data_study
    from .digital_code import c_controller_files, python_controller_source

    design = d.design
    dc = getattr(d, "discrete", None)
    if dc is None:
        raise DesignFileError(
            "missing: the digital controller needs a [discrete] table with sample_time (seconds)",
            design.path,
            "discrete.sample_time",
        )
    u_max = design.simulation.u_max
    name = f"{c_identifier_prefix(design)}_controller"
    title = design.title or design.slug
    try:
        py = python_controller_source(dc, name=name, form=form, u_max=u_max, title=title)
        form = form or dc.default_form
        files = (
            c_controller_files(dc, name=name, form=form, u_max=u_max, title=title)
            if lang == "c"
            else py
        )
    except RenderError as exc:
        raise DesignFileError(str(exc), design.path, "--form") from exc
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        study = sampled_data_study(d, dc, form=form, u_max=u_max)
    # The self-check runs the generated module built without the design's title: that code
    # is ours alone (numbers, and names made of [A-Za-z0-9_]), no text from the design file
    # reaches exec, and it differs from the written file only in its docstring.
    checked = python_controller_source(dc, name=name, form=form, u_max=u_max, title="")
    namespace: dict = {}
    exec(compile(next(iter(checked.values())), "<generated controller>", "exec"), namespace)  # noqa: S102
    state = namespace["reset"]()
    start = np.asarray(_matched(dc, form, design), dtype=float)
    state[:] = start.tolist()
    r = float(design.simulation.reference)
    ys = study.sampled_output
    got = np.array([namespace["step"](state, y[0] if y.size == 1 else list(y), r) for y in ys])
    diff = relative_difference(got, study.controls[:, 0])
    return files, diff, form


def _matched(dc, form, design) -> np.ndarray:
    from ..verification.sampled_data import matched_state

    n = dc.Phi.shape[0]
    x0 = design.simulation.initial_state or [0.0] * n
    return matched_state(dc, form, x0)


def export_code(
    d: Derivation, *, lang: str, digital: bool = False, form: str | None = None
) -> ExportResult:
    """The gain formulas, or the digital controller, as C99 or Python, checked; nothing written.

    Parameters
    ----------
    d : Derivation
        From :func:`symbolic.derive`.
    lang : {"c", "python"}
    digital : bool
        The digital controller (``[discrete] sample_time``): difference equations with
        fixed coefficients, ``<slug>_controller.{h,c}`` or ``<slug>_controller.py``.
        Otherwise the closed-form gains in the parameters (``<slug>_gains.*``).
    form : {"current", "predictor", "reduced"}, optional
        The digital controller's observer (default: "reduced" with ``[observer] kind =
        "reduced"``, else "current").  Only with ``digital``.

    Returns
    -------
    ExportResult
        Passed when the exported code reproduces ``derive``'s values (gains: relative
        difference <= :data:`SELF_CHECK_TOLERANCE` at the nominal parameters; digital
        controller: the generated step function against the sampled-data simulation,
        <= :data:`DIGITAL_SELF_CHECK_TOLERANCE`) and every check of the derivation passed.

    Raises
    ------
    DesignFileError
        No closed form to export (several inputs or outputs, symbolic budget exhausted, no
        reference gain), no ``[discrete] sample_time`` with ``digital``, an unknown language
        or form.
    """
    check_export_options(d.design, lang=lang, digital=digital, form=form)
    if digital:
        files, diff, form = digital_controller_files(d, lang=lang, form=form)
        what = f"generated {form} controller vs the sampled-data simulation (relative)"
        check = ExportCheck(what, diff, DIGITAL_SELF_CHECK_TOLERANCE)
        return ExportResult(files=files, check=check, derivation_passed=d.passed)
    formulas = gain_formulas(d)
    files = c_sources(formulas) if lang == "c" else python_source(formulas)
    what = "exported formulas at the nominal values vs derive (relative)"
    check = ExportCheck(what, self_check(d, formulas), SELF_CHECK_TOLERANCE)
    return ExportResult(
        files=files,
        check=check,
        derivation_passed=d.passed,
        factors=formulas.factors,
        not_exported=formulas.omitted,
    )


def write_export(result: ExportResult, out_dir: str | Path) -> list[Path]:
    """Publish the files of a passed export atomically (the folder is created if missing).

    Raises
    ------
    RenderError
        The export did not pass its checks (nothing is written), or the files cannot be
        written.
    """
    from ..runtime.publish import publish

    if not result.passed:
        raise RenderError(
            "nothing written: code for a loop around a machine is exported only when every"
            " check passes"
        )
    return publish(dict(result.files), Path(out_dir))
