"""Closed-loop step simulation of an observer-based state-feedback design, and step metrics.

The loop simulated here is the plant

.. math::  \\dot x = A x + B u, \\qquad y = C x + D u,

driven by the control law :math:`u = -K \\hat x + N r` with a full-order (Luenberger) observer

.. math::  \\dot{\\hat x} = A \\hat x + B u + L (y - C \\hat x - D u),

and a step reference :math:`r(t) = r \\cdot 1(t)` applied at :math:`t = 0`.  Without a limit on
``u`` this loop is linear and time-invariant with a constant input, so it is stepped *exactly*
(zero-order-hold stepping, exact at the samples for any step size) with one matrix exponential
per case (Van Loan's augmented matrix).  With a limit ``u_max`` the loop is nonlinear and is
integrated with :func:`scipy.integrate.solve_ivp`.

The module works on NumPy arrays only; it imports nothing from gainsmith but the error tree.
Bad arguments raise :class:`~symbolic.runtime.errors.DesignFileError` (a ``ValueError``) whose ``key``
names the offending argument; an unstable loop or a run stopped because the state grew past
:data:`STATE_LIMIT` gives a :class:`~symbolic.runtime.errors.GainsmithWarning` and a note in the result.

Caution: a simulated step response is a model result.  Before a loop built from these gains
drives a machine that moves, heats or flies, check it against the real plant with reduced limits,
with an independent emergency stop, and with the actuator limits, delays and sensor noise that the
linear model leaves out.

References
----------
.. [1] C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE Transactions
   on Automatic Control 23(3):395-404, 1978. doi:10.1109/TAC.1978.1101743
.. [2] D. G. Luenberger, "An introduction to observers", IEEE Transactions on Automatic Control
   16(6):596-602, 1971. doi:10.1109/TAC.1971.1099826
.. [3] K. Ogata, *Modern Control Engineering*, 5th ed., Prentice Hall, 2010, Sec. 5-3
   (transient-response specifications: rise, peak and settling time, maximum overshoot).
.. [4] N. S. Nise, *Control Systems Engineering*, 7th ed., Wiley, 2015, Sec. 4.6 (10-90 % rise
   time, settling time as the time to stay within a band about the final value).
.. [5] L. R. Petzold, "Automatic selection of methods for solving stiff and nonstiff systems of
   ordinary differential equations", SIAM Journal on Scientific and Statistical Computing
   4(1):136-148, 1983 (LSODA, as wrapped by ``scipy.integrate.solve_ivp``).
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.integrate
import scipy.linalg

from ..runtime.errors import DesignFileError, GainsmithWarning

__all__ = [
    "CASE_NAMES",
    "STATE_LIMIT",
    "LoopModel",
    "Response",
    "StepMetrics",
    "default_horizon",
    "horizon_from_poles",
    "default_mismatch",
    "simulate_step",
    "simulate_cases",
    "step_metrics",
    "step_linear",
    "integrate_saturated",
    "observer_speed_study",
]

#: A run stops at the first sample where the largest absolute state entry (the infinity norm of
#: the plant state and the estimate stacked) exceeds this value.
STATE_LIMIT = 1e12

#: Largest number of samples accepted (memory guard: 2n x samples floats per array).
MAX_SAMPLES = 2_000_000

#: Samples advanced per matrix-vector product in the exact stepping.
_BLOCK = 32

#: Tolerances of the saturated (nonlinear) integration; the absolute one is multiplied by
#: ``max(1, |r|, max |z(0)|)``.
SATURATED_RTOL = 1e-9
SATURATED_ATOL = 1e-12

#: Right-hand-side evaluations allowed for one saturated run (2-5 s here), and the
#: number of pieces the run is split into so that a spent budget keeps what was done.
SATURATED_BUDGET = 50_000
SATURATED_SEGMENTS = 16

CASE_NAMES = {
    "state_feedback": "state feedback (true state)",
    "observer_matched": "observer, matched estimate",
    "observer_mismatched": "observer, mismatched estimate",
}

#: Default size of the initial estimation error of the mismatched case, as a fraction of the
#: reference (or of 1 when the reference is zero), in every state.  Common practice, no source.
MISMATCH_FRACTION = 0.1

_SLUG = re.compile(r"^[a-z][a-z0-9_]{0,63}$")


# --------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------


def _frozen_array(value: np.ndarray) -> np.ndarray:
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
        True when the run stopped because the state passed :data:`STATE_LIMIT`.
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
    defined for this response (see :func:`step_metrics` for the definitions).
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


# --------------------------------------------------------------------------------------------
# The closed loop
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _Loop:
    """Closed-loop matrices in the stacked state ``z`` (``x`` or ``[x; x_hat]``).

    Linear loop: ``z' = F z + G r``, ``y = Cz z + Dz r``, ``u = Ku z + N r``.
    Open form for the limit: ``z' = F0 z + Bz u``, with ``u = clip(Ku z + N r)``.
    """

    F: np.ndarray
    G: np.ndarray
    F0: np.ndarray
    Bz: np.ndarray
    Cz: np.ndarray
    Dz: np.ndarray
    Ku: np.ndarray
    N: np.ndarray
    eigenvalues: np.ndarray
    n: int
    observer: bool


def _closed_loop(model: LoopModel, use_observer: bool) -> _Loop:
    A, B, C, D, K, L, N = (
        model.A,
        model.B,
        model.C,
        model.D,
        model.K,
        model.L,
        model.reference_gain,
    )
    n, m = model.n_states, model.n_inputs
    BK = B @ K
    controller_poles = np.linalg.eigvals(A - BK)
    if use_observer:
        LC = L @ C
        # x' = A x - B K x_hat + B N r
        # x_hat' = A x_hat + B u + L (y - C x_hat - D u) = L C x + (A - B K - L C) x_hat + B N r
        # (Luenberger [2]; the D u terms cancel because the observer subtracts its own D u).
        F = np.block([[A, -BK], [LC, A - BK - LC]])
        G = np.vstack([B @ N, B @ N])
        F0 = np.block([[A, np.zeros((n, n))], [LC, A - LC]])
        Bz = np.vstack([B, B])
        Cz = np.hstack([C, -D @ K])
        Ku = np.hstack([np.zeros((m, n)), -K])
        # In (x, e = x - x_hat) coordinates the loop is block triangular with blocks A - B K and
        # A - L C (the separation principle [2]); their eigenvalues are computed apart, which is
        # more accurate than the eigenvalues of the 2n matrix F.
        eigenvalues = np.concatenate([controller_poles, np.linalg.eigvals(A - LC)])
    else:
        F = A - BK
        G = B @ N
        F0 = A
        Bz = B
        Cz = C - D @ K
        Ku = -K
        eigenvalues = controller_poles
    return _Loop(
        F=F,
        G=G,
        F0=F0,
        Bz=Bz,
        Cz=Cz,
        Dz=D @ N,
        Ku=Ku,
        N=N,
        eigenvalues=eigenvalues,
        n=n,
        observer=use_observer,
    )


def _stability_tolerance(eigenvalues: np.ndarray) -> float:
    return 1e-10 * max(1.0, float(np.max(np.abs(eigenvalues))))


def _is_stable(eigenvalues: np.ndarray) -> bool:
    return bool(np.max(eigenvalues.real) < -_stability_tolerance(eigenvalues))


def _horizon_from_eigenvalues(eigenvalues: np.ndarray) -> float:
    """The default-horizon rule of :func:`default_horizon`, on given eigenvalues."""
    magnitude = np.abs(eigenvalues)
    tol = _stability_tolerance(eigenvalues)
    largest = float(np.max(magnitude))
    growth = float(np.max(eigenvalues.real))
    if growth < -tol:
        sigma = -growth
        horizon = 10.0 / sigma
        dominant = eigenvalues[eigenvalues.real >= growth - 0.01 * sigma]
        omega_d = float(np.max(np.abs(dominant.imag)))
        if omega_d > tol:
            peak_time = math.pi / omega_d
            horizon = max(horizon, min(1.5 * peak_time, 40.0 / sigma))
        return horizon
    if growth > tol:
        horizon = 10.0 / growth
    else:
        nonzero = magnitude[magnitude > tol]
        horizon = 20.0 / float(np.min(nonzero)) if nonzero.size else 10.0
    if largest > tol:
        horizon = min(horizon, 1000.0 / largest)
    return horizon


def horizon_from_poles(poles: np.ndarray, sample_time: float | None = None) -> float:
    """The default horizon (rule of :func:`default_horizon`) for closed-loop poles.

    z-plane poles of a digital loop (``sample_time`` given) are mapped to ``s = ln(z)/T``
    (a pole at z = 0 counts as very fast).
    """
    poles = np.asarray(poles, dtype=complex).ravel()
    if sample_time is not None:
        T = float(sample_time)
        tiny = np.abs(poles) < 1e-300
        safe = np.where(tiny, 1e-300, poles)
        poles = np.where(tiny, -700.0 / T, np.log(safe) / T)
    return _horizon_from_eigenvalues(poles)


def default_horizon(model: LoopModel, *, use_observer: bool = True) -> float:
    """Default length of a step simulation.

    Parameters
    ----------
    model : LoopModel
        The loop.
    use_observer : bool, optional
        Use the eigenvalues of the whole ``2n`` loop (``A - B K`` and ``A - L C``, default) or
        only those of ``A - B K``.

    Returns
    -------
    float
        Simulated time, in the time unit of the plant matrices.

    Notes
    -----
    Rule (common practice, no source), with ``lambda_i`` the closed-loop eigenvalues:

    * stable loop, slowest decay rate ``sigma = min(-Re lambda_i)``: ten slowest time constants,
      ``10 / sigma`` (the slowest mode has then decayed to ``exp(-10)``, 4.5e-5 of its start);
      when the slowest poles are complex with damped frequency ``omega_d``, at least
      1.5 peak times ``1.5 pi / omega_d``, but never more than ``40 / sigma``;
    * unstable loop, largest growth rate ``g = max Re lambda_i > 0``: ``10 / g`` (the unstable
      mode has grown by ``exp(10)``, about 2.2e4, enough to show it);
    * marginal loop (largest real part zero): ``20 / min |lambda_i|`` over the non-zero
      eigenvalues (about three periods of the slowest oscillation), 10 when all are zero;
    * unstable and marginal horizons are capped at ``1000 / max |lambda_i|``.

    A real part counts as zero within ``1e-10 max(1, max |lambda_i|)``.

    Examples
    --------
    >>> import numpy as np
    >>> loop = LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                  K=[[2, 3.5]], L=[[19.5], [88.25]], reference_gain=[[4]])
    >>> round(default_horizon(loop), 6)   # slowest poles -2 +/- 0j (double): 10 / 2
    5.0
    """
    return _horizon_from_eigenvalues(_closed_loop(model, use_observer).eigenvalues)


def _steady_state(model: LoopModel, reference: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Equilibrium ``x_ss``, ``y_ss`` and ``u_ss`` of the (stable) linear loop.

    ``x_ss = -(A - B K)^{-1} B N r``; the estimate settles at ``x_hat_ss = x_ss`` because the
    estimation error obeys ``e' = (A - L C) e`` [2].
    """
    A, B, C, D, K, N = model.A, model.B, model.C, model.D, model.K, model.reference_gain
    x_ss = np.linalg.solve(A - B @ K, -(B @ N)[:, 0] * reference)
    u_ss = -K @ x_ss + N[:, 0] * reference
    y_ss = C @ x_ss + D @ u_ss
    return x_ss, y_ss, u_ss


