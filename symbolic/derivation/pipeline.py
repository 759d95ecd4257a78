"""The design workflow: a validated design in, a finished :class:`Derivation` out.

One direction of flow: :func:`derive` chooses the poles, derives the closed
forms within a time budget (:mod:`symbolic.derivation.closed_form` in a child
process), evaluates them at the design's parameter values, cross-checks
every number against SciPy (:mod:`symbolic.derivation.numeric`) and returns frozen
result objects.  Renderers (terminal, JSON, memo) consume these objects and
never re-derive anything.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import time
import warnings
from collections.abc import Sequence

import numpy as np
import sympy as sp

from ..model.design import Design
from ..model.results import (
    Check,
    CompensatorResult,
    Derivation,
    GainResult,
    NumericPlant,
    PoleChoice,
    ReferenceGainResult,
    SeparatedLoop,
    StructureReport,
)
from ..model.tolerances import (
    COMPENSATOR_TOLERANCE,
    GAIN_TOLERANCE,
    ILL_CONDITIONED,
    POLYNOMIAL_TOLERANCE,
)
from ..runtime import sidecar as _sidecar
from ..runtime.budget import Outcome, run_bounded_steps
from ..runtime.errors import BudgetExceeded, DesignFileError, GainsmithWarning, StructureError
from . import closed_form as cf
from .numeric import (
    check_eigenvalues,
    eigenvector_condition,
    evaluate_matrix,
    numeric_ackermann,
    polynomial_residual,
    relative_difference,
    scipy_placement,
    transfer_function,
)
from .specs import DominantPair, dominant_pair, remaining_poles

__all__ = [
    "Check",
    "CompensatorResult",
    "Derivation",
    "GainResult",
    "NumericPlant",
    "PoleChoice",
    "ReferenceGainResult",
    "SeparatedLoop",
    "StructureReport",
    "derive",
    "eigenvalue_check",
    "select_controller_poles",
    "select_observer_poles",
]

s = cf.s

#: Expressions with more operations than this are not factored outside the budgeted child.
FACTOR_LIMIT = 400
#: Closed-form transfer function of the compensator up to this order.
COMPENSATOR_CLOSED_FORM_MAX_ORDER = 3


# --------------------------------------------------------------------------
# Result objects
# --------------------------------------------------------------------------
def eigenvalue_check(
    name: str,
    matrix: np.ndarray,
    poles: Sequence[complex],
    *,
    terms: Sequence[object] | None = None,
    weights: np.ndarray | None = None,
    achieved: Sequence[complex] | None = None,
) -> Check:
    """A :class:`Check` that the eigenvalues of ``matrix`` are the requested ``poles``.

    Decided by :func:`symbolic.derivation.numeric.check_eigenvalues` (a conditioning-based tolerance
    in double precision, then a 50-digit confirmation when that fails); its explanation
    becomes the check's note.  ``terms`` and ``weights`` describe the parts the matrix is
    made of (``(A, (B, K))`` and |A| + |B||K| for A − BK).
    """
    verdict = check_eigenvalues(matrix, poles, terms=terms, weights=weights, achieved=achieved)
    return Check(name, verdict.residual, verdict.tolerance, verdict.passed, verdict.explanation)


# --------------------------------------------------------------------------
# Pole selection
# --------------------------------------------------------------------------
def _exact(x: float) -> sp.Rational:
    """A float rounded for display (shortest repr) as an exact rational."""
    return sp.Rational(repr(float(x)))


def _exact_complex(z: complex) -> sp.Expr:
    re, im = _exact(z.real), _exact(z.imag)
    return re + sp.I * im if im != 0 else re


def select_controller_poles(design: Design) -> PoleChoice:
    """The controller poles: given, or from specifications plus the rule for the rest."""
    req = design.controller
    if req.poles is not None:
        coeffs = cf.desired_coefficients(req.poles)
        return PoleChoice(
            req.poles, "given", "controller poles as given in the design file", coeffs
        )
    assert req.specifications is not None
    pair = _sidecar.call(dominant_pair, req.specifications)  # root finding: SciPy
    return _from_pair(design, pair)


def _from_pair(design: Design, pair: DominantPair) -> PoleChoice:
    """The controller poles for a dominant pair: the pair and the remaining poles by rule."""
    req = design.controller
    n = design.plant.order
    dominant = tuple(_exact_complex(p) for p in pair.poles)
    if req.remaining_poles is not None:
        rest = req.remaining_poles
        rule = "the remaining poles as given in the design file (controller.remaining_poles)"
    else:
        rest = tuple(
            _exact_complex(p) for p in remaining_poles(pair, n - 2, req.remaining_pole_factor)
        )
        rule = (
            f"the remaining {n - 2} pole(s) real, {req.remaining_pole_factor:g} times farther left"
            " than the dominant pair, spread by 10 % so that no pole repeats (common practice,"
            " no source: they then decay that much faster and the pair dominates)"
            if n > 2
            else "second-order plant: the dominant pair is the whole set"
        )
    poles = dominant + tuple(rest)
    return PoleChoice(poles, "specifications", rule, cf.desired_coefficients(poles), pair)


def _shipped_pole_sets(design: Design, base: PoleChoice):
    """``(sigma, omega_d) -> (controller poles with the integral pole last, shipped observer
    poles, PoleChoice)`` by the design's rules: what :mod:`symbolic.verification.refine` varies."""
    from ..verification.refine import refined_pair

    spec = design.controller.specifications

    def sets(sigma: float, omega_d: float):
        choice = _from_pair(design, refined_pair(spec, base.dominant, sigma, omega_d))
        obs = select_observer_poles(design, choice)
        cpoles = choice.values
        if design.tracking.method == "integral":
            from .integral import integral_pole_for

            cpoles = np.append(cpoles, complex(integral_pole_for(design, choice.poles)[0]))
        opoles = obs.values
        if design.observer.kind == "reduced":
            from .reduced import reduced_poles_for

            opoles = np.array([complex(z) for z in reduced_poles_for(design, obs.poles)[0]])
        return cpoles, opoles, choice

    return sets


