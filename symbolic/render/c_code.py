"""The gain formulas as C99: ``<slug>_gains.h`` and ``<slug>_gains.c``.

One C99 function ``int <slug>_gains(const <slug>_parameters *p, <slug>_gains_out *out)``
with no allocation and no global variables, which checks the validity factors
(:mod:`symbolic.render.gain_formulas`), evaluates K, L and N with common subexpressions
shared, and returns a nonzero code when a condition fails.

References
----------
.. [1] ISO/IEC 9899:1999, *Programming languages - C*, 7.12 (<math.h>: ``isfinite``,
   ``fabs``, ``pow``, ``sqrt``, ``cbrt``).
.. [2] SymPy Development Team, *SymPy 1.14 documentation*, "Code Generation"
   (``sympy.cse``, ``sympy.printing.c.C99CodePrinter``).
"""

from __future__ import annotations

from dataclasses import dataclass

import sympy as sp

from .code_comments import (
    CAUTION,
    c_comment,
    comment_text,
    header_lines,
    real_text,
    validity_lines,
    validity_rule,
    wrap,
)
from .code_printers import CPrinter, c_identifier_prefix, c_member_names
from .gain_formulas import (
    CODE_MEANINGS,
    CODE_NAMES,
    CODE_OK,
    ZERO_TOLERANCE,
    GainFormulas,
    common_subexpressions,
)

__all__ = ["c_sources"]


@dataclass(frozen=True)
class _Names:
    """The C names of one design's generated code."""

    prefix: str  # belt_drive
    up: str  # BELT_DRIVE
    members: dict[str, str]  # parameter name -> struct member
    header: str  # belt_drive_gains.h
    source: str  # belt_drive_gains.c
    params_type: str  # belt_drive_parameters
    out_type: str  # belt_drive_gains_out
    func: str  # belt_drive_gains


def _names(formulas: GainFormulas) -> _Names:
    design = formulas.design
    prefix = c_identifier_prefix(design)
    return _Names(
        prefix=prefix,
        up=prefix.upper(),
        members=c_member_names([p.name for p in design.parameters], prefix),
        header=f"{design.slug}_gains.h",
        source=f"{design.slug}_gains.c",
        params_type=f"{prefix}_parameters",
        out_type=f"{prefix}_gains_out",
        func=f"{prefix}_gains",
    )


def c_sources(formulas: GainFormulas) -> dict[str, bytes]:
    """``<slug>_gains.h`` and ``<slug>_gains.c`` for :func:`symbolic.runtime.publish.publish`.

    Parameters
    ----------
    formulas : GainFormulas

    Returns
    -------
    dict
        File name -> content (ASCII).

    Notes
    -----
    The function checks every validity factor first (nothing is divided by a
    zero factor), then evaluates K, L and N with the common subexpressions of
    all entries shared (``sympy.cse``), into a local struct; ``*out`` is
    written only when every result is finite, so on a nonzero return it is
    left unchanged.  ``isfinite`` is a C99 macro of <math.h>; compiling with
    ``-ffast-math`` or ``-ffinite-math-only`` lets the compiler assume it is
    always true and defeats code 4.
    """
    names = _names(formulas)
    return {
        names.header: "\n".join(_header(formulas, names)).encode("ascii"),
        names.source: "\n".join(_source(formulas, names)).encode("ascii"),
    }


def _block(formulas: GainFormulas, names: _Names, file_name: str) -> str:
    """The comment block at the top of both files."""
    lines = header_lines(formulas, "c", file_name)
    lines.append(f"Return codes of {names.func}() (the smallest that applies is returned):")
    lines.append(f"0  {CODE_MEANINGS[CODE_OK]}: *out holds K, L and N")
    for text in validity_lines(formulas, c=True):
        lines.extend(wrap(text, 92, hanging="   "))
    lines.extend(wrap(validity_rule(), 92))
    lines.append("On a nonzero return *out is left unchanged: do not use it.")
    lines.append("Do not compile with -ffast-math or -ffinite-math-only: they let the")
    lines.append("compiler assume isfinite() is always true.")
    renamed = [f"{k} -> {v}" for k, v in names.members.items() if k != v]
    if renamed:
        lines.append("")
        lines.extend(
            wrap(
                "Parameters renamed in the struct because their names are taken in C: "
                + ", ".join(renamed),
                92,
            )
        )
    lines.append("")
    lines.extend(wrap(CAUTION, 92))
    return c_comment(lines)