# --------------------------------------------------------------------------------------------
# Simulation
# --------------------------------------------------------------------------------------------


def _check_vector(value: object, n: int, key: str, problems: list[str]) -> np.ndarray | None:
    if value is None:
        return None
    try:
        raw = np.asarray(value)
        if np.iscomplexobj(raw):
            raise TypeError("complex entries")
        array = np.array(raw, dtype=float)
    except (TypeError, ValueError) as exc:
        problems.append(f"{key}: expected {n} real numbers ({exc})")
        return None
    if array.ndim == 2 and 1 in array.shape:
        array = array.reshape(-1)
    if array.shape != (n,):
        problems.append(f"{key}: expected a vector of length {n}, got shape {raw.shape}")
        return None
    if not np.all(np.isfinite(array)):
        problems.append(f"{key}: has non-finite entries")
        return None
    return array


def _check_positive(value: object, key: str, problems: list[str]) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        problems.append(f"{key}: expected a positive number, got {value!r}")
        return None
    number = float(value)
    if not math.isfinite(number) or number <= 0.0:
        problems.append(f"{key}: expected a positive finite number, got {value!r}")
        return None
    return number


def _validate_run(
    model: LoopModel,
    *,
    reference: object,
    x0: object,
    xhat0: object,
    horizon: object,
    samples: object,
    u_max: object,
    use_observer: bool,
    name: object,
    slug: object,
) -> tuple[float, np.ndarray, np.ndarray | None, float | None, int, np.ndarray | None]:
    problems: list[str] = []
    if not isinstance(model, LoopModel):
        raise DesignFileError(f"expected a LoopModel, got {type(model).__name__}", key="model")
    n, m = model.n_states, model.n_inputs
    ref: float = 0.0
    if isinstance(reference, bool) or not isinstance(
        reference, int | float | np.integer | np.floating
    ):
        problems.append(f"reference: expected a real number, got {reference!r}")
    elif not math.isfinite(float(reference)):
        problems.append(f"reference: expected a finite number, got {reference!r}")
    else:
        ref = float(reference)
    x0_array = _check_vector(x0, n, "x0", problems)
    xhat0_array = _check_vector(xhat0, n, "xhat0", problems)
    if xhat0 is not None and not use_observer:
        problems.append("xhat0: an initial estimate needs use_observer=True")
    horizon_value = _check_positive(horizon, "horizon", problems)
    if isinstance(samples, bool) or not isinstance(samples, int | np.integer):
        problems.append(f"samples: expected an integer, got {samples!r}")
        sample_count = 0
    elif not 2 <= int(samples) <= MAX_SAMPLES:
        problems.append(f"samples: expected 2..{MAX_SAMPLES}, got {samples}")
        sample_count = 0
    else:
        sample_count = int(samples)
    limit: np.ndarray | None = None
    if u_max is not None:
        try:
            raw = np.asarray(u_max)
            if np.iscomplexobj(raw) or raw.dtype == bool:
                raise TypeError("not a real number")
            limit = np.broadcast_to(np.array(raw, dtype=float), (m,)).copy()
        except (TypeError, ValueError) as exc:
            problems.append(f"u_max: expected one positive number or {m} of them ({exc})")
        else:
            if not np.all(np.isfinite(limit)) or np.any(limit <= 0.0):
                problems.append(f"u_max: expected positive finite limits, got {u_max!r}")
                limit = None
    if name is not None and (not isinstance(name, str) or not name.isprintable() or not name):
        problems.append(f"name: expected a non-empty printable string, got {name!r}")
    if slug is not None and (not isinstance(slug, str) or not _SLUG.match(slug)):
        problems.append(f"slug: expected lower-case letters, digits and underscores, got {slug!r}")
    if problems:
        key = problems[0].split(":", 1)[0] if len(problems) == 1 else None
        raise DesignFileError("simulation rejected: " + "; ".join(problems), key=key)
    x0_final = x0_array if x0_array is not None else np.zeros(n)
    return ref, x0_final, xhat0_array, horizon_value, sample_count, limit