def select_observer_poles(design: Design, controller: PoleChoice) -> PoleChoice:
    """Observer poles: given, or the controller poles scaled by the speed factor."""
    req = design.observer
    if req.poles is not None:
        return PoleChoice(
            req.poles,
            "given",
            "observer poles as given in the design file",
            cf.desired_coefficients(req.poles),
        )
    f = _exact(req.speed_factor)
    poles = tuple(sp.expand(f * p) for p in controller.poles)
    why = (
        " (default; common practice, no source: observers are usually made 2 to 6 times faster"
        " than the controller)"
        if req.speed_factor_is_default
        else " (observer.speed_factor)"
    )
    rule = f"observer poles = {req.speed_factor:g} × controller poles{why}"
    return PoleChoice(poles, "speed factor", rule, cf.desired_coefficients(poles))


# --------------------------------------------------------------------------
# Structure
# --------------------------------------------------------------------------
def describe_zero(f: sp.Expr) -> str:
    """'kf = 0' or 'k = c*m/b' for a factor f that must not vanish."""
    if f.is_Symbol:
        return f"{f} = 0"
    for x in sorted(f.free_symbols, key=lambda v: v.name):
        poly = sp.Poly(f, x) if f.is_polynomial(x) else None
        if poly is not None and poly.degree() == 1:
            a, b = poly.all_coeffs()
            if a.is_number:
                return f"{x} = {sp.factor(-b / a)}"
    return f"{f} = 0"


#: Factors of higher degree than this are not examined for real roots (kept as conditions).
ROOT_COUNT_MAX_DEGREE = 12


def _semidefinite_quadratic_has_no_zero(f: sp.Expr, xs: list[sp.Symbol]) -> bool:
    """True if ``f`` is a quadratic bounded on one side whose extreme value is not 0.

    Completing the square: for ``f(x) = ½ xᵀ H x + gᵀ x + c`` with H positive
    semidefinite, f is bounded below exactly when ``H x = −g`` has a solution
    x₀, and its minimum over real x is then ``f(x₀)``; f has no real zero if
    that minimum is positive.  The negative-semidefinite case is the same for
    −f.  Semidefiniteness: every principal minor is nonnegative (G. Strang,
    *Linear Algebra and Its Applications*, 4th ed., section 6.2).
    """
    poly = sp.Poly(f, *xs)
    if poly.total_degree() != 2 or not (poly.domain.is_QQ or poly.domain.is_ZZ):
        return False
    if len(xs) > 8:  # 2**n principal minors
        return False
    H = sp.hessian(f, xs)
    at_zero = {x: 0 for x in xs}
    g = sp.Matrix([sp.diff(f, x) for x in xs]).subs(at_zero)
    n = len(xs)
    subsets = [[i for i in range(n) if mask >> i & 1] for mask in range(1, 2**n)]
    for sign in (1, -1):
        Hs = sign * H
        if not all(Hs.extract(idx, idx).det() >= 0 for idx in subsets):
            continue
        try:
            x0, params = Hs.gauss_jordan_solve(-sign * g)
        except ValueError:  # -g outside the range of H: f is unbounded both ways
            return False
        x0 = x0.subs({t: 0 for t in params})
        return bool(sign * f.subs(dict(zip(xs, x0, strict=True))) > 0)
    return False


