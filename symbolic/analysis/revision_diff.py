"""What changed between two revisions of a design: inputs, poles, gains, margins and verdicts.

:func:`compare_revisions` takes two finished simulation runs (each a derivation from
:func:`symbolic.derive` and the requirements table judged on its shipped controller,
:func:`symbolic.analysis.study.simulation_run`) and returns one frozen
:class:`RevisionComparison`: a list of :class:`Difference` records, one per compared item,
in the sections of :data:`SECTIONS`.  Nothing is derived or simulated again here; the
margins are read from the shipped loop of each run
(:func:`symbolic.analysis.shipped_stability.shipped_margins`).

What counts as unchanged
------------------------
* Text, names, units, exact parameter values and requested settings: equal.
* Expressions (plant entries, closed-form gains): the same function of the parameters
  (:mod:`symbolic.analysis.expression_equality`; never compared as printed text).
* Numbers (gains at the nominal values, poles, margins, achieved values):
  ``|new - old| <= UNCHANGED_RELATIVE * max(|old|, |new|, scale) + UNCHANGED_ABSOLUTE``,
  where ``scale`` is the largest magnitude in the matrix or pole set the number belongs to.
  1e-9 relative sits far above the round-off of a derivation (about 1e-13 relative, the
  cross-check tolerances are 1e-6 and finer) and far below any change an engineer makes to
  a design (a value changed in its fourth significant figure moves the gains by 1e-4 or
  more); the 1e-12 absolute floor keeps round-off residues such as a steady-state error of
  1e-16 from reading as a change (common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..model.numbers import format_number
from .revision_inputs import parameter_differences, plant_differences, request_differences
from .revision_items import (
    UNCHANGED_ABSOLUTE,
    UNCHANGED_RELATIVE,
    Difference,
    gain_differences,
    margin_differences,
    pole_differences,
    requirement_differences,
    text_difference,
)

__all__ = [
    "SECTIONS",
    "UNCHANGED_ABSOLUTE",
    "UNCHANGED_RELATIVE",
    "Difference",
    "Revision",
    "RevisionComparison",
    "compare_revisions",
]

#: The sections of a comparison, in the order they are reported.
SECTIONS = (
    "design",
    "parameters",
    "plant",
    "requests",
    "poles",
    "gains",
    "margins",
    "requirements",
    "verdict",
)


@dataclass(frozen=True)
class Revision:
    """One side of a comparison: which file, and the verdict of its requirements table."""

    path: str
    name: str
    title: str
    revision: str
    author: str
    sha256: str
    controller: str
    passed: bool
    verdict: str
    order: int

    @property
    def label(self) -> str:
        """``revision B`` when the file names its revision, else the file's name."""
        return f"revision {self.revision}" if self.revision else self.name


@dataclass(frozen=True)
class RevisionComparison:
    """What changed from ``old`` to ``new``, item by item.

    Attributes
    ----------
    old, new : Revision
    differences : tuple of Difference
        Every compared item, unchanged ones included, in :data:`SECTIONS` order.
    relative_tolerance, absolute_tolerance : float
        When two numbers count as unchanged (module docstring).
    """

    old: Revision
    new: Revision
    differences: tuple[Difference, ...]
    relative_tolerance: float = UNCHANGED_RELATIVE
    absolute_tolerance: float = UNCHANGED_ABSOLUTE

    @property
    def changes(self) -> tuple[Difference, ...]:
        """The items that changed."""
        return tuple(d for d in self.differences if d.changed)

    @property
    def unchanged(self) -> bool:
        """Nothing changed at all (the same file compared with itself, for one)."""
        return not self.changes

    @property
    def same_order(self) -> bool:
        """Both plants have the same number of states."""
        return self.old.order == self.new.order

    @property
    def passed(self) -> bool:
        """The new revision meets every requirement (``gainsmith compare`` then exits 0)."""
        return self.new.passed

    @property
    def verdict_changed(self) -> bool:
        return self.old.passed != self.new.passed

    def section(self, name: str) -> tuple[Difference, ...]:
        """Every item of one section of :data:`SECTIONS`."""
        if name not in SECTIONS:
            raise KeyError(f"no section {name!r}; the sections are {', '.join(SECTIONS)}")
        return tuple(d for d in self.differences if d.section == name)

    def changed_items(self, name: str) -> tuple[str, ...]:
        """The names of the items of one section that changed."""
        return tuple(d.item for d in self.section(name) if d.changed)

    def _repr_html_(self) -> str:  # Jupyter: the changes as a table
        import html

        rows = "".join(
            "<tr>"
            + "".join(
                f"<td>{html.escape(str(x))}</td>"
                for x in (d.section, d.item, d.old or "—", d.new or "—", d.change)
            )
            + "</tr>"
            for d in self.changes
        )
        head = f"<p><b>{html.escape(self.old.label)} → {html.escape(self.new.label)}</b>: "
        head += f"{len(self.changes)} items changed; {html.escape(self.new.verdict)}</p>"
        return head + f"<table><tbody>{rows}</tbody></table>"