def _zoh_matrices(F: np.ndarray, G: np.ndarray, step: float) -> tuple[np.ndarray, np.ndarray]:
    """``Phi = expm(F h)`` and ``Gamma = int_0^h expm(F tau) dtau G`` from one exponential.

    Van Loan [1]: ``expm([[F, G], [0, 0]] h) = [[Phi, Gamma], [0, I]]``.
    """
    size = F.shape[0]
    augmented = np.zeros((size + 1, size + 1))
    augmented[:size, :size] = F * step
    augmented[:size, size:] = np.reshape(G, (size, 1)) * step
    exponential = scipy.linalg.expm(augmented)
    return exponential[:size, :size], exponential[:size, size]


def _first_over_limit(block: np.ndarray) -> int | None:
    with np.errstate(invalid="ignore"):
        bad = ~(np.abs(block) <= STATE_LIMIT)  # also catches nan and inf
    rows = np.flatnonzero(bad.any(axis=1))
    return int(rows[0]) if rows.size else None


def _step_exact(
    loop: _Loop, reference: float, z0: np.ndarray, time: np.ndarray
) -> tuple[np.ndarray, bool]:
    return step_linear(loop.F, loop.G, reference, z0, time)


def step_linear(
    F: np.ndarray, G: np.ndarray, reference: float, z0: np.ndarray, time: np.ndarray
) -> tuple[np.ndarray, bool]:
    """Exact ZOH stepping of ``z' = F z + G r`` (constant r) on a uniform grid.

    Returns the trajectory (one row per sample, shorter when the state passed
    :data:`STATE_LIMIT`) and whether it stopped early.  ``z_{k+1} = Phi z_k + Gamma r``
    with ``Phi``, ``Gamma`` from one exponential (Van Loan [1]).

    Done ``BLOCK`` samples at a time: with ``P_j = Phi^j`` and ``S_j = sum_{i<j} Phi^i Gamma``,
    ``z_{k+j} = P_j z_k + S_j r`` for ``j = 1..BLOCK`` is one matrix-vector product per block
    (the same recursion, regrouped; the divergence check runs once per block).
    """
    samples = time.size
    step = float(time[1] - time[0])
    phi, gamma = _zoh_matrices(F, G, step)
    size = z0.size
    block = min(_BLOCK, samples - 1)
    powers = np.empty((block, size, size))
    sums = np.empty((block, size))
    powers[0] = phi
    sums[0] = gamma
    with np.errstate(over="ignore", invalid="ignore"):
        for j in range(1, block):
            powers[j] = phi @ powers[j - 1]
            sums[j] = phi @ sums[j - 1] + gamma
        stacked = powers.reshape(block * size, size)
        drive = sums * reference
        trajectory = np.empty((samples, size))
        trajectory[0] = z0
        z = z0
        for start in range(1, samples, block):
            count = min(block, samples - start)
            values = (stacked[: count * size] @ z).reshape(count, size) + drive[:count]
            trajectory[start : start + count] = values
            first = _first_over_limit(values)
            if first is not None:
                return trajectory[: start + first], True
            z = values[-1]
    return trajectory, False


