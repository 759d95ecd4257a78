"""The time-domain specifications of the closed loop, as the design file states them.

Validated on construction; :mod:`symbolic.derivation.specs` turns them into poles.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Real

from ..runtime.errors import SpecificationError

__all__ = ["SETTLING_BANDS", "SPECIFICATION_KEYS", "Specifications"]

#: The keys of the ``[controller]`` table that state a specification.
SPECIFICATION_KEYS = (
    "overshoot_percent",
    "settling_time",
    "settling_band",
    "rise_time",
    "peak_time",
)

#: The settling bands (fractions of the final value) the settling-time rule knows.
SETTLING_BANDS = (0.02, 0.01)


@dataclass(frozen=True)
class Specifications:
    """Time-domain step-response specifications of the closed loop.

    Every field is optional but at least one of ``overshoot_percent``,
    ``settling_time``, ``rise_time`` and ``peak_time`` must be given.

    Parameters
    ----------
    overshoot_percent : float, optional
        Largest allowed percent overshoot, ``0 < OS < 100``.
    settling_time : float, optional
        Largest allowed settling time in seconds.
    settling_band : float, default 0.02
        Settling band as a fraction of the final value: 0.02 or 0.01.
    rise_time : float, optional
        Largest allowed 10-90 % rise time in seconds.
    peak_time : float, optional
        Latest allowed time of the first peak in seconds ("peak no later
        than").

    Raises
    ------
    SpecificationError
        With ``key`` set to the design-file key at fault (or ``"controller"``
        when several keys are at fault or none is given); the message lists
        every problem found.
    """

    overshoot_percent: float | None = None
    settling_time: float | None = None
    settling_band: float = 0.02
    rise_time: float | None = None
    peak_time: float | None = None

    def __post_init__(self) -> None:
        problems: list[tuple[str, str]] = []
        for key in SPECIFICATION_KEYS:
            value = getattr(self, key)
            if value is None and key != "settling_band":
                continue
            if isinstance(value, bool) or not isinstance(value, Real):
                problems.append((key, f"expected a number, got {value!r}"))
                continue
            value = float(value)
            object.__setattr__(self, key, value)
            if not math.isfinite(value):
                problems.append((key, f"expected a finite number, got {value!r}"))
            elif key == "overshoot_percent":
                if not 0.0 < value < 100.0:
                    problems.append(
                        (key, f"expected a percentage with 0 < OS < 100, got {value!r}")
                    )
            elif key == "settling_band":
                if value not in SETTLING_BANDS:
                    hint = " (a fraction, not a percentage)" if value in (1.0, 2.0) else ""
                    problems.append((key, f"expected 0.02 or 0.01{hint}, got {value!r}"))
            elif value <= 0.0:
                problems.append((key, f"expected a positive time in seconds, got {value!r}"))
        if all(getattr(self, k) is None for k in SPECIFICATION_KEYS if k != "settling_band"):
            problems.append(
                (
                    "controller",
                    "give at least one of overshoot_percent, settling_time, rise_time, peak_time",
                )
            )
        if len(problems) == 1:
            key, problem = problems[0]
            raise SpecificationError(problem, key=key)
        if problems:
            text = "; ".join(f"{key}: {problem}" for key, problem in problems)
            raise SpecificationError(text, key="controller")