def has_no_real_zero(f: sp.Expr) -> bool:
    """True only if ``f`` provably vanishes for no real values of its parameters.

    Parameters
    ----------
    f : sympy.Expr
        One irreducible factor of a determinant; its symbols are real.

    Returns
    -------
    bool
        ``True`` when one of these proves that f has no real zero:

        * SymPy's assumptions find f positive or negative for all real
          values (e.g. ``a**2 + b**2 + 1``, ``exp(a) + 1``);
        * f is a polynomial in one parameter with rational coefficients and
          Sturm's theorem counts no real root (``Poly.count_roots``; e.g.
          ``a**2 - 2*a + 5``);
        * f is a quadratic in several parameters, bounded on one side, whose
          extreme value is nonzero (e.g. ``a**2 - 2*a*b + b**2 + 1``).

        ``False`` otherwise, including when no proof was found: the factor
        is then kept as a condition.

    Notes
    -----
    Sturm's theorem: P. Henrici, *Applied and Computational Complex
    Analysis*, vol. 1, Wiley 1974, section 6.3.

    Examples
    --------
    >>> a, b = sp.symbols("a b", real=True)
    >>> has_no_real_zero(a**2 - 2*a + 5), has_no_real_zero(a**2 - 2*a - 5)
    (True, False)
    >>> has_no_real_zero(a**2 - 2*a*b + b**2 + 1), has_no_real_zero(a**2 - b**2 + 1)
    (True, False)
    """
    xs = sorted(f.free_symbols, key=lambda v: v.name)
    if not xs or not all(x.is_real for x in xs):
        return False
    if f.is_positive or f.is_negative:
        return True
    if not f.is_polynomial(*xs):
        return False
    try:
        if len(xs) == 1:
            poly = sp.Poly(f, xs[0])
            if poly.degree() > ROOT_COUNT_MAX_DEGREE or not (
                poly.domain.is_QQ or poly.domain.is_ZZ
            ):
                return False
            return poly.count_roots() == 0
        return _semidefinite_quadratic_has_no_zero(f, xs)
    except (sp.PolynomialError, NotImplementedError, ZeroDivisionError):
        return False


def conditions_of(determinant: sp.Expr | None) -> tuple[str, ...]:
    """The parameter conditions under which a determinant vanishes.

    A factor that provably has no real zero (:func:`has_no_real_zero`) is
    not a condition: no real parameter value makes it vanish.
    """
    if determinant is None:
        return ()
    if sp.count_ops(determinant) > FACTOR_LIMIT:
        return (
            f"the determinant vanishes (it has {sp.count_ops(determinant)} operations: too"
            " large to solve for the parameters)",
        )
    num, _den = sp.fraction(sp.factor(determinant))
    try:
        _c, factors = sp.factor_list(num)
    except sp.PolynomialError:
        return (f"{num} = 0",) if num.free_symbols else ()
    return tuple(
        describe_zero(f) for f, _mult in factors if f.free_symbols and not has_no_real_zero(f)
    )


def _structure(
    kind: str,
    matrix: sp.Matrix | None,
    determinant: sp.Expr | None,
    value: np.ndarray,
    order: int,
) -> StructureReport:
    rank = int(np.linalg.matrix_rank(value)) if np.all(np.isfinite(value)) else 0
    cond = (
        float(np.linalg.cond(value))
        if rank == order and value.shape[0] == value.shape[1]
        else (float(np.linalg.cond(value @ value.T)) ** 0.5 if rank == order else math.inf)
    )
    return StructureReport(
        kind=kind,
        matrix=matrix,
        determinant=determinant,
        conditions=conditions_of(determinant),
        numeric_rank=rank,
        order=order,
        condition_number=cond,
        value=value,
    )