class _OverBudget(Exception):
    """Raised inside the right-hand side when the evaluation budget is spent."""


def _integrate_limited(
    loop: _Loop, reference: float, z0: np.ndarray, time: np.ndarray, limit: np.ndarray
) -> tuple[np.ndarray, bool, str]:
    """Integrate ``z' = F0 z + Bz clip(Ku z + N r, -u_max, u_max)`` with LSODA.

    The run is split into :data:`SATURATED_SEGMENTS` consecutive ``solve_ivp`` calls on the
    grid, each starting from the last state of the previous one, so that a spent evaluation
    budget (:data:`SATURATED_BUDGET`) or a runaway state still leaves the part already done.
    Returns the trajectory, whether it stopped early, and a note ('' when none).
    """
    return integrate_saturated(
        loop.F0, loop.Bz, loop.Ku, loop.N[:, 0] * reference, None, z0, time, limit, reference
    )


def integrate_saturated(
    F0: np.ndarray,
    Bz: np.ndarray,
    Ku: np.ndarray,
    feedforward: np.ndarray,
    drive: np.ndarray | None,
    z0: np.ndarray,
    time: np.ndarray,
    limit: np.ndarray,
    reference: float = 0.0,
) -> tuple[np.ndarray, bool, str]:
    """Integrate ``z' = F0 z + Bz clip(Ku z + feedforward) + drive`` with LSODA.

    The loop with a limited input, in any stacked state (plant and controller states); see
    :func:`simulate_step` for the integrator settings.  ``reference`` only sets the scale of
    the absolute tolerance.  Returns the trajectory, whether it stopped early, and a note.
    """
    constant = np.zeros(z0.size) if drive is None else np.asarray(drive, dtype=float)
    calls = [0]

    def rhs(_t: float, z: np.ndarray) -> np.ndarray:
        calls[0] += 1
        if calls[0] > SATURATED_BUDGET:
            raise _OverBudget
        u = np.clip(Ku @ z + feedforward, -limit, limit)
        return F0 @ z + Bz @ u + constant

    def jacobian(_t: float, z: np.ndarray) -> np.ndarray:
        # Piecewise: an input inside its limits passes Ku on, a clipped one contributes zero.
        free = (np.abs(Ku @ z + feedforward) < limit).astype(float)
        return F0 + (Bz * free) @ Ku

    def runaway(_t: float, z: np.ndarray) -> float:
        return STATE_LIMIT - float(np.max(np.abs(z)))

    runaway.terminal = True  # type: ignore[attr-defined]
    scale = max(1.0, abs(reference), float(np.max(np.abs(z0))))
    edges = np.unique(np.linspace(0, time.size - 1, SATURATED_SEGMENTS + 1).astype(int))
    pieces = [z0[np.newaxis, :]]
    z = z0
    for first, last in zip(edges[:-1], edges[1:], strict=True):
        grid = time[first : last + 1]
        try:
            solution = scipy.integrate.solve_ivp(
                rhs,
                (float(grid[0]), float(grid[-1])),
                z,
                method="LSODA",
                t_eval=grid,
                events=runaway,
                jac=jacobian,
                rtol=SATURATED_RTOL,
                atol=SATURATED_ATOL * scale,
            )
        except _OverBudget:
            note = (
                f"the integrator spent its budget of {SATURATED_BUDGET} evaluations at "
                f"t = {grid[0]:.4g} (a very stiff loop); the run stops there"
            )
            return np.vstack(pieces), True, note
        values = solution.y.T[1:]
        if values.size:
            pieces.append(values)
        if solution.status != 0 or values.shape[0] < grid.size - 1:
            note = "" if solution.status >= 0 else f"the integrator failed: {solution.message}"
            trajectory = np.vstack(pieces)
            over = _first_over_limit(trajectory)
            return (trajectory if over is None else trajectory[:over]), True, note
        z = values[-1]
    trajectory = np.vstack(pieces)
    over = _first_over_limit(trajectory)
    if over is not None:
        return trajectory[:over], True, ""
    return trajectory, False, ""


