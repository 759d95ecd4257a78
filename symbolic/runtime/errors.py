"""The exception and warning tree of gainsmith.

Every error the tool raises on purpose derives from :class:`GainsmithError`;
each subclass also inherits the built-in exception that matches its meaning,
so callers may catch either.  The command line turns a ``GainsmithError``
into a one-line message and exit code 2; anything else is a bug.
"""

from __future__ import annotations

__all__ = [
    "GainsmithError",
    "DesignFileError",
    "ExpressionError",
    "SpecificationError",
    "StructureError",
    "BudgetExceeded",
    "RenderError",
    "GainsmithWarning",
]


class GainsmithError(Exception):
    """Base class of every error gainsmith raises on purpose."""


class ExpressionError(GainsmithError, ValueError):
    """An expression string is not in the accepted grammar.

    Raised by the expression parser without knowing where the text came
    from; the design-file loader re-raises it as :class:`DesignFileError`
    with the file and key attached.
    """


class DesignFileError(GainsmithError, ValueError):
    """A design file cannot be used as written.

    Parameters
    ----------
    problem : str
        What is wrong, in one sentence.
    path : str, optional
        The design file.
    key : str, optional
        The dotted key inside the file, e.g. ``plant.A[1][0]``.
    """

    def __init__(self, problem: str, path: str | None = None, key: str | None = None):
        self.problem = problem
        self.path = path
        self.key = key
        super().__init__(self._compose())

    def _compose(self) -> str:
        where = ": ".join(part for part in (self.path, self.key) if part)
        return f"{where}: {self.problem}" if where else self.problem


class SpecificationError(DesignFileError):
    """Time-domain specifications that cannot be met or contradict each other."""


class StructureError(DesignFileError):
    """The plant is uncontrollable or unobservable at the evaluated values,
    or a requested quantity does not exist (e.g. no reference gain)."""


class BudgetExceeded(GainsmithError, TimeoutError):
    """A symbolic step ran past its time or memory budget."""


class RenderError(GainsmithError, RuntimeError):
    """A memo or export could not be rendered or compiled."""


class GainsmithWarning(UserWarning):
    """A soft failure: the result is usable but a reviewer should know."""