def _revision(run) -> Revision:
    design = run.derivation.design
    return Revision(
        path=str(design.path),
        name=design.name,
        title=design.title,
        revision=design.revision,
        author=design.author,
        sha256=design.sha256,
        controller=run.requirements.controller,
        passed=run.requirements.passed,
        verdict=run.requirements.verdict,
        order=design.plant.order,
    )


def _design_differences(old: Revision, new: Revision, od, nd) -> list[Difference]:
    out = [
        text_difference("design", what, getattr(old, field), getattr(new, field))
        for what, field in (
            ("title", "title"),
            ("revision", "revision"),
            ("author", "author"),
            ("file", "name"),
            ("SHA-256", "sha256"),
            ("shipped controller", "controller"),
        )
    ]
    out.append(
        text_difference(
            "design", "parameter overrides", ", ".join(od.overrides), ", ".join(nd.overrides)
        )
    )
    return out


def _verdict_difference(old: Revision, new: Revision) -> Difference:
    if old.passed != new.passed:
        change = "now passes" if new.passed else "now fails"
    else:
        change = "changed" if old.verdict != new.verdict else "unchanged"
    return Difference("verdict", "requirements", old.verdict, new.verdict, change)


def compare_revisions(old_run, new_run) -> RevisionComparison:
    """Compare two revisions of a design, item by item.

    Parameters
    ----------
    old_run, new_run : SimulationRun
        From :func:`symbolic.analysis.study.simulation_run` of each revision's derivation
        (:func:`symbolic.derive`).

    Returns
    -------
    RevisionComparison
        Every item of every section of :data:`SECTIONS`, and the verdict of each side.

    Notes
    -----
    Plants of different orders are compared as far as they can be: their parameters,
    requests, margins and requirements item by item; their matrices, poles and gains by
    shape and value only (the items say so).
    """
    od, nd = old_run.derivation, new_run.derivation
    old, new = _revision(old_run), _revision(new_run)
    items: list[Difference] = []
    items += _design_differences(old, new, od.design, nd.design)
    items += parameter_differences(od.design, nd.design)
    items += plant_differences(od.design.plant, nd.design.plant)
    items += request_differences(od.design, nd.design)
    items += pole_differences(od, nd)
    items += gain_differences(od, nd)
    items += margin_differences(old_run.study.controller, new_run.study.controller)
    items += requirement_differences(old_run.requirements, new_run.requirements)
    items.append(_verdict_difference(old, new))
    order = {name: i for i, name in enumerate(SECTIONS)}
    items.sort(key=lambda d: order[d.section])  # stable: the order within a section is kept
    return RevisionComparison(old, new, tuple(items))


def relative_text(relative: float | None) -> str:
    """A relative change as a signed percentage (``+12.5 %``), '' when there is none."""
    if relative is None:
        return ""
    return f"{'+' if relative >= 0 else ''}{format_number(100 * relative, 4)} %"