def simulate_step(
    model: LoopModel,
    *,
    reference: float = 1.0,
    x0: Sequence[float] | np.ndarray | None = None,
    xhat0: Sequence[float] | np.ndarray | None = None,
    horizon: float | None = None,
    samples: int = 2001,
    use_observer: bool = True,
    u_max: float | Sequence[float] | np.ndarray | None = None,
    name: str | None = None,
    slug: str | None = None,
) -> Response:
    """Simulate the response of the loop to a step of the reference at ``t = 0``.

    Parameters
    ----------
    model : LoopModel
        The loop.
    reference : float, optional
        Height of the reference step (default 1).
    x0 : array_like, shape (n,), optional
        Initial plant state (default zero).
    xhat0 : array_like, shape (n,), optional
        Initial estimate (default ``x0``, a matched estimate); only with ``use_observer``.
    horizon : float, optional
        Simulated time (default :func:`default_horizon`).
    samples : int, optional
        Number of samples on the uniform grid ``linspace(0, horizon, samples)`` (default 2001).
    use_observer : bool, optional
        Feed back the estimate (default) or the true state (``u = -K x + N r``).
    u_max : float or array_like, shape (m,), optional
        Limit ``|u_i| <= u_max_i`` on the applied input; None for the linear loop.
    name, slug : str, optional
        Labels of the result; by default chosen from the case (see :data:`CASE_NAMES`).

    Returns
    -------
    Response

    Raises
    ------
    DesignFileError
        For a bad argument (non-positive horizon, wrong vector length, too few samples, a
        non-positive limit ...), listing every problem at once.

    Warns
    -----
    GainsmithWarning
        The closed loop is not stable; the state passed :data:`STATE_LIMIT` and the run stopped;
        with a limit, holding the reference needs more than ``u_max``; the integrator failed.

    Notes
    -----
    *Linear loop.*  With the stacked state ``z = [x; x_hat]`` the loop is

    .. math:: \\dot z = F z + G r,\\quad F = \\begin{bmatrix} A & -BK \\\\ LC & A-BK-LC
              \\end{bmatrix},\\quad G = \\begin{bmatrix} BN \\\\ BN \\end{bmatrix},

    ``y = [C, -D K] z + D N r`` and ``u = [0, -K] z + N r`` (true state: ``F = A - B K``,
    ``G = B N``).  For a constant ``r`` the solution at the samples is exactly
    ``z_{k+1} = Phi z_k + Gamma r`` with ``Phi = expm(F h)`` and
    ``Gamma = int_0^h expm(F tau) dtau G``, both read from one exponential of the augmented
    matrix ``[[F, G], [0, 0]] h`` (Van Loan [1]).  The result is exact at the samples for any
    step ``h``, up to rounding.

    *Limited input.*  The loop ``z' = F0 z + Bz sat(u)`` is nonlinear, so it is integrated with
    :func:`scipy.integrate.solve_ivp`, ``method="LSODA"`` (Adams or BDF, switched
    automatically on stiffness [5]) with the piecewise-constant Jacobian
    ``F0 + Bz diag(free) Ku``, ``rtol = 1e-9``, ``atol = 1e-12 max(1, |r|, max |z(0)|)``,
    reported on the same grid.  A fast observer makes the loop stiff, which an explicit method
    such as RK45 pays for with a very small step; at most :data:`SATURATED_BUDGET` right-hand
    sides are evaluated, after which the run stops with a note.  The
    observer is assumed to be fed the *applied* (limited) input, so the estimation error still
    obeys ``e' = (A - L C) e``.

    *Divergence.*  Both paths stop at the first sample where ``max |z_i|`` passes
    :data:`STATE_LIMIT`; the arrays are then shorter than ``samples`` and ``stopped_early`` is
    set.

    *Final value.*  For a stable loop the exact equilibrium
    ``x_ss = -(A - B K)^{-1} B N r`` gives ``final_value = (C - D K) x_ss + D N r`` (tracked
    row).  With a limit it is kept only if ``|u_ss| <= u_max``; the limited loop need not reach
    it from every start, which the response itself shows.

    References
    ----------
    See the module references: Van Loan (1978) [1] for the exact stepping, Luenberger (1971) [2]
    for the observer and the separation of the eigenvalues.

    Examples
    --------
    A lightly damped positioning stage of our own (``x = [position, speed]``), closed-loop poles
    ``-2, -2``, observer poles ``-10, -10``:

    >>> import numpy as np
    >>> stage = LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                   K=[[2, 3.5]], L=[[19.5], [88.25]], reference_gain=[[4]])
    >>> response = simulate_step(stage, horizon=5.0, samples=501)
    >>> response.slug, response.stable, response.final_value
    ('observer_matched', True, 1.0)
    >>> float(np.round(response.tracked_output[-1], 4))  # 1 - 11 exp(-10)
    0.9995
    """
    ref, x0_array, xhat0_array, horizon_value, sample_count, limit = _validate_run(
        model,
        reference=reference,
        x0=x0,
        xhat0=xhat0,
        horizon=horizon,
        samples=samples,
        u_max=u_max,
        use_observer=use_observer,
        name=name,
        slug=slug,
    )
    n, m = model.n_states, model.n_inputs
    loop = _closed_loop(model, use_observer)
    if horizon_value is None:
        horizon_value = _horizon_from_eigenvalues(loop.eigenvalues)
    time = np.linspace(0.0, horizon_value, sample_count)

    if use_observer:
        estimate0 = x0_array if xhat0_array is None else xhat0_array
        matched = bool(np.array_equal(estimate0, x0_array))
        z0 = np.concatenate([x0_array, estimate0])
        default_slug = "observer_matched" if matched else "observer_mismatched"
    else:
        z0 = x0_array.copy()
        default_slug = "state_feedback"
    slug_value = slug if slug is not None else default_slug
    name_value = name if name is not None else CASE_NAMES.get(slug_value, slug_value)

    notes: list[str] = []
    stable = _is_stable(loop.eigenvalues)
    if not stable:
        worst = float(np.max(loop.eigenvalues.real))
        notes.append(
            f"the closed loop is not stable (largest eigenvalue real part {worst:.4g}); "
            f"simulated over a bounded horizon of {horizon_value:.4g}"
        )

    failure = ""
    if limit is None:
        trajectory, stopped = _step_exact(loop, ref, z0, time)
        method = (
            "exact zero-order-hold stepping of the linear closed loop "
            "(one matrix exponential, Van Loan 1978)"
        )
    else:
        trajectory, stopped, failure = _integrate_limited(loop, ref, z0, time, limit)
        method = (
            "scipy.integrate.solve_ivp, LSODA with the piecewise Jacobian, "
            f"rtol={SATURATED_RTOL:g}, atol={SATURATED_ATOL:g} x state scale, "
            "input limited to +/-u_max"
        )
        if failure:
            notes.append(failure)
    if stopped and not failure:
        reached = float(time[trajectory.shape[0] - 1]) if trajectory.shape[0] else 0.0
        notes.append(
            f"the run stopped at t = {reached:.4g} because the state passed {STATE_LIMIT:g}"
        )

    kept = trajectory.shape[0]
    time = time[:kept]
    state = trajectory[:, :n]
    estimate = trajectory[:, n:] if use_observer else None
    control = trajectory @ loop.Ku.T + loop.N[:, 0] * ref
    if limit is not None:
        control = np.clip(control, -limit, limit)
    # y = C x + D u with the applied input (equals Cz z + Dz r for the linear loop).
    output = state @ model.C.T + control @ model.D.T

    final_value: float | None = None
    if stable:
        _, y_ss, u_ss = _steady_state(model, ref)
        final_value = float(y_ss[model.tracked])
        if limit is not None and np.any(np.abs(u_ss) > limit * (1 + 1e-12)):
            notes.append(
                "holding the reference needs |u| = "
                + ", ".join(f"{abs(value):.4g}" for value in u_ss)
                + " beyond the limit; no final value"
            )
            final_value = None
    for note in notes:
        warnings.warn(f"{name_value}: {note}", GainsmithWarning, stacklevel=2)

    error_norm = None
    if estimate is not None:
        error_norm = np.linalg.norm(state - estimate, axis=1)

    return Response(
        name=name_value,
        slug=slug_value,
        time=_frozen_array(time),
        output=_frozen_array(output.reshape(kept, model.n_outputs)),
        tracked_output=_frozen_array(output[:, model.tracked]),
        control=_frozen_array(control.reshape(kept, m)),
        state=_frozen_array(state),
        estimate=None if estimate is None else _frozen_array(estimate),
        estimation_error_norm=None if error_norm is None else _frozen_array(error_norm),
        saturated=limit is not None,
        reference=ref,
        stable=stable,
        final_value=final_value,
        horizon=float(horizon_value),
        method=method,
        stopped_early=stopped,
        u_max=None if limit is None else _frozen_array(limit),
        notes=tuple(notes),
    )