def _header(formulas: GainFormulas, names: _Names) -> list[str]:
    """The lines of ``<slug>_gains.h``: sizes, codes, the two structs, the prototype."""
    n, m, pp = formulas.shape
    up = names.up
    guard = f"{up}_GAINS_H"
    h: list[str] = [_block(formulas, names, names.header)]
    h += [f"#ifndef {guard}", f"#define {guard}", ""]
    h += ["#ifdef __cplusplus", 'extern "C" {', "#endif", ""]
    h += [
        f"#define {up}_STATES {n}",
        f"#define {up}_INPUTS {m}",
        f"#define {up}_OUTPUTS {pp}",
        f"#define {up}_PARAMETERS {len(formulas.design.parameters)}",
        f"#define {up}_ZERO_TOLERANCE {ZERO_TOLERANCE!r}",
    ]
    for code, word in CODE_NAMES.items():
        h.append(f"#define {up}_{word} {code}")
    h.append("")
    h += _parameters_struct(formulas, names)
    h.append("")
    h.append("/* The gains: u = -K x_hat + reference_gain * r. */")
    h.append("typedef struct {")
    h.append(f"    double K[{up}_INPUTS][{up}_STATES];  /* state-feedback gain */")
    h.append(f"    double L[{up}_STATES][{up}_OUTPUTS]; /* observer gain */")
    h.append("    double reference_gain;            /* N */")
    for name, M, what in formulas.extra:
        note = f" /* {comment_text(what)} */" if what else ""
        h.append(f"    double {name}[{M.shape[0]}][{M.shape[1]}];{note}")
    h.append(f"}} {names.out_type};")
    h.append("")
    h.append(f"/* Computes K, L and N at the parameter values *p into *out; returns {up}_OK (0) or")
    h.append("   the nonzero code of the first validity condition that fails (see above).")
    h.append("   p and out must point to valid objects; nothing is allocated. */")
    h.append(f"int {names.func}(const {names.params_type} *p, {names.out_type} *out);")
    h += ["", "#ifdef __cplusplus", "}", "#endif", "", f"#endif /* {guard} */", ""]
    return h


def _parameters_struct(formulas: GainFormulas, names: _Names) -> list[str]:
    """The parameters struct, one commented member per parameter."""
    design = formulas.design
    h = ["/* The plant parameters, in the units of the design file. */", "typedef struct {"]
    if not design.parameters:
        h.append("    int unused; /* the design has no parameters */")
    for prm in design.parameters:
        notes = [f"nominal {real_text(float(prm.value))}"]
        if prm.unit:
            notes.insert(0, f"[{comment_text(prm.unit)}]")
        if prm.range is not None:
            notes.append(
                f"range {real_text(float(prm.range[0]))} .. {real_text(float(prm.range[1]))}"
            )
        if prm.description:
            notes.insert(0, comment_text(prm.description))
        h.append(f"    double {names.members[prm.name]}; /* {' '.join(notes)} */")
    h.append(f"}} {names.params_type};")
    return h