def _numeric_structure(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    cols = [B]
    for _ in range(A.shape[0] - 1):
        cols.append(A @ cols[-1])
    return np.hstack(cols)


# --------------------------------------------------------------------------
# The workflow
# --------------------------------------------------------------------------
def _closed_form_stage(design: Design, ctrl: PoleChoice, obs: PoleChoice) -> cf.ClosedForms:
    p = design.plant
    return cf.closed_forms(
        sp.Matrix(p.A),
        sp.Matrix(p.B),
        sp.Matrix(p.C),
        sp.Matrix(p.D),
        design.tracking.output,
        ctrl.coefficients,
        obs.coefficients,
    )


def _separated_stage(
    design: Design, K: sp.Matrix, L: sp.Matrix, ctrl: PoleChoice, obs: PoleChoice
) -> cf.SeparatedForms:
    p = design.plant
    return cf.separated_forms(
        sp.Matrix(p.A),
        sp.Matrix(p.B),
        sp.Matrix(p.C),
        sp.Matrix(p.D),
        K,
        L,
        ctrl.coefficients,
        obs.coefficients,
        compensator=p.order <= COMPENSATOR_CLOSED_FORM_MAX_ORDER,
    )


def _numeric_plant(design: Design) -> NumericPlant:
    values = design.values
    mats = {}
    for name in ("A", "B", "C", "D"):
        M = getattr(design.plant, name)
        val = evaluate_matrix(M, values)
        bad = np.argwhere(~np.isfinite(val))
        if bad.size:
            i, j = bad[0]
            raise DesignFileError(
                f"'{M[i, j]}' is not a finite real number at the evaluated parameter values"
                f" ({_values_text(design)})",
                design.path,
                f"plant.{name}[{i}][{j}]",
            )
        mats[name] = val
    return NumericPlant(**mats)


def _values_text(design: Design) -> str:
    return ", ".join(f"{p.name} = {p.value}" for p in design.parameters) or "no parameters"


class _Budget:
    """One time budget shared by the symbolic stages of a derivation (a deadline)."""

    def __init__(self, seconds: float):
        self.unbounded = seconds <= 0
        self.seconds = seconds
        self.deadline = time.monotonic() + seconds

    def run_steps(
        self, func, args, whats: tuple[str, ...], notes: list[str], reported: int | None = None
    ):
        """Successive stages in one child (one fork): results (None where missing), the
        seconds each took, and why the missing ones are missing (None when none is).

        A note is added when one of the first ``reported`` stages (default: all) is
        missing; the callers of the later ones report those themselves."""
        reported = len(whats) if reported is None else reported
        left = None if self.unbounded else self.deadline - time.monotonic()
        if left is not None and left <= 0.05:
            notes.append(
                f"{whats[0]} was skipped: the symbolic budget of {self.seconds:g} s was used up;"
                " numeric results are given instead of closed forms"
            )
            return [None] * len(whats), [0.0] * len(whats), f"{whats[0]} was skipped"
        results, at, stopped = run_bounded_steps(func, args, seconds=left, what=whats[0])
        took = [b - a for a, b in zip([0.0, *at], at, strict=False)]
        reason = None
        if stopped is not None and len(results) < len(whats):
            what = whats[len(results)]
            reason = str(stopped).replace(whats[0], what)
            if "did not finish" in reason:
                reason = f"{what} did not finish within {self.seconds:g} s"
            if len(results) < reported:
                notes.append(
                    f"{reason} (the symbolic budget, options.symbolic_budget_seconds);"
                    " numeric results are given instead of closed forms"
                )
        pad = len(whats) - len(results)
        return list(results) + [None] * pad, took + [0.0] * pad, reason


def _symbolic_stages(design: Design, ctrl: PoleChoice, obs: PoleChoice, after=()):
    """The closed forms, then the separated loop built from them (None when there are no
    closed-form gains), then each of ``after`` called with the closed-form K or None (a
    generator: each stage is kept as soon as it is done, see
    :func:`symbolic.runtime.budget.run_bounded_steps`)."""
    forms = _closed_form_stage(design, ctrl, obs)
    yield forms
    if forms.controller is not None and forms.observer is not None:
        yield _separated_stage(design, forms.controller.gain, forms.observer.gain.T, ctrl, obs)
    else:
        yield None
    for step in after:
        yield step(forms.controller.gain if forms.controller is not None else None)


def derive(design: Design, *, budget: float | None = None) -> Derivation:
    """Derive K, L, the reference gain and the separated loop, and check them.

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
    """
    t0 = time.perf_counter()
    ctrl = select_controller_poles(design)
    num = _numeric_plant(design)
    refinement = None
    if ctrl.origin == "specifications" and design.controller.refine:
        from ..verification.refine import refine_controller_poles

        ctrl, refinement = refine_controller_poles(
            design, ctrl, num, _shipped_pole_sets(design, ctrl)
        )
    obs = select_observer_poles(design, ctrl)
    pending = _start_extensions(design, ctrl, obs, num, budget)
    try:
        result = _derive(design, budget, ctrl, obs, num, pending, t0)
        if refinement is not None:
            notes = result.notes
            if not refinement.met:
                notes = notes + (
                    "the specifications are not all met on the simulated step of the shipped"
                    " loop: dominant pair " + refinement.sentence,
                )
            result = dataclasses.replace(result, refinement=refinement, notes=notes)
        return _extensions(result, budget, pending)
    except BaseException:
        for job in pending.values():
            if not isinstance(job, functools.partial):
                job.cancel()
        raise


def _start_extensions(
    design: Design, ctrl: PoleChoice, obs: PoleChoice, num: NumericPlant, budget: float | None
) -> dict:
    """The closed forms of the extensions the design asks for, started now so that they run
    beside the main symbolic stage: the integral action's and the digital controller's in
    children of their own, the reduced observer's (which needs the closed-form K) as a
    callable for the main stage's child to run after K.  Keyed by the
    :class:`Derivation` field each belongs to."""
    pending: dict = {}
    if design.tracking.method == "integral":
        from .integral import start_closed_form

        job = start_closed_form(design, ctrl.poles, budget=budget)
        if job is not None:
            pending["integral"] = job
    if design.discrete is not None:
        from .digital import start_closed_forms

        job = start_closed_forms(design, ctrl.poles, obs.poles, budget=budget)
        if job is not None:
            pending["discrete"] = job
    if design.observer.kind == "reduced":
        from .reduced import closed_form_outcome

        pending["reduced_observer"] = functools.partial(
            closed_form_outcome, design, num.C, obs.poles, ctrl.coefficients
        )
    return pending


def _derive(
    design: Design,
    budget: float | None,
    ctrl: PoleChoice,
    obs: PoleChoice,
    num: NumericPlant,
    pending: dict,
    t0: float,
) -> Derivation:
    """:func:`derive` without the extensions; the main symbolic child also runs the steps
    in ``pending`` that are callables, and replaces each by its outcome."""
    timings: dict[str, float] = {}
    notes: list[str] = []
    checks: list[Check] = []
    plant = design.plant
    n, m, p = plant.order, plant.n_inputs, plant.n_outputs
    values = design.values

    symbolic_budget = _Budget(design.symbolic_budget_seconds if budget is None else budget)
    A, B, C, D = num.A, num.B, num.C, num.D

    # ---- closed forms and the separated loop (bounded, one child) ----------------
    forms: cf.ClosedForms | None = None
    sep_forms: cf.SeparatedForms | None = None
    timings["closed_form"] = timings["separated"] = 0.0
    after = {k: job for k, job in pending.items() if isinstance(job, functools.partial)}
    if m == 1 or p == 1:
        whats = (
            "the closed-form derivation",
            "the separated-loop derivation",
            *(f"the closed form of the {key.replace('_', ' ')}" for key in after),
        )
        try:
            results, took, reason = symbolic_budget.run_steps(
                _symbolic_stages,
                (design, ctrl, obs, tuple(after.values())),
                whats,
                notes,
                reported=2,
            )
        except StructureError as exc:
            raise StructureError(exc.problem, design.path, exc.key) from exc
        forms, sep_forms = results[0], results[1]
        timings["closed_form"], timings["separated"] = took[0], took[1]
        for key, outcome, what in zip(after, results[2:], whats[2:], strict=True):
            pending[key] = (
                outcome
                if outcome is not None
                else Outcome(error=BudgetExceeded(f"{what} did not run ({reason})"))
            )
    else:
        for key in after:
            del pending[key]

    # ---- structure ----------------------------------------------------------
    ctrb_value = _numeric_structure(A, B)
    obsv_value = _numeric_structure(A.T, C.T).T
    ctrb_cf = forms.controller.structure if forms and forms.controller else None
    obsv_cf = forms.observer.structure.T if forms and forms.observer else None
    controllability = _structure(
        "controllability",
        ctrb_cf,
        forms.controllability_determinant if forms else None,
        ctrb_value,
        n,
    )
    observability = _structure(
        "observability", obsv_cf, forms.observability_determinant if forms else None, obsv_value, n
    )
    for rep in (controllability, observability):
        exact_zero = False
        if rep.determinant is not None:
            at_values = rep.determinant.xreplace(values)
            if at_values.is_Rational:
                exact_zero = at_values == 0
            else:  # algebraic numbers: 60 significant digits decide
                exact_zero = abs(complex(sp.N(at_values, 60))) < 1e-45
        if not exact_zero and not rep.full_rank and rep.determinant is not None:
            # the exact determinant is not zero: the plant is controllable (observable),
            # but not in double precision; refuse without calling it uncontrollable
            with np.errstate(all="ignore"):
                cond = (
                    float(np.linalg.cond(rep.value)) if np.all(np.isfinite(rep.value)) else math.inf
                )
            raise StructureError(
                f"the plant is {rep.adjective.removeprefix('un')} in exact arithmetic (det of the"
                f" {rep.kind} matrix = {complex(sp.N(at_values, 6)).real:.3e} at the evaluated"
                f" values, not zero), but numerically it is not: the {rep.kind} matrix has"
                f" condition number {cond:.1e}, beyond what double precision resolves"
                " (numeric rank"
                f" {rep.numeric_rank} of {n}); rescale the states (other units) so that its"
                " entries are of similar size",
                design.path,
                "plant",
            )
        if exact_zero or not rep.full_rank:
            where = (
                f" (the plant is {rep.adjective} where {'; '.join(rep.conditions)})"
                if rep.conditions
                else ""
            )
            raise StructureError(
                f"the plant is {rep.adjective} at the evaluated parameter values"
                f" ({_values_text(design)}): {rep.kind} matrix rank {rep.numeric_rank} of {n}{where}",
                design.path,
                "plant",
            )
        if rep.condition_number > ILL_CONDITIONED:
            notes.append(
                f"the {rep.kind} matrix is ill-conditioned (condition number"
                f" {rep.condition_number:.2e}): the gains are sensitive to the model"
            )

    # ---- gains --------------------------------------------------------------
    try:
        K = _gain("K", forms.controller if forms else None, A, B, ctrl, values, notes, checks)
        Lt = _gain("L", forms.observer if forms else None, A.T, C.T, obs, values, notes, checks)
    except StructureError as exc:
        if exc.path is not None:
            raise
        raise StructureError(exc.problem, design.path, exc.key) from exc
    L = GainResult(
        name="L",
        value=Lt.value.T.copy(),
        closed_form=Lt.closed_form.T if Lt.closed_form is not None else None,
        method=Lt.method + " on the dual pair (Aᵀ, Cᵀ)",
        unique=Lt.unique,
        steps=Lt.steps,
        charpoly=forms.observer_charpoly if forms else None,
    )
    K = GainResult(
        K.name,
        K.value,
        K.closed_form,
        K.method,
        K.unique,
        K.steps,
        forms.controller_charpoly if forms else None,
    )
    if forms is not None:
        for label, ok in (
            (
                "det(sI − (A − BK)) equals the desired controller polynomial identically (exact, symbolic)",
                forms.controller_identity_holds,
            ),
            (
                "det(sI − (A − LC)) equals the desired observer polynomial identically (exact, symbolic)",
                forms.observer_identity_holds,
            ),
        ):
            if ok is not None:
                checks.append(Check(label, None, None, bool(ok)))

    # ---- numeric eigenvalue / polynomial checks ----------------------------------
    Acl = A - B @ K.value
    Aobs = A - L.value @ C
    for label, M, choice, (F, G) in (
        ("A − BK", Acl, ctrl, (B, K.value)),
        ("A − LC", Aobs, obs, (L.value, C)),
    ):
        check = eigenvalue_check(
            f"eigenvalues of {label} vs requested poles (relative)",
            M,
            choice.values,
            terms=(A, (F, G)),
            weights=np.abs(A) + np.abs(F) @ np.abs(G),
        )
        checks.append(check)
        if not check.passed:
            notes.append(
                f"the eigenvalues of {label} miss the requested poles by {check.value:.1e}"
                " (relative) even when computed in 50-digit arithmetic from the same matrix,"
                " beyond what rounding its entries to double precision explains; its"
                f" eigenvector matrix has condition number {eigenvector_condition(M):.1e}:"
                " the design is numerically fragile: consider slower or less"
                " clustered poles, or a better-scaled model"
            )
        coeffs = [complex(c).real for c in choice.coefficients]
        pres = polynomial_residual(M, coeffs)
        checks.append(
            Check(
                f"characteristic polynomial of {label} vs desired (relative, coefficients)",
                pres,
                POLYNOMIAL_TOLERANCE,
                pres <= POLYNOMIAL_TOLERANCE,
            )
        )

    # ---- separated loop ----------------------------------------------------
    BK = B @ K.value
    sep_value = np.block([[Acl, BK], [np.zeros((n, n)), Aobs]])
    sep_poles = np.linalg.eigvals(sep_value)
    union = np.concatenate([ctrl.values, obs.values])
    checks.append(
        eigenvalue_check(
            "eigenvalues of the 2n separated loop vs controller ∪ observer poles",
            sep_value,
            union,
            terms=(A, (B, K.value), (B, K.value), (L.value, C)),
            achieved=sep_poles,
        )
    )
    if sep_forms is not None:
        checks.append(
            Check(
                "separated loop: det(sI − M) = α_c(s)·α_o(s) identically (exact, symbolic)",
                None,
                None,
                bool(sep_forms.factors_as_expected),
            )
        )
    separated = SeparatedLoop(
        value=sep_value,
        closed_form=sep_forms.matrix if sep_forms else None,
        charpoly=sep_forms.charpoly if sep_forms else None,
        factors_as_expected=sep_forms.factors_as_expected if sep_forms else None,
        poles=sep_poles,
    )

    # ---- reference gain ---------------------------------------------------------
    reference = _reference_gain(design, forms, A, B, C, D, K.value, values, checks, notes)

    # ---- compensator --------------------------------------------------------------
    compensator = _compensator(A, B, C, D, K.value, L.value, sep_forms, values, checks)

    # ---- observer speed note ----------------------------------------------------
    slow_c = min(abs(complex(z).real) for z in ctrl.values)
    slow_o = min(abs(complex(z).real) for z in obs.values)
    if slow_o < 2 * slow_c:
        notes.append(
            f"the slowest observer pole decays only {slow_o / slow_c:.2g} times as fast as the"
            " slowest controller pole; estimation errors will show in the response (common"
            " practice, no source: make the observer 2 to 6 times faster)"
        )
    if not K.unique:
        notes.append("several inputs: K is one of many gains that place these poles (not unique)")
    if not L.unique:
        notes.append("several outputs: L is one of many gains that place these poles (not unique)")
    timings["total"] = time.perf_counter() - t0
    result = Derivation(
        design=design,
        plant=num,
        controller_poles=ctrl,
        observer_poles=obs,
        controllability=controllability,
        observability=observability,
        K=K,
        L=L,
        reference=reference,
        separated=separated,
        compensator=compensator,
        checks=tuple(checks),
        notes=tuple(notes),
        closed_form=forms is not None and (m == 1 or p == 1),
        plant_charpoly=forms.plant_charpoly if forms else None,
        timings=timings,
    )
    return result


def _extensions(d: Derivation, budget: float | None, pending: dict) -> Derivation:
    """Integral action, reduced-order observer and digital controller, when the design asks.

    Their checks and notes join the derivation's (their warnings are carried as notes).
    """
    design = d.design
    if not (
        design.tracking.method == "integral"
        or design.observer.kind == "reduced"
        or design.discrete is not None
    ):
        return d
    from .digital import digital_controller  # these modules build on a finished Derivation
    from .integral import integral_action
    from .reduced import reduced_observer

    extra: dict = {}
    t = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GainsmithWarning)
        if design.tracking.method == "integral":
            extra["integral"] = integral_action(d, budget=budget, pending=pending.get("integral"))
        if design.observer.kind == "reduced":
            extra["reduced_observer"] = reduced_observer(
                d, budget=budget, pending=pending.get("reduced_observer")
            )
        if design.discrete is not None:
            extra["discrete"] = digital_controller(
                d, budget=budget, pending=pending.get("discrete")
            )
    d.timings["extensions"] = time.perf_counter() - t
    parts = list(extra.values())
    return dataclasses.replace(
        d,
        checks=d.checks + tuple(c for x in parts for c in x.checks),
        notes=d.notes + tuple(n for x in parts for n in x.notes),
        **extra,
    )