def default_mismatch(model: LoopModel, x0: np.ndarray | None, reference: float) -> np.ndarray:
    """Initial estimate of the mismatched case when none is given.

    ``x_hat(0) = x(0) + 0.1 |r| (1, ..., 1)`` (``0.1 (1, ..., 1)`` when ``r = 0``): every state
    estimate starts off by a tenth of the reference step.  Common practice, no source; pass
    ``xhat0_mismatch`` when the states have very different scales.
    """
    start = np.zeros(model.n_states) if x0 is None else np.asarray(x0, dtype=float).reshape(-1)
    scale = abs(reference) if reference != 0 else 1.0
    return start + MISMATCH_FRACTION * scale * np.ones(model.n_states)


def simulate_cases(
    model: LoopModel,
    *,
    reference: float = 1.0,
    x0: Sequence[float] | np.ndarray | None = None,
    xhat0_mismatch: Sequence[float] | np.ndarray | None = None,
    horizon: float | None = None,
    samples: int = 2001,
    u_max: float | Sequence[float] | np.ndarray | None = None,
) -> tuple[Response, Response, Response]:
    """The three standard step responses on one time grid.

    Parameters
    ----------
    model : LoopModel
        The loop.
    reference : float, optional
        Height of the reference step.
    x0 : array_like, shape (n,), optional
        Initial plant state of all three cases (default zero).
    xhat0_mismatch : array_like, shape (n,), optional
        Initial *estimate* of the mismatched case (default :func:`default_mismatch`:
        ``x0 + 0.1 |r|`` in every state).
    horizon : float, optional
        Simulated time; by default :func:`default_horizon` of the whole ``2n`` loop, the same
        for the three cases.
    samples : int, optional
        Number of samples.
    u_max : float or array_like, optional
        Input limit applied in all three cases (None: the linear loop).

    Returns
    -------
    tuple of Response
        ``(state_feedback, observer_matched, observer_mismatched)``: feedback of the true state;
        observer with ``x_hat(0) = x(0)``; observer with ``x_hat(0) = xhat0_mismatch``.

    Raises
    ------
    DesignFileError
        For a bad argument (see :func:`simulate_step`).

    Notes
    -----
    Without a limit the first two outputs agree to rounding (the separation principle,
    Luenberger 1971 [2]): with a matched start the estimation error stays zero.
    """
    if not isinstance(model, LoopModel):
        raise DesignFileError(f"expected a LoopModel, got {type(model).__name__}", key="model")
    if horizon is None:
        horizon = default_horizon(model)
    if xhat0_mismatch is None:
        problems: list[str] = []
        start = _check_vector(x0, model.n_states, "x0", problems)
        if not problems and isinstance(reference, int | float | np.integer | np.floating):
            xhat0_mismatch = default_mismatch(model, start, float(reference))
    cases = [
        ("state_feedback", False, None),
        ("observer_matched", True, None),
        ("observer_mismatched", True, xhat0_mismatch),
    ]
    true_state, matched, mismatched = (
        simulate_step(
            model,
            reference=reference,
            x0=x0,
            xhat0=estimate,
            horizon=horizon,
            samples=samples,
            use_observer=observer,
            u_max=u_max,
            slug=slug,
        )
        for slug, observer, estimate in cases
    )
    return true_state, matched, mismatched


# --------------------------------------------------------------------------------------------
# Metrics
# --------------------------------------------------------------------------------------------


def _crossing_up(time: np.ndarray, values: np.ndarray, level: float) -> float | None:
    """First time ``values`` reaches ``level`` from below, interpolated linearly."""
    hits = np.flatnonzero(values >= level)
    if hits.size == 0:
        return None
    i = int(hits[0])
    if i == 0:
        return float(time[0])
    v0, v1 = values[i - 1], values[i]
    return float(time[i - 1] + (time[i] - time[i - 1]) * (level - v0) / (v1 - v0))


