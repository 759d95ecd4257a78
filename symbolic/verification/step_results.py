"""The records of a step simulation: the loop model it takes and the results it returns.

:class:`LoopModel` holds the numeric matrices of an observer-based state-feedback loop (checked
once, read-only afterwards); :class:`Response` is one simulated step response and
:class:`StepMetrics` its figures of merit (defined in :mod:`symbolic.verification.metrics`).
NumPy only: these records load no SciPy.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..runtime.errors import DesignFileError

__all__ = ["LoopModel", "Response", "StepMetrics", "frozen_array"]


def frozen_array(value: np.ndarray) -> np.ndarray:
    """A read-only ``float`` copy of ``value``."""
    array = np.array(value, dtype=float, copy=True)
    array.setflags(write=False)
    return array


@dataclass(frozen=True, eq=False)
class LoopModel:
    """The numeric matrices of an observer-based state-feedback loop.

    Parameters
    ----------
    A : array_like, shape (n, n)
        Plant state matrix.
    B : array_like, shape (n, m)
        Plant input matrix.
    C : array_like, shape (p, n)
        Plant output matrix.
    D : array_like, shape (p, m)
        Plant feedthrough matrix.
    K : array_like, shape (m, n)
        State-feedback gain, ``u = -K x_hat + N r``.
    L : array_like, shape (n, p)
        Observer gain (full-order observer driven by all ``p`` outputs).
    reference_gain : array_like, shape (m, 1) or (m,)
        Feed-forward gain ``N``; stored with shape ``(m, 1)``.
    tracked : int, optional
        Row of ``C``/``D`` whose output follows the reference (default 0).

    Raises
    ------
    DesignFileError
        One error listing every problem found: a matrix that is not two-dimensional, has the wrong
        shape, or holds a non-finite or complex entry; a ``tracked`` index out of range.

    Notes
    -----
    The arrays are copied to ``float`` and made read-only, so a model cannot change after it was
    checked.  Dimensions are read from ``A`` (``n``), ``B`` (``m``) and ``C`` (``p``).
    """

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    K: np.ndarray
    L: np.ndarray
    reference_gain: np.ndarray
    tracked: int = 0

    def __post_init__(self) -> None:
        problems: list[str] = []
        arrays: dict[str, np.ndarray] = {}
        for key in ("A", "B", "C", "D", "K", "L", "reference_gain"):
            raw = getattr(self, key)
            try:
                array = np.asarray(raw)
                if np.iscomplexobj(array):
                    raise TypeError("complex entries")
                array = np.array(array, dtype=float, copy=True)
            except (TypeError, ValueError) as exc:
                problems.append(f"{key}: expected a real numeric matrix ({exc})")
                continue
            if key == "reference_gain" and array.ndim == 1:
                array = array.reshape(-1, 1)
            if key == "reference_gain" and array.ndim == 0:
                array = array.reshape(1, 1)
            if array.ndim != 2:
                problems.append(f"{key}: expected a 2-D matrix, got {array.ndim} dimension(s)")
                continue
            if not np.all(np.isfinite(array)):
                problems.append(f"{key}: has non-finite entries (nan or inf)")
            arrays[key] = array
        if "A" in arrays and "B" in arrays and "C" in arrays:
            n = arrays["A"].shape[0]
            m = arrays["B"].shape[1]
            p = arrays["C"].shape[0]
            expected = {
                "A": (n, n),
                "B": (n, m),
                "C": (p, n),
                "D": (p, m),
                "K": (m, n),
                "L": (n, p),
                "reference_gain": (m, 1),
            }
            if n == 0 or m == 0 or p == 0:
                problems.append(
                    f"A, B, C: need at least one state, input and output, got n={n}, m={m}, p={p}"
                )
            for key, shape in expected.items():
                if key in arrays and arrays[key].shape != shape:
                    problems.append(
                        f"{key}: expected shape {shape} (n={n} states, m={m} inputs, "
                        f"p={p} outputs), got {arrays[key].shape}"
                    )
            tracked = self.tracked
            if isinstance(tracked, bool) or not isinstance(tracked, int | np.integer):
                problems.append(f"tracked: expected an integer output index, got {tracked!r}")
            elif not 0 <= int(tracked) < p:
                problems.append(f"tracked: expected an index in 0..{p - 1}, got {tracked}")
        if problems:
            raise DesignFileError(
                "loop model rejected: " + "; ".join(problems),
                key=None,
            )
        for key, array in arrays.items():
            array.setflags(write=False)
            object.__setattr__(self, key, array)
        object.__setattr__(self, "tracked", int(self.tracked))

    @property
    def n_states(self) -> int:
        """Number of plant states ``n``."""
        return int(self.A.shape[0])

    @property
    def n_inputs(self) -> int:
        """Number of inputs ``m``."""
        return int(self.B.shape[1])

    @property
    def n_outputs(self) -> int:
        """Number of outputs ``p``."""
        return int(self.C.shape[0])


@dataclass(frozen=True, eq=False)
class Response:
    """One simulated step response.

    Attributes
    ----------
    name, slug : str
        Readable name and a short identifier (``state_feedback``, ``observer_matched``,
        ``observer_mismatched`` for the three standard cases).
    time : ndarray, shape (N,)
        Sample times, from 0; shorter than requested when the run stopped early.
    output : ndarray, shape (N, p)
        All plant outputs ``y = C x + D u``.
    tracked_output : ndarray, shape (N,)
        The tracked output (column ``tracked`` of ``output``).
    control : ndarray, shape (N, m)
        The applied input ``u`` (after the limit when ``saturated``).
    state : ndarray, shape (N, n)
        The plant state ``x``.
    estimate : ndarray, shape (N, n) or None
        The observer estimate ``x_hat``; None for the true-state case.
    estimation_error_norm : ndarray, shape (N,) or None
        Euclidean norm of ``x - x_hat``; None for the true-state case.
    saturated : bool
        True when the run applied the limit ``|u_i| <= u_max_i`` (nonlinear integration).
    reference : float
        Height of the reference step.
    stable : bool
        True when every closed-loop eigenvalue has a negative real part (``A - B K`` and, with
        the observer, ``A - L C``).
    final_value : float or None
        Exact steady state of the tracked output (from the closed-loop DC gain, not from the
        last sample); None when the loop is not stable or, with a limit, when holding the
        reference needs more than ``u_max``.
    horizon : float
        Requested simulated time.
    method : str
        How the run was computed.
    stopped_early : bool
        True when the run stopped because the state passed
        :data:`~symbolic.verification.linear_stepping.STATE_LIMIT`.
    u_max : ndarray, shape (m,) or None
        The input limit, when one was applied.
    notes : tuple of str
        Plain-English remarks for a reviewer (instability, early stop, unreachable equilibrium).
    """

    name: str
    slug: str
    time: np.ndarray
    output: np.ndarray
    tracked_output: np.ndarray
    control: np.ndarray
    state: np.ndarray
    estimate: np.ndarray | None
    estimation_error_norm: np.ndarray | None
    saturated: bool
    reference: float = 1.0
    stable: bool = True
    final_value: float | None = None
    horizon: float = 0.0
    method: str = ""
    stopped_early: bool = False
    u_max: np.ndarray | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)


@dataclass(frozen=True)
class StepMetrics:
    """Step-response figures of merit of the tracked output.

    Every time is in the time unit of the plant matrices; ``None`` marks a figure that is not
    defined for this response (see :mod:`symbolic.verification.metrics` for the definitions).
    """

    overshoot_percent: float | None
    settling_time_2pct: float | None
    settling_time_1pct: float | None
    rise_time: float | None
    peak_time: float | None
    steady_state_error: float | None
    peak_control: float | None
    estimation_settling_time: float | None
    final_value: float | None
    reference: float
    undershoot_percent: float | None = None
    notes: tuple[str, ...] = ()