def _gain(
    name: str,
    steps: cf.AckermannSteps | None,
    A: np.ndarray,
    B: np.ndarray,
    choice: PoleChoice,
    values: dict,
    notes: list[str],
    checks: list[Check],
) -> GainResult:
    """Numeric value of K (or Lᵀ on the dual pair) and its cross-check against SciPy."""
    poles = choice.values
    single = B.shape[1] == 1
    label = "K" if name == "K" else "Lᵀ (dual pair)"
    reference, how = scipy_placement(A, B, poles)
    if steps is not None:
        value = evaluate_matrix(steps.gain, values)
        method = "Ackermann's formula, closed form"
        closed = steps.gain
    elif single:
        value = numeric_ackermann(A, B, poles)
        method = "Ackermann's formula, floating point (closed form over budget)"
        closed = None
    else:
        if reference is None:
            raise StructureError(
                f"cannot place the {'controller' if name == 'K' else 'observer'} poles: {how}",
                key="controller.poles" if name == "K" else "observer.poles",
            )
        value = reference
        method = "scipy.signal.place_poles (numeric; several inputs, so not unique)"
        closed = None
    if single:
        if reference is not None:
            diff = relative_difference(value, reference)
            tolerance = gain_tolerance(reference, numeric_ackermann(A, B, poles))
            checks.append(
                Check(
                    f"{label}: {method.split(',')[0]} vs scipy.signal.place_poles (relative)",
                    diff,
                    tolerance,
                    diff <= tolerance,
                )
            )
        else:
            checks.append(Check(f"{label}: vs scipy.signal.place_poles", None, None, None, how))
            notes.append(f"{label}: {how}; the eigenvalue checks below are the reference")
            if closed is not None:
                alt = numeric_ackermann(A, B, poles)
                diff = relative_difference(value, alt)
                checks.append(
                    Check(
                        f"{label}: closed form vs floating-point Ackermann (relative)",
                        diff,
                        GAIN_TOLERANCE,
                        diff <= GAIN_TOLERANCE,
                    )
                )
    return GainResult(name, value, closed, method, single, steps)