def _source(formulas: GainFormulas, names: _Names) -> list[str]:
    """The lines of ``<slug>_gains.c``: validity checks, the formulas, the finite checks."""
    design = formulas.design
    symbol_names: dict[sp.Symbol, str] = {
        prm.symbol: f"p->{names.members[prm.name]}" for prm in design.parameters
    }
    entries = formulas.entries()
    reps, reduced = common_subexpressions(entries)
    for i, (t, _e) in enumerate(reps):
        symbol_names[t] = f"t{i}"
    printer = CPrinter(symbol_names)
    used_symbols: set[sp.Symbol] = set()
    for e in entries:
        used_symbols |= e.free_symbols
    for f in formulas.factors:
        used_symbols |= f.factor.free_symbols

    c: list[str] = [_block(formulas, names, names.source)]
    c += ["#include <math.h>", "", f'#include "{names.header}"', ""]
    c.append(f"int {names.func}(const {names.params_type} *p, {names.out_type} *out)")
    c.append("{")
    c.append(f"    {names.out_type} r;")
    c.append("    int i, j;")
    if not any(s in used_symbols for s in (prm.symbol for prm in design.parameters)):
        c.append("    (void)p;")
    c.append("")
    c += _validity_checks(formulas, names.up, printer)
    c.append("    /* Common subexpressions of every entry of K, L and N (sympy.cse). */")
    for i, (_t, e) in enumerate(reps):
        c.append(f"    const double t{i} = {printer.doprint(e)};")
    n, m, pp = formulas.shape
    targets = [f"r.K[{i}][{j}]" for i in range(m) for j in range(n)]
    targets += [f"r.L[{i}][{j}]" for i in range(n) for j in range(pp)]
    targets.append("r.reference_gain")
    for name, M, _what in formulas.extra:
        targets += [f"r.{name}[{i}][{j}]" for i in range(M.shape[0]) for j in range(M.shape[1])]
    for target, e in zip(targets, reduced, strict=True):
        c.append(f"    {target} = {printer.doprint(e)};")
    c.append("")
    c += _finite_checks(formulas, names.up)
    c.append("    *out = r;")
    c.append(f"    return {names.up}_OK;")
    c.append("}")
    c.append("")
    return c


def _validity_checks(formulas: GainFormulas, up: str, printer: CPrinter) -> list[str]:
    """One ``if`` per validity factor, returning its code when the factor counts as zero."""
    c: list[str] = []
    if formulas.factors:
        c.append(
            "    /* Validity: a factor that must not vanish counts as zero when |f| <="
            f" {up}_ZERO_TOLERANCE * (sum of |terms of f|). */"
        )
    for f in formulas.factors:
        c.append(f"    /* {comment_text(f.condition)}: {comment_text(f.origin)} */")
        c.append(
            f"    if (fabs({printer.doprint(f.factor)}) <= {up}_ZERO_TOLERANCE *"
            f" ({printer.doprint(f.scale)})) {{"
        )
        c.append(f"        return {up}_{CODE_NAMES[f.code]};")
        c.append("    }")
    if formulas.factors:
        c.append("")
    return c


def _finite_checks(formulas: GainFormulas, up: str) -> list[str]:
    """Every result must be finite, or the function returns code 4 with *out untouched."""
    c = ["    /* Every result must be finite. */"]
    c.append(f"    if (!isfinite(r.reference_gain)) {{\n        return {up}_NOT_FINITE;\n    }}")
    c.append(f"    for (i = 0; i < {up}_INPUTS; ++i) {{")
    c.append(f"        for (j = 0; j < {up}_STATES; ++j) {{")
    c.append(f"            if (!isfinite(r.K[i][j])) {{\n                return {up}_NOT_FINITE;")
    c.append("            }\n        }\n    }")
    c.append(f"    for (i = 0; i < {up}_STATES; ++i) {{")
    c.append(f"        for (j = 0; j < {up}_OUTPUTS; ++j) {{")
    c.append(f"            if (!isfinite(r.L[i][j])) {{\n                return {up}_NOT_FINITE;")
    c.append("            }\n        }\n    }")
    for name, M, _what in formulas.extra:
        c.append(f"    for (i = 0; i < {M.shape[0]}; ++i) {{")
        c.append(f"        for (j = 0; j < {M.shape[1]}; ++j) {{")
        c.append(
            f"            if (!isfinite(r.{name}[i][j])) {{\n                return {up}_NOT_FINITE;"
        )
        c.append("            }\n        }\n    }")
    return c
