"""The gain formulas as a standalone Python module: ``<slug>_gains.py``.

The module imports only NumPy (and the standard ``warnings``) and exposes
``gains(**parameters)``, broadcasting over arrays; where a validity condition
(:mod:`symbolic.render.gain_formulas`) fails, the gains are NaN and one
``RuntimeWarning`` says how many points failed and why.

References
----------
.. [1] SymPy Development Team, *SymPy 1.14 documentation*, "Code Generation"
   (``sympy.cse``, ``sympy.printing.numpy.NumPyPrinter``).
"""

from __future__ import annotations

from ..model.design import Design
from ..runtime.version import __version__
from .code_comments import CAUTION, comment_text, header_lines, validity_lines, validity_rule, wrap
from .code_printers import PythonPrinter, python_local_names
from .gain_formulas import (
    CODE_MEANINGS,
    CODE_NO_REFERENCE_GAIN,
    CODE_NOT_FINITE,
    CODE_UNCONTROLLABLE,
    CODE_UNOBSERVABLE,
    ZERO_TOLERANCE,
    GainFormulas,
    common_subexpressions,
)

__all__ = ["python_source"]


def python_source(formulas: GainFormulas) -> dict[str, bytes]:
    """``<slug>_gains.py``: a standalone module (NumPy only) with ``gains(**parameters)``.

    Parameters
    ----------
    formulas : GainFormulas

    Returns
    -------
    dict
        File name -> content (ASCII).

    Notes
    -----
    ``gains`` broadcasts its arguments (``numpy.broadcast_arrays``) and returns
    ``{"K": (..., m, n), "L": (..., n, p), "reference_gain": (...)}``.  Where a
    validity condition fails the gains are NaN and one ``RuntimeWarning`` says
    how many points failed and why.  The source is printed with
    ``sympy.printing.numpy.NumPyPrinter`` after ``sympy.cse`` over every entry.
    """
    design = formulas.design
    file_name = f"{design.slug}_gains.py"
    out: list[str] = [
        '"""' + "\n".join(_docstring(formulas, file_name)).replace("\\", "/") + '\n"""',
        "",
    ]
    out += ["import warnings", "", "import numpy", ""]
    out.append(
        '__all__ = ["gains", "PARAMETERS", "UNITS", "NOMINAL", "RANGES", "CONTROLLER_POLES",'
        ' "OBSERVER_POLES", "ZERO_TOLERANCE", "VALIDITY", "DESIGN_SHA256", "GAINSMITH_VERSION"]'
    )
    out.append("")
    out += _constants(formulas)
    out.append("")
    out.append("")
    out += _gains_function(formulas)
    out.append("")
    return {file_name: "\n".join(out).encode("ascii")}


def _docstring(formulas: GainFormulas, file_name: str) -> list[str]:
    """The module docstring's lines: the common header, usage, validity, the caution."""
    doc = header_lines(formulas, "python", file_name)
    doc += [
        "Usage::",
        "",
        f"    from {formulas.design.slug.replace('-', '_')}_gains import gains, NOMINAL",
        "    g = gains(**NOMINAL)            # g['K'], g['L'], g['reference_gain']",
        "",
        "Every argument may be a NumPy array; the arguments are broadcast together and",
        "the gains get the broadcast shape in front: K (..., m, n), L (..., n, p),",
        "reference_gain (...).",
        "",
        "Validity (see VALIDITY): where a condition fails the gains are NaN and a",
        "RuntimeWarning is issued.",
        "",
    ]
    doc += wrap(CAUTION, 88)
    return doc


