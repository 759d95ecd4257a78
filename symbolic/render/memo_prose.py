"""Prose of our own code (source notes, check names, rules, remarks) as pieces a template
typesets: plain text, math and code names.

The analysis and derivation layers write their explanations as plain text, with formulas in
ASCII (``T_s = 4/(zeta*omega_n)``) and names with underscores (``observer.speed_factor``).
:func:`prose` cuts such a text into pieces, ``{"text": ...}``, ``{"math": OwnMath}`` and
``{"code": [parts]}``, which the memo templates print with their ``say`` macro (text
escaped as any string, math in ``$...$``, code in typewriter type with a break point after
each ``.``, ``_`` and ``/``).  Nothing here parses a formula: a formula is typeset only when
it is a key of :data:`FORMULAS`, the LaTeX beside each plain formula our own code writes; a
single symbol with a short subscript (``k_i``, ``L_p``, ``x_hat``, ``α_c``) is set as math;
a design-file key, a parameter or signal name, a dotted name or a path is code.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable

from .mathvalues import own_math
from .texsafe import LATEX_COMMANDS

__all__ = [
    "DESIGN_KEYS",
    "FORMULAS",
    "PROSE_PATHS",
    "code_words",
    "prose",
    "symbol_math",
    "typeset_prose",
]

#: Plain formulas written by the derivation and analysis layers (keys, exactly as written
#: there) and their LaTeX, for math mode.
FORMULAS: dict[str, str] = {
    # symbolic/derivation/dominant.py: sources of the specification formulas
    "M_p = exp(-pi*zeta/sqrt(1-zeta^2))": r"M_p = e^{-\pi\zeta/\sqrt{1-\zeta^2}}",
    "T_s = 4/(zeta*omega_n)": r"T_s = 4/(\zeta\omega_n)",
    "t_s = 4.6/sigma": r"t_s = 4.6/\sigma",
    "T_p = pi/omega_d": r"T_p = \pi/\omega_d",
    "t_p = pi/omega_d": r"t_p = \pi/\omega_d",
    "solved for zeta": r"\text{solved for } \zeta",
    "cubic fit in zeta": r"\text{cubic fit in } \zeta",
    # symbolic/render/robust_memo.py: the margins' definitions
    "20 log10(k_high)": r"20\log_{10} k_{\mathrm{high}}",
    "log10(1 + |L|)": r"\log_{10}(1 + |L|)",
    # symbolic/render/study_memo.py: the pole-map caption of a digital controller
    "exp(sT)": r"e^{sT}",
    "20 log10(1/k_low)": r"20\log_{10}(1/k_{\mathrm{low}})",
    "arg L(jω_c) + 180°": r"\arg L(j\omega_c) + 180^\circ",
    "min((arg L(jω_c) + π) mod 2π)/ω_c": (
        r"\min\bigl((\arg L(j\omega_c) + \pi) \bmod 2\pi\bigr)/\omega_c"
    ),
    "(encirclements of −1 = open-loop unstable poles)": (
        r"(\text{encirclements of } {-1} = \text{open-loop unstable poles})"
    ),
    # symbolic/analysis/sensitivity.py: how the sensitivities were computed
    "(p/g)·∂g/∂p": r"(p/g)\,\partial g/\partial p",
    # symbolic/derivation/checks.py and the extensions: names of the checks
    "det(sI − (A − BK))": r"\det\bigl(sI - (A - BK)\bigr)",
    "det(sI − (A − LC))": r"\det\bigl(sI - (A - LC)\bigr)",
    "det(sI − M) = α_c(s)·α_o(s)": r"\det(sI - M) = \alpha_c(s)\,\alpha_o(s)",
    "det(sI − M) of the (2n − p) loop = α_c(s)·α_ro(s)": (
        r"\det(sI - M) \text{ of the } (2n - p) \text{ loop} = \alpha_c(s)\,\alpha_{ro}(s)"
    ),
    "det(sI − (A_a − B_a[K, k_i]))": r"\det\bigl(sI - (A_a - B_a[K\;\,k_i])\bigr)",
    "A_a − B_a[K, k_i]": r"A_a - B_a[K\;\,k_i]",
    "[K, k_i]": r"[K\;\,k_i]",
    "(A_a, B_a)": r"(A_a, B_a)",
    "A − BK": "A - BK",
    "A − LC": "A - LC",
    "A_bb − Ke A_ab": r"A_{bb} - K_e A_{ab}",
    "Ke": "K_e",
    "expm of [[A, B], [0, 0]]·T": (
        r"\exp\left(\begin{bmatrix} A & B \\ 0 & 0 \end{bmatrix} T\right)"
    ),
    "e^(sT)": "e^{sT}",
    "Φ − ΓK": r"\Phi - \Gamma K",
    "Φ − L_p C": r"\Phi - L_p C",
    "Φ L_c = L_p": r"\Phi L_c = L_p",
    "(Φ_a, Γ_a)": r"(\Phi_a, \Gamma_a)",
    "Φ_a − Γ_a[K, k_i]": r"\Phi_a - \Gamma_a[K\;\,k_i]",
    "(Φ_bbᵀ, Φ_abᵀ)": r"(\Phi_{bb}^{\mathsf T}, \Phi_{ab}^{\mathsf T})",
    "Φ_bb − L_r Φ_ab": r"\Phi_{bb} - L_r \Phi_{ab}",
    "Φ, Γ": r"\Phi, \Gamma",
    "2n": "2n",
    # symbolic/analysis/routh.py and mismatch.py
    "A_t − B_t K": r"A_t - B_t K",
    "Re(s)": r"\mathrm{Re}(s)",
    # symbolic/derivation/integral*.py and the digital forms
    "x_I' = y - r": r"\dot x_I = y - r",
    "xi' = r - y": r"\dot\xi = r - y",
    "u = -K x - k_i x_I": r"u = -K x - k_i x_I",
    "u = -K x + k_I xi": r"u = -K x + k_I \xi",
    "x_I' = (y - r) + (u_demanded - u_applied)/(k_i T_t)": (
        r"\dot x_I = (y - r) + (u_{\mathrm{demanded}} - u_{\mathrm{applied}})/(k_i T_t)"
    ),
    "T^-1": "T^{-1}",
    "n - p": "n - p",
    "2n - p": "2n - p",
    # symbolic/derivation/reduced.py (after symbolic.render.memo_math.plain_text)
    "x_hat_a = y_bar, x_hat_b = η + Ke y_bar": (
        r"\hat x_a = \bar y,\; \hat x_b = \eta + K_e \bar y"
    ),
    "u = … - K T^-1D_hat y_bar": r"u = \dots - K T^{-1} \hat D \bar y",
    # symbolic/analysis/verdict.py
    "z = e^{sT}": "z = e^{sT}",
}

#: Design-file keys that the memo's prose may name; they are set as code.
DESIGN_KEYS = frozenset(
    "u_max initial_state initial_estimate overshoot_percent settling_time settling_band"
    " rise_time peak_time speed_factor reference_gain sample_time integral_pole"
    " remaining_pole_factor remaining_poles reduced_poles symbolic_budget_seconds".split()
)

_FORMULA_PATTERN = re.compile(
    r"(?<!\w)(?:"
    + "|".join(re.escape(k) for k in sorted(FORMULAS, key=len, reverse=True))
    + r")(?!\w)"
)
# A name: letters, digits, underscores, dots and slashes, optionally in [brackets], with
# Unicode letters (Greek) allowed; a trailing ᵀ or ' belongs to it.
_TOKEN = re.compile(r"\[?(?<![\w.])[^\W\d][\w./]*[\wᵀ']\]?")


def _greek(char: str) -> str | None:
    """``\\alpha`` for α, ``\\Phi`` for Φ, None for any other character (and for the Greek
    capitals without a LaTeX command of their own, such as Α)."""
    if not unicodedata.name(char, "").startswith("GREEK"):
        return None
    m = re.fullmatch(r"\\ensuremath\{(\\[A-Za-z]+)\}", LATEX_COMMANDS.get(char, ""))
    return m.group(1) if m else None


def symbol_math(token: str) -> str | None:
    """LaTeX of one symbol with short subscripts (``k_i``, ``x_hat``, ``Φ_bb``, ``L_pᵀ``),
    or None when `token` is not such a symbol."""
    transpose = token.endswith("ᵀ")
    core = token.rstrip("ᵀ")
    parts = core.split("_")
    if len(parts) < 2 or len(parts[0]) != 1 or not all(parts[1:]):
        return None
    base = parts[0]
    if base.isascii():
        if not base.isalpha():
            return None
    else:
        base = _greek(base)
        if base is None:
            return None
    subs = []
    for part in parts[1:]:
        if part in ("hat", "bar"):
            base = f"\\{part}{{{base}}}"
        elif len(part) <= 3 and part.isascii() and part.isalnum():
            subs.append(part if len(part) == 1 or part.isdigit() else part)
        else:
            return None
    latex = base + (f"_{{{','.join(subs)}}}" if subs else "")
    return latex + ("^{\\mathsf T}" if transpose else "")


def code_words(design) -> frozenset[str]:
    """The names of a design that prose sets as code: its parameters and signals, and the
    design-file keys of :data:`DESIGN_KEYS`."""
    plant = design.plant
    signals = (s.name for group in (plant.states, plant.inputs, plant.outputs) for s in group)
    return DESIGN_KEYS | {p.name for p in design.parameters} | set(signals)


def _code_parts(token: str) -> list[str]:
    """The name cut after each ``.``, ``_`` and ``/`` (where a line may break)."""
    return [p for p in re.split(r"(?<=[._/])", token) if p]


def _is_code(token: str, names: Iterable[str]) -> bool:
    bare = token.strip("[]")
    if bare in names:
        return True
    if "/" in bare:
        return "." in bare or "_" in bare
    if "." in bare:
        return all(len(seg) >= 2 for seg in bare.split("."))
    return "_" in bare


def _pieces_of_text(text: str, names: frozenset[str]) -> list[dict]:
    pieces: list[dict] = []
    position = 0
    for m in _TOKEN.finditer(text):
        token, start = m.group(), m.start()
        if token.startswith("[") and not token.endswith("]"):
            token, start = token[1:], start + 1  # an opening bracket, not a table name
        elif token.endswith("]") and not token.startswith("["):
            token = token[:-1]
        while token and token[-1] in ".'" and not _is_code(token, names):
            token = token[:-1]  # a full stop or a quote after a word is not part of it
        if not token:
            continue
        math = None if token.strip("[]") in names else symbol_math(token)
        kind = "math" if math is not None else ("code" if _is_code(token, names) else None)
        if kind is None:
            continue
        if start > position:
            pieces.append({"text": text[position:start]})
        if kind == "math":
            pieces.append({"math": own_math(math)})
        else:
            pieces.append({"code": _code_parts(token)})
        position = start + len(token)
    if position < len(text):
        pieces.append({"text": text[position:]})
    return pieces


#: A number in e-notation (``3.8e-05``, ``9.02e+08``), a negative number (``-150``) or a
#: complex number written ``-60±45j`` / ``-2.5+1j`` in words the derivation or the analysis
#: wrote: typeset as math.
_NUMBER = re.compile(
    r"(?<![\w.])(?P<re>[-−]?\d+(?:\.\d+)?(?:e[-+−]?\d+)?)"
    r"(?:(?P<sign>[±+\-−])(?P<im>\d+(?:\.\d+)?(?:e[-+−]?\d+)?)j)?(?![\w.])"
)


def _number_latex(text: str) -> str:
    """``3.8\\times 10^{-5}`` for ``3.8e-05``; plain digits stay as they are."""
    text = text.replace("−", "-")
    if "e" not in text:
        return text
    mantissa, exponent = text.split("e")
    power = f"10^{{{int(exponent)}}}"
    if mantissa in ("1", "-1"):
        return power if mantissa == "1" else f"-{power}"
    return f"{mantissa} \\times {power}"


def _with_numbers(text: str, names: frozenset[str]) -> list[dict]:
    """Plain text with its e-notation and complex numbers as math, the rest as before."""
    pieces: list[dict] = []
    position = 0
    for m in _NUMBER.finditer(text):
        plain = m.group("sign") is None and "e" not in m.group("re")
        if plain and m.group("re")[0] not in "-−":
            continue  # a plain positive decimal reads well as text (a negative one needs
            # the minus sign of math, not a hyphen)
        pieces += _pieces_of_text(text[position : m.start()], names)
        latex = _number_latex(m.group("re"))
        if m.group("sign") is not None:
            sign = {"±": "\\pm", "+": "+"}.get(m.group("sign"), "-")
            latex = f"{latex} {sign} {_number_latex(m.group('im'))}j"
        pieces.append({"math": own_math(latex)})
        position = m.end()
    return pieces + _pieces_of_text(text[position:], names)


def prose(text: str, names: frozenset[str] = DESIGN_KEYS) -> list[dict]:
    """`text` cut into pieces of plain text, math (:data:`FORMULAS`, symbols) and code.

    Examples
    --------
    >>> [list(p) for p in prose("(2 % settling time T_s = 4/(zeta*omega_n))")]
    [['text'], ['math'], ['text']]
    >>> prose("observer.speed_factor")[0]["code"]
    ['observer.', 'speed_', 'factor']
    """
    pieces: list[dict] = []
    position = 0
    for m in _FORMULA_PATTERN.finditer(text):
        pieces += _with_numbers(text[position : m.start()], names)
        pieces.append({"math": own_math(FORMULAS[m.group()])})
        position = m.end()
    pieces += _with_numbers(text[position:], names)
    return pieces


#: Where prose sits in the memo's template context: dotted paths, ``*`` for every item of a
#: list.  :func:`typeset_prose` turns each string found there into :func:`prose` pieces.
PROSE_PATHS = (
    "specs.*.source",
    "controller_rule",
    "observer_rule",
    "pair.defaults.*",
    "checks.*.name",
    "checks.*.note",
    "notes.*",
    "references.*",
    "requirements.controller",
    "requirements.open_items.*",
    *(f"requirements.changes.*.{k}" for k in ("label", "requested", "achieved", "remedy")),
    *(f"requirements.rows.*.{k}" for k in ("label", "requested", "achieved", "basis", "source")),
    "simulation.method",
    "simulation.remarks.*",
    "simulation.table.*.label",
    "simulation.figures.*.caption",
    "simulation.pole_map_caption",
    "loop_shapes.figures.*.caption",
    "nonlinear.method",
    "nonlinear.reach_method",
    "nonlinear.skipped",
    "nonlinear.steps.*.note",
    "nonlinear.figures.*.caption",
    "simulation.study.text",
    "robustness.margins.definitions",
    "robustness.sensitivity_method",
    "robustness.routh_hurwitz.*",
    "robustness.stability_changes.*",
    "robustness.unstable_points.*",
    "robustness.worst_damping_at",
    "robustness.least_stable_at",
    "robustness.least_stable_pole",
    "robustness.notes.*",
    "robustness.figures.*.caption",
    *(
        f"integral.{k}"
        for k in (
            "convention",
            "conditions.*",
            "pole_rule",
            "disturbance_rule",
            "mismatch_rule",
            "anti_windup_rule",
            "notes.*",
            "figures.*.caption",
            "runs.*.loop",
            "runs.*.plant",
            "windup.*.label",
        )
    ),
    "reduced.pole_rule",
    "reduced.comparison",
    "digital.method",
    "digital.figures.*.caption",
    "digital.comparison.*.label",
    "claims.summary",
    "claims.rows.*.name",
    "claims.rows.*.explanation",
)


def typeset_prose(ctx: dict, names: frozenset[str] = DESIGN_KEYS) -> None:
    """Replace, in place, every plain string at :data:`PROSE_PATHS` by its :func:`prose`
    pieces (trusted strings and missing entries are left as they are)."""
    for path in PROSE_PATHS:
        _apply(ctx, path.split("."), names)


def _apply(node, keys: list[str], names: frozenset[str]) -> None:
    if node is None or not keys:
        return
    head, rest = keys[0], keys[1:]
    if head == "*":
        if isinstance(node, list):
            for i, item in enumerate(node):
                if rest:
                    _apply(item, rest, names)
                elif type(item) is str:
                    node[i] = prose(item, names)
        return
    if not isinstance(node, dict) or head not in node:
        return
    if rest:
        _apply(node[head], rest, names)
    elif type(node[head]) is str:
        node[head] = prose(node[head], names)