def gain_tolerance(reference: np.ndarray, other: np.ndarray) -> float:
    """Tolerance of a gain comparison with SciPy: GAIN_TOLERANCE, or wider on a hard plant.

    Two floating-point methods (``place_poles`` and Ackermann's formula in floating
    point) disagree with each other by about the rounding error that the plant's
    conditioning allows; a closed form that is off by more than ten times that
    spread (and more than GAIN_TOLERANCE) fails.  On a well-conditioned plant the
    spread is near 1e-15 and GAIN_TOLERANCE decides; on a plant whose controllability
    matrix has condition number 1e12 it is about 1e-7 (TECH-NOTES; measured in
    tests/test_hard_plants.py).
    """
    spread = relative_difference(other, reference)
    return max(GAIN_TOLERANCE, 10.0 * spread) if math.isfinite(spread) else GAIN_TOLERANCE


def _reference_gain(
    design: Design,
    forms: cf.ClosedForms | None,
    A,
    B,
    C,
    D,
    K,
    values,
    checks: list[Check],
    notes: list[str],
) -> ReferenceGainResult | None:
    """N with unit DC gain from r to the tracked output (zero steady-state step error)."""
    idx = design.tracking.output
    signal = design.plant.outputs[idx]
    Ct, Dt = C[idx : idx + 1, :], D[idx : idx + 1, :]
    Acl = A - B @ K
    # DC gain of the closed loop from u_ff to y: (Ct − Dt K)(−Acl)⁻¹B + Dt
    try:
        X = np.linalg.solve(-Acl, B)
        M = (Ct - Dt @ K) @ X + Dt
        # scale of the terms that make up the DC gain: a zero at s = 0 cancels them exactly,
        # fast poles merely make them small (a relative test, not an absolute one)
        scale = np.linalg.norm(Ct - Dt @ K) * np.linalg.norm(X) + np.linalg.norm(Dt)
    except np.linalg.LinAlgError:
        M = np.full((1, B.shape[1]), np.nan)
        scale = 1.0
    zero_at_origin = not np.all(np.isfinite(M)) or np.linalg.norm(M) <= 1e-10 * scale
    if forms is not None and forms.zero_polynomial is not None:
        z0 = forms.zero_polynomial[-1].xreplace(values)  # exact at the evaluated values
        if z0.is_Rational:
            zero_at_origin = z0 == 0
    if zero_at_origin:
        notes.append(
            f"no reference gain exists for output '{signal.name}': the plant has a zero at s = 0"
            " (its steady-state gain is zero); use integral action instead"
        )
        return None
    N_numeric = M.T / (M @ M.T).item()  # least-norm solution of M N = 1; exact for one input
    closed = forms.reference_gain if forms is not None else None
    zero_poly = forms.zero_polynomial if forms is not None else None
    if closed is not None:
        value = np.array([[float(sp.N(closed.xreplace(values), 30))]])
        diff = relative_difference(value, N_numeric)
        checks.append(
            Check(
                "reference gain: closed form vs numeric DC-gain inverse (relative)",
                diff,
                GAIN_TOLERANCE,
                diff <= GAIN_TOLERANCE,
            )
        )
        method = "N = α_c(0)/z(0), closed form"
    else:
        value = N_numeric
        method = "N = 1/(DC gain of the closed loop), numeric" + (
            " (least-norm: several inputs, not unique)" if B.shape[1] > 1 else ""
        )
    dc = (((Ct - Dt @ K) @ np.linalg.solve(-Acl, B) + Dt) @ value).item()
    checks.append(
        Check(
            f"steady-state gain from r to {signal.name} equals 1",
            abs(dc - 1.0),
            GAIN_TOLERANCE,
            abs(dc - 1.0) <= GAIN_TOLERANCE,
        )
    )
    return ReferenceGainResult(value, closed, zero_poly, signal, idx, method)