def _constants(formulas: GainFormulas) -> list[str]:
    """The module-level constants: version, hash, parameters, poles, validity in words."""
    design: Design = formulas.design
    names = [p.name for p in design.parameters]
    validity = [*validity_lines(formulas, c=False), validity_rule()]
    validity_text = "\n".join(line for item in validity for line in wrap(item, 88) + [""]).rstrip()
    out = [f"GAINSMITH_VERSION = {__version__!a}", f"DESIGN_SHA256 = {design.sha256!a}"]
    out.append(f"#: The parameter names, in the order of the design file ({len(names)}).")
    out.append(f"PARAMETERS = {tuple(names)!a}")
    out.append(f"UNITS = { ({p.name: p.unit for p in design.parameters})!a}")
    out.append(
        "NOMINAL = {"
        + ", ".join(f"{p.name!a}: {float(p.value)!r}" for p in design.parameters)
        + "}"
    )
    out.append(
        "RANGES = {"
        + ", ".join(
            f"{p.name!a}: ({float(p.range[0])!r}, {float(p.range[1])!r})"
            for p in design.parameters
            if p.range is not None
        )
        + "}"
    )
    out.append(
        "CONTROLLER_POLES = ("
        + "".join(f"{complex(z)!r}, " for z in formulas.controller_poles)
        + ")"
    )
    out.append(
        "OBSERVER_POLES = (" + "".join(f"{complex(z)!r}, " for z in formulas.observer_poles) + ")"
    )
    out.append(f"ZERO_TOLERANCE = {ZERO_TOLERANCE!r}")
    out.append('VALIDITY = """\\')
    out.append(validity_text.replace("\\", "/"))
    out.append('"""')
    return out


def _gains_function(formulas: GainFormulas) -> list[str]:
    """``def gains(**parameters)``: checks, the formulas, NaN and a warning where invalid."""
    out = ["def gains(**parameters):"]
    out.append('    """K, L and the reference gain N at the given parameter values.')
    out.append("")
    out.append("    Every parameter is required (see PARAMETERS; NOMINAL has the design's values).")
    out.append("    Returns a dict with 'K' (..., m, n), 'L' (..., n, p), 'reference_gain' (...),")
    out.append("    where ... is the broadcast shape of the arguments; u = -K x_hat + N r.")
    out.append("    Raises ValueError for a missing or unknown parameter. Where a validity")
    out.append("    condition fails (see VALIDITY) the gains are NaN, with a RuntimeWarning.")
    out.append('    """')
    out += _arguments(formulas)
    out += _evaluation(formulas)
    out += _invalid_points(formulas)
    extra_items = "".join(f', "{name}": _{name}' for name, _M, _w in formulas.extra)
    out.append(
        f'    return {{"K": _K, "L": _L, "reference_gain": _N if _shape else _N[()]{extra_items}}}'
    )
    return out


def _arguments(formulas: GainFormulas) -> list[str]:
    """Reject unknown and missing parameters; broadcast the rest into local names."""
    names = [p.name for p in formulas.design.parameters]
    local = python_local_names(names)
    out = ["    _unknown = sorted(set(parameters) - set(PARAMETERS))"]
    out.append("    if _unknown:")
    out.append("        raise ValueError(")
    out.append(
        "            f\"unknown parameter {_unknown[0]!r}; the parameters are {', '.join(PARAMETERS)}\""
    )
    out.append("        )")
    out.append("    _missing = [_n for _n in PARAMETERS if _n not in parameters]")
    out.append("    if _missing:")
    out.append('        raise ValueError(f"missing parameter {_missing[0]!r}")')
    if names:
        out.append(
            "    _values = numpy.broadcast_arrays("
            "*[numpy.asarray(parameters[_n], dtype=float) for _n in PARAMETERS])"
        )
        out.append("    _shape = _values[0].shape")
        out.append("    " + ", ".join(local[nm] for nm in names) + ", = _values")
    else:
        out.append("    _shape = ()")
    return out