def _last_exit(time: np.ndarray, error: np.ndarray, band: float) -> float | None:
    """Time after which ``|error| <= band`` for good, interpolated linearly.

    None when the last sample is still outside the band (not settled within the run).
    """
    outside = np.flatnonzero(np.abs(error) > band)
    if outside.size == 0:
        return float(time[0])
    j = int(outside[-1])
    if j == error.size - 1:
        return None
    e0, e1 = error[j], error[j + 1]
    edge = math.copysign(band, e0)
    return float(time[j] + (time[j + 1] - time[j]) * (e0 - edge) / (e0 - e1))


def _refined_peak(time: np.ndarray, values: np.ndarray) -> tuple[float, float]:
    """Largest value and its time; refined by the parabola through the top sample and its
    two neighbours (exact for a locally quadratic response)."""
    i = int(np.argmax(values))
    if i == 0 or i == values.size - 1:
        return float(values[i]), float(time[i])
    t = time[i - 1 : i + 2]
    v = values[i - 1 : i + 2]
    # Vertex of the Lagrange parabola through (t_k, v_k), k = 0, 1, 2.
    d1 = (v[1] - v[0]) / (t[1] - t[0])
    d2 = (v[2] - v[1]) / (t[2] - t[1])
    curvature = (d2 - d1) / (t[2] - t[0])
    if curvature >= 0.0:
        return float(values[i]), float(time[i])
    # p(t) = v0 + d1 (t - t0) + curvature (t - t0)(t - t1)
    # p'(t) = d1 + curvature (2 t - t0 - t1) = 0
    t_peak = 0.5 * (t[0] + t[1]) - d1 / (2.0 * curvature)
    t_peak = float(np.clip(t_peak, t[0], t[2]))
    v_peak = v[0] + d1 * (t_peak - t[0]) + curvature * (t_peak - t[0]) * (t_peak - t[1])
    return float(max(v_peak, v[1])), t_peak


def step_metrics(response: Response, *, reference: float | None = None) -> StepMetrics:
    """Figures of merit of the tracked output of a step response.

    Parameters
    ----------
    response : Response
        A result of :func:`simulate_step` or :func:`simulate_cases`.
    reference : float, optional
        Height of the reference step; by default the one the response was simulated with.

    Returns
    -------
    StepMetrics

    Notes
    -----
    Definitions, with ``y`` the tracked output, ``y_f`` its exact final value
    (``response.final_value``, from the closed-loop DC gain, not the last sample) and
    ``s = sign(y_f)`` so that the response is measured in the direction of the step
    (Ogata [3] Sec. 5-3, Nise [4] Sec. 4.6):

    * ``overshoot_percent = 100 (max s y - |y_f|) / |y_f|``, 0 when the response never passes
      ``y_f``; the maximum is refined by a parabola through the top sample and its neighbours.
    * ``undershoot_percent = 100 max(0, -min s y) / |y_f|`` (a start in the wrong direction).
    * ``peak_time``: time of that maximum; None when there is no overshoot.
    * ``settling_time_2pct`` / ``settling_time_1pct``: the last time ``|y - y_f|`` exceeds
      2 % / 1 % of ``|y_f|`` (linear interpolation between samples); None when the run ends
      outside the band.
    * ``rise_time``: from the first time ``s y`` reaches 10 % of ``|y_f|`` to the first time it
      reaches 90 % (linear interpolation); None when 90 % is never reached.
    * ``steady_state_error = reference - y_f``.
    * ``peak_control = max |u_i(t_k)|`` over all inputs and samples.
    * ``estimation_settling_time``: the first time after which ``||x - x_hat||`` stays below 2 %
      of its initial value (linear interpolation); None for the true-state case, when the initial
      error is zero, or when the run ends above 2 %.

    When ``y_f`` is unknown (unstable loop, run stopped early, unreachable with a limit) or zero,
    every figure relative to it is None; ``notes`` says why.

    References
    ----------
    See the module references [3], [4].

    Examples
    --------
    >>> stage = LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                   K=[[2, 3.5]], L=[[19.5], [88.25]], reference_gain=[[4]])
    >>> figures = step_metrics(simulate_step(stage, use_observer=False, samples=4001))
    >>> figures.overshoot_percent, figures.peak_time    # poles -2, -2: no overshoot
    (0.0, None)
    >>> round(figures.rise_time, 3)                     # 3.357 / 2 for a double pole at -2
    1.679
    """
    if not isinstance(response, Response):
        raise DesignFileError(f"expected a Response, got {type(response).__name__}", key="response")
    ref = response.reference if reference is None else float(reference)
    notes: list[str] = []
    time = response.time
    y = response.tracked_output
    y_f = response.final_value

    peak_control = float(np.max(np.abs(response.control))) if response.control.size else None

    estimation_settling: float | None = None
    if response.estimation_error_norm is not None and response.estimation_error_norm.size:
        norms = response.estimation_error_norm
        scale = max(
            float(np.max(np.linalg.norm(response.state, axis=1))), abs(response.reference), 1e-300
        )
        if norms[0] > 1e-14 * scale:
            estimation_settling = _last_exit(time, norms, 0.02 * float(norms[0]))
            if estimation_settling is None:
                notes.append("the estimation error is still above 2 % at the end of the run")

    blank = StepMetrics(
        overshoot_percent=None,
        settling_time_2pct=None,
        settling_time_1pct=None,
        rise_time=None,
        peak_time=None,
        steady_state_error=None,
        peak_control=peak_control,
        estimation_settling_time=estimation_settling,
        final_value=y_f,
        reference=ref,
        undershoot_percent=None,
        notes=(),
    )
    if y_f is None or response.stopped_early or y.size < 2:
        reason = (
            "the loop is not stable"
            if not response.stable
            else "the run stopped early"
            if response.stopped_early
            else "the final value is not reachable"
            if y_f is None
            else "too few samples"
        )
        notes.append(f"no final value ({reason}); step figures undefined")
        return _replace_notes(blank, notes)
    steady_state_error = ref - y_f
    zero_tol = 1e-12 * max(abs(ref), float(np.max(np.abs(y))), 1e-300)
    if abs(y_f) <= zero_tol:
        notes.append("the final value is zero; figures relative to it are undefined")
        return _replace_notes(
            StepMetrics(**{**blank.__dict__, "steady_state_error": steady_state_error}), notes
        )

    size = abs(y_f)
    direction = math.copysign(1.0, y_f)
    along = direction * y
    peak_value, peak_at = _refined_peak(time, along)
    if peak_value > size * (1.0 + 1e-9):
        overshoot = 100.0 * (peak_value - size) / size
        peak_time: float | None = peak_at
    else:
        overshoot = 0.0
        peak_time = None
    undershoot = 100.0 * max(0.0, -float(np.min(along))) / size
    settling_2 = _last_exit(time, y - y_f, 0.02 * size)
    settling_1 = _last_exit(time, y - y_f, 0.01 * size)
    if settling_2 is None:
        notes.append("the response is still outside the 2 % band at the end of the run")
    elif settling_1 is None:
        notes.append("the response is still outside the 1 % band at the end of the run")
    t10 = _crossing_up(time, along, 0.1 * size)
    t90 = _crossing_up(time, along, 0.9 * size)
    rise = None if t10 is None or t90 is None else t90 - t10
    return StepMetrics(
        overshoot_percent=overshoot,
        settling_time_2pct=settling_2,
        settling_time_1pct=settling_1,
        rise_time=rise,
        peak_time=peak_time,
        steady_state_error=steady_state_error,
        peak_control=peak_control,
        estimation_settling_time=estimation_settling,
        final_value=y_f,
        reference=ref,
        undershoot_percent=undershoot,
        notes=tuple(notes),
    )