def _compensator(A, B, C, D, K, L, sep_forms, values, checks) -> CompensatorResult | None:
    F = A - B @ K - L @ C + L @ D @ K
    if B.shape[1] != 1 or C.shape[0] != 1:
        return CompensatorResult(None, None, None, None, F)
    # independent numeric transfer function of u/y = −K (sI − F)⁻¹ L
    num, den = transfer_function(F, L, K, np.zeros((1, 1)))
    num_cf = den_cf = None
    if sep_forms is not None and sep_forms.compensator_numerator is not None:
        num_cf = sep_forms.compensator_numerator
        den_cf = sep_forms.compensator_denominator
        n_val = np.array([float(sp.N(c.xreplace(values), 30)) for c in num_cf])
        d_val = np.array([float(sp.N(c.xreplace(values), 30)) for c in den_cf])
        diff = frequency_response_difference(n_val, d_val, F, L, K)
        checks.append(
            Check(
                "compensator transfer function: closed form vs K(sI − F)⁻¹L at"
                f" {len(_check_frequencies(F))} frequencies (relative)",
                diff,
                COMPENSATOR_TOLERANCE,
                diff <= COMPENSATOR_TOLERANCE,
            )
        )
    return CompensatorResult(num, den, num_cf, den_cf, F)


def _check_frequencies(F: np.ndarray) -> np.ndarray:
    """Frequencies (rad/s) spanning the compensator's poles: a decade beyond each end."""
    mags = np.abs(np.linalg.eigvals(F))
    mags = mags[np.isfinite(mags) & (mags > 0)]
    low, high = (mags.min(), mags.max()) if mags.size else (1.0, 1.0)
    return np.logspace(np.log10(low) - 1.0, np.log10(high) + 1.0, 9)


def frequency_response_difference(
    num: np.ndarray, den: np.ndarray, F: np.ndarray, L: np.ndarray, K: np.ndarray
) -> float:
    """Largest relative difference between num/den and K(sI − F)⁻¹L on the imaginary axis.

    Coefficients of a transfer function can be ill-conditioned where the model is
    stiff (a relative coefficient comparison then fails a correct formula); its
    values along s = jω are what the loop sees.  The reference is a linear solve
    per frequency, independent of any polynomial.  Differences are relative to
    max(|reference|, 1e-9 × the largest |reference|), so a notch does not divide by
    zero.
    """
    n = F.shape[0]
    points = 1j * _check_frequencies(F)
    ref = np.array([(K @ np.linalg.solve(z * np.eye(n) - F, L)).item() for z in points])
    got = np.polyval(num, points) / np.polyval(den, points)
    peak = np.abs(ref).max()
    if not np.isfinite(peak) or peak == 0.0:  # a zero compensator (K or L is zero): absolute
        return float(np.max(np.abs(got - ref)))
    scale = np.maximum(np.abs(ref), 1e-9 * peak)
    return float(np.max(np.abs(got - ref) / scale))