def _evaluation(formulas: GainFormulas) -> list[str]:
    """The arrays, the validity codes and every entry, with the common subexpressions."""
    design = formulas.design
    local = python_local_names([p.name for p in design.parameters])
    printer = PythonPrinter({prm.symbol: local[prm.name] for prm in design.parameters})
    reps, reduced = common_subexpressions(formulas.entries())
    n, m, pp = formulas.shape
    out = [f"    _K = numpy.empty(_shape + ({m}, {n}))"]
    out.append(f"    _L = numpy.empty(_shape + ({n}, {pp}))")
    out.append("    _N = numpy.empty(_shape)")
    for name, M, _what in formulas.extra:
        out.append(f"    _{name} = numpy.empty(_shape + ({M.shape[0]}, {M.shape[1]}))")
    out.append("    _code = numpy.zeros(_shape, dtype=numpy.int8)")
    out.append('    with numpy.errstate(divide="ignore", invalid="ignore", over="ignore"):')
    if formulas.factors:
        out.append(
            "        # validity factors, checked from the last code to the first so that the"
        )
        out.append("        # smallest code that applies is kept")
    for f in reversed(formulas.factors):
        out.append(f"        # {comment_text(f.condition)}: {comment_text(f.origin)}")
        out.append(
            f"        _code[abs({printer.doprint(f.factor)}) <= ZERO_TOLERANCE *"
            f" ({printer.doprint(f.scale)})] = {f.code}"
        )
    out.append("        # common subexpressions of every entry of K, L and N (sympy.cse)")
    for t, e in reps:
        out.append(f"        {t.name} = {printer.doprint(e)}")
    targets = [f"_K[..., {i}, {j}]" for i in range(m) for j in range(n)]
    targets += [f"_L[..., {i}, {j}]" for i in range(n) for j in range(pp)]
    targets.append("_N[...]")
    for name, M, _what in formulas.extra:
        targets += [f"_{name}[..., {i}, {j}]" for i in range(M.shape[0]) for j in range(M.shape[1])]
    for target, e in zip(targets, reduced, strict=True):
        out.append(f"        {target} = {printer.doprint(e)}")
    return out


def _invalid_points(formulas: GainFormulas) -> list[str]:
    """Code 4 where a result is not finite; NaN gains and one warning where a code is set."""
    out = ["    _finite = ("]
    out.append("        numpy.isfinite(_K).all(axis=(-2, -1))")
    out.append("        & numpy.isfinite(_L).all(axis=(-2, -1))")
    out.append("        & numpy.isfinite(_N)")
    for name, _M, _what in formulas.extra:
        out.append(f"        & numpy.isfinite(_{name}).all(axis=(-2, -1))")
    out.append("    )")
    out.append(f"    _code[(_code == 0) & ~_finite] = {CODE_NOT_FINITE}")
    out.append("    _bad = _code != 0")
    out.append("    if _bad.any():")
    out.append("        _K[_bad] = numpy.nan")
    out.append("        _L[_bad] = numpy.nan")
    out.append("        _N[_bad] = numpy.nan")
    for name, _M, _what in formulas.extra:
        out.append(f"        _{name}[_bad] = numpy.nan")
    out.append("        _why = {")
    for code in (CODE_UNCONTROLLABLE, CODE_UNOBSERVABLE, CODE_NO_REFERENCE_GAIN, CODE_NOT_FINITE):
        out.append(f"            {code}: {CODE_MEANINGS[code]!a},")
    out.append("        }")
    out.append("        _counts = numpy.bincount(_code.ravel(), minlength=5)")
    out.append("        _text = '; '.join(")
    out.append('            f"{_counts[_c]} {_why[_c]}" for _c in range(1, 5) if _counts[_c]')
    out.append("        )")
    out.append("        warnings.warn(")
    out.append(
        '            f"gains: {int(_bad.sum())} of {_bad.size} point(s) fail a validity condition'
        ' ({_text}); their gains are NaN (see VALIDITY)",'
    )
    out.append("            RuntimeWarning,")
    out.append("            stacklevel=2,")
    out.append("        )")
    return out