def _replace_notes(metrics: StepMetrics, notes: list[str]) -> StepMetrics:
    return StepMetrics(**{**metrics.__dict__, "notes": tuple(notes)})


def observer_speed_study(
    model_for_factor: Callable[[float], LoopModel],
    factors: Sequence[float],
    **sim_kwargs: object,
) -> list[tuple[float, StepMetrics]]:
    """Step figures of the mismatched-estimate case for a range of observer speeds.

    Parameters
    ----------
    model_for_factor : callable
        Returns the loop for a factor (typically: observer poles = factor x controller poles;
        the meaning of the factor is the caller's).
    factors : sequence of float
        The factors to study, in the order given; finite numbers.
    **sim_kwargs
        Passed on: ``reference``, ``x0``, ``xhat0_mismatch`` (the initial estimate, default
        :func:`default_mismatch`), ``horizon``, ``samples``, ``u_max``.

    Returns
    -------
    list of (float, StepMetrics)
        One pair per factor.

    Raises
    ------
    DesignFileError
        No factors, a non-finite factor, an unknown keyword, or a model that is not a
        :class:`LoopModel`.

    Notes
    -----
    Without ``horizon`` each loop gets its own :func:`default_horizon`; the figures do not depend
    on the grid beyond the interpolation error.  Only the mismatched case is simulated (with a
    matched estimate the output does not depend on the observer at all, by the separation
    principle [2]).

    Examples
    --------
    >>> def stage(factor):
    ...     p = 2.0 * factor                 # observer poles -p, -p; controller poles -2, -2
    ...     return LoopModel(A=[[0, 1], [-2, -0.5]], B=[[0], [1]], C=[[1, 0]], D=[[0]],
    ...                      K=[[2, 3.5]], L=[[2 * p - 0.5], [p * p - p - 1.75]],
    ...                      reference_gain=[[4]])
    >>> study = observer_speed_study(stage, [2.0, 5.0])
    >>> [factor for factor, _ in study]
    [2.0, 5.0]
    >>> study[0][1].estimation_settling_time > study[1][1].estimation_settling_time
    True
    """
    allowed = {"reference", "x0", "xhat0_mismatch", "horizon", "samples", "u_max"}
    unknown = sorted(set(sim_kwargs) - allowed)
    problems: list[str] = []
    if unknown:
        problems.append(f"unknown keyword(s) {', '.join(unknown)}; allowed: {sorted(allowed)}")
    values: list[float] = []
    for factor in factors:
        if isinstance(factor, bool) or not isinstance(
            factor, int | float | np.integer | np.floating
        ):
            problems.append(f"factor {factor!r} is not a number")
        elif not math.isfinite(float(factor)):
            problems.append(f"factor {factor!r} is not finite")
        else:
            values.append(float(factor))
    if not problems and not values:
        problems.append("expected at least one factor")
    if problems:
        raise DesignFileError(
            "observer speed study rejected: " + "; ".join(problems), key="factors"
        )

    reference = sim_kwargs.get("reference", 1.0)
    x0 = sim_kwargs.get("x0")
    xhat0 = sim_kwargs.get("xhat0_mismatch")
    results: list[tuple[float, StepMetrics]] = []
    for factor in values:
        model = model_for_factor(factor)
        if not isinstance(model, LoopModel):
            raise DesignFileError(
                f"model_for_factor({factor}) returned {type(model).__name__}, not a LoopModel",
                key="model_for_factor",
            )
        estimate0 = xhat0
        if estimate0 is None:
            problems = []
            start = _check_vector(x0, model.n_states, "x0", problems)
            ref_value = float(reference) if isinstance(reference, int | float) else 1.0
            estimate0 = default_mismatch(model, start, ref_value)
        response = simulate_step(
            model,
            reference=reference,  # type: ignore[arg-type]  # checked by simulate_step
            x0=x0,  # type: ignore[arg-type]
            xhat0=estimate0,  # type: ignore[arg-type]
            horizon=sim_kwargs.get("horizon"),  # type: ignore[arg-type]
            samples=sim_kwargs.get("samples", 2001),  # type: ignore[arg-type]
            u_max=sim_kwargs.get("u_max"),  # type: ignore[arg-type]
            slug="observer_mismatched",
        )
        results.append((factor, step_metrics(response)))
    return results
