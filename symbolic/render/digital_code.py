"""The digital controller as source code: a C99 header and source, or a standalone Python module.

Both implement the difference equations of one observer form
(:class:`~symbolic.derivation.difference_equations.DifferenceEquations`) with the same
arithmetic in the same order as :class:`symbolic.verification.sampled_data.ControllerRunner`,
so that the generated code and the sampled-data simulation agree to the last bit or nearly.

Caution: before this code drives a machine that moves, heats or flies, run it against the
simulation, then on the machine with reduced limits and an independent emergency stop.
"""

from __future__ import annotations

import re

import numpy as np

from ..derivation.difference_equations import DifferenceEquations
from ..derivation.digital import DigitalController
from ..runtime.errors import RenderError

__all__ = ["c_controller_files", "python_controller_source"]

_C_NAME = re.compile(r"[^A-Za-z0-9_]+")


def _c_prefix(name: str) -> str:
    text = _C_NAME.sub("_", name).strip("_").lower() or "controller"
    if not text[0].isalpha():
        text = "c_" + text
    return text[:40]


def _comment_text(text: str) -> str:
    """Printable ASCII only, and no comment terminator."""
    clean = "".join(ch if 32 <= ord(ch) < 127 else "?" for ch in text)
    return clean.replace("*/", "* /").replace("/*", "/ *")


def _c_number(x: float) -> str:
    text = repr(float(x))
    return text if any(ch in text for ch in ".en") else text + ".0"


def _c_matrix(name: str, M: np.ndarray) -> str:
    rows = ["    {" + ", ".join(_c_number(v) for v in row) + "}" for row in np.atleast_2d(M)]
    r, c = np.atleast_2d(M).shape
    return f"static const double {name}[{r}][{c}] = {{\n" + ",\n".join(rows) + "\n};\n"


_FORM_WORDS = {
    "current": "current estimator",
    "predictor": "predictor observer",
    "reduced": "reduced-order observer",
}


def _ascii_equations(digital: DigitalController, form: str, anti_windup: bool) -> list[str]:
    """The controller's equations in plain ASCII, one per line, for comments and docstrings."""
    law = "u[k] = -K x_hat[k] + N r[k]"
    if digital.integral is not None:
        law = "u[k] = -K x_hat[k] - k_i x_I[k]"
    if form == "predictor":
        lines = [
            law,
            "x_hat[k+1] = (Phi - Lp C) x_hat[k] + (Gamma - Lp D) u[k] + Lp y[k]",
        ]
    elif form == "current":
        lines = [
            "x_hat[k] = x_bar[k] + Lc (y[k] - C x_bar[k] - D u[k])",
            law,
            "x_bar[k+1] = Phi x_hat[k] + Gamma u[k]",
        ]
    else:
        lines = [
            "y_bar[k] = y[k] - D u[k]; x_hat[k] = inv(T) [y_bar[k]; eta[k] + Lr y_bar[k]]",
            law,
            "eta[k+1] = A_hat eta[k] + B_hat y_bar[k] + F_hat u[k]  (reduced-order observer)",
        ]
    if digital.integral is not None:
        line = "x_I[k+1] = x_I[k] + T (y_t[k] - r[k])"
        if anti_windup:
            line += " + T (u_d[k] - u[k]) / (k_i T_t)"
        lines.append(line)
        if anti_windup:
            lines.append(
                "  (back-calculation anti-windup: u_d is the demanded input before the limit,"
                f" T_t = {digital.integral.tracking_time!r} s)"
            )
    return lines


def _checked_form(digital: DigitalController, form: str | None) -> str:
    form = digital.default_form if form is None else form
    if form not in digital.equations:
        why = ' (the reduced form needs [observer] kind = "reduced")' if form == "reduced" else ""
        raise RenderError(
            f"unknown observer form {form!r}; expected one of {tuple(digital.equations)}{why}"
        )
    return form


def _state_lines(eq: DifferenceEquations) -> list[str]:
    names = eq.state_names or tuple(f"xi[{i}]" for i in range(eq.state_matrix.shape[0]))
    out = []
    for i, nm in enumerate(names):
        what = " (integral of y_t - r)" if i == eq.integrator_index else ""
        out.append(f"xi[{i}] = {nm}{what}")
    return out


def c_controller_files(
    digital: DigitalController,
    *,
    name: str = "controller",
    form: str | None = None,
    u_max: float | None = None,
    title: str = "",
) -> dict[str, bytes]:
    """The digital controller as C99: ``<prefix>.h`` and ``<prefix>.c``.

    The code has a fixed sample time, no allocation and no library calls: a state struct,
    ``<prefix>_reset(state)`` and ``double <prefix>_step(state, y, r)`` returning ``u[k]``
    (``y`` is a ``double`` for one output, ``const double y[P]`` otherwise).  With ``u_max``
    the output is limited inside ``step`` and the observer is fed the limited value; with
    integral action the integrator is then corrected by back-calculation (anti-windup, see
    :class:`~symbolic.derivation.extensions_in_z.DiscreteIntegral`).

    Parameters
    ----------
    form : {"current", "predictor", "reduced"}, optional
        Default :attr:`~symbolic.derivation.digital.DigitalController.default_form`.

    Raises
    ------
    RenderError
        Several inputs (the C interface returns one u), or an unknown or unavailable form.
    """
    form = _checked_form(digital, form)
    eq = digital.equations[form]
    if eq.output_state.shape[0] != 1:
        raise RenderError("the C export handles one input; this plant has several")
    pre = _c_prefix(name)
    anti_windup = u_max is not None and eq.anti_windup is not None
    header = _c_header(digital, form, pre, u_max, title, anti_windup)
    source = _c_source(digital, form, pre, u_max, title, anti_windup)
    return {f"{pre}.h": header.encode("ascii"), f"{pre}.c": source.encode("ascii")}


def _c_header(digital, form: str, pre: str, u_max, title: str, anti_windup: bool) -> str:
    """``<prefix>.h``: the equations in a comment, the sizes, the state struct, the calls."""
    eq = digital.equations[form]
    n = eq.state_matrix.shape[0]
    p = eq.measurement_matrix.shape[1]
    PRE = pre.upper()
    guard = f"{PRE}_H"
    y_param = "double y" if p == 1 else f"const double y[{PRE}_OUTPUTS]"
    equations = "\n".join(f" *   {line}" for line in _ascii_equations(digital, form, anti_windup))
    states = "\n".join(f" *   {line}" for line in _state_lines(eq))
    extra_terms = ""
    if eq.reference_input is not None:
        extra_terms += " + Bor r[k]"
    if anti_windup:
        extra_terms += " + Baw (u_d[k] - u[k])"
    limit_macro = "" if u_max is None else f"#define {PRE}_U_MAX {_c_number(u_max)}\n"
    return f"""/* {_comment_text(title or "gainsmith digital controller")}
 *
 * Generated by gainsmith.  Digital observer-based state feedback, {_FORM_WORDS[form]}:
{equations}
 * implemented as the difference equations
 *   u[k]     = Cc xi[k] + Dcy y[k] + Dcr r[k]          (limited to +/-U_MAX if defined)
 *   xi[k+1]  = Ao xi[k] + Boy y[k] + Bou u[k]{extra_terms}   (with the applied u)
 * with the controller state
{states}
 * Call {pre}_step exactly once every {PRE}_SAMPLE_TIME seconds, right after sampling y,
 * and apply the returned u through a zero-order hold until the next call.
 *
 * Caution: before this code drives a machine that moves, heats or flies, run it against the
 * simulation, then on the machine with reduced limits and an independent emergency stop.
 */
#ifndef {guard}
#define {guard}

#define {PRE}_SAMPLE_TIME {_c_number(digital.sample_time)}
#define {PRE}_STATES {n}
#define {PRE}_OUTPUTS {p}
{limit_macro}
typedef struct {{
    double xi[{PRE}_STATES];
}} {pre}_state;

/* Set the controller state to zero (estimate of a plant at rest, integrator empty). */
void {pre}_reset({pre}_state *state);

/* One sample: measurement y[k] and reference r[k] in, u[k] out. */
double {pre}_step({pre}_state *state, {y_param}, double r);

#endif /* {guard} */
"""


def _c_source(digital, form: str, pre: str, u_max, title: str, anti_windup: bool) -> str:
    """``<prefix>.c``: the tables and the ``reset`` and ``step`` functions."""
    eq = digital.equations[form]
    p = eq.measurement_matrix.shape[1]
    PRE = pre.upper()
    y_param = "double y" if p == 1 else f"const double y[{PRE}_OUTPUTS]"
    y_at = "y" if p == 1 else "y[j]"
    limit = ""
    demanded_decl = ""
    demanded_set = ""
    if anti_windup:
        demanded_decl = "    double u_demanded;\n"
        demanded_set = "    u_demanded = u;\n"
    if u_max is not None:
        limit = (
            f"    if (u > {PRE}_U_MAX) {{\n        u = {PRE}_U_MAX;\n"
            f"    }} else if (u < -{PRE}_U_MAX) {{\n        u = -{PRE}_U_MAX;\n    }}\n"
        )
    loop_y_out = (
        f"    for (j = 0; j < {PRE}_OUTPUTS; ++j) {{\n        u += Dcy[0][j] * {y_at};\n    }}\n"
    )
    loop_y_state = (
        f"        for (j = 0; j < {PRE}_OUTPUTS; ++j) {{\n"
        f"            acc += Boy[i][j] * {y_at};\n        }}\n"
    )
    extra_state = ""
    tables = ""
    if eq.reference_input is not None:
        tables += _c_matrix("Bor", eq.reference_input) + "\n"
        extra_state += "        acc += Bor[i][0] * r;\n"
    if anti_windup:
        tables += _c_matrix("Baw", eq.anti_windup) + "\n"
        extra_state += "        acc += Baw[i][0] * (u_demanded - u);\n"
    return f"""/* {_comment_text(title or "gainsmith digital controller")}: generated by gainsmith
 * ({_FORM_WORDS[form]}, sample time {digital.sample_time!r} s).  See {pre}.h.
 */
#include "{pre}.h"

{_c_matrix("Ao", eq.state_matrix)}
{_c_matrix("Boy", eq.measurement_matrix)}
{_c_matrix("Bou", eq.control_matrix)}
{tables}{_c_matrix("Cc", eq.output_state)}
{_c_matrix("Dcy", eq.output_measurement)}
static const double Dcr = {_c_number(eq.output_reference[0, 0])};

void {pre}_reset({pre}_state *state)
{{
    int i;
    for (i = 0; i < {PRE}_STATES; ++i) {{
        state->xi[i] = 0.0;
    }}
}}

double {pre}_step({pre}_state *state, {y_param}, double r)
{{
    double next[{PRE}_STATES];
    double u = Dcr * r;
{demanded_decl}    double acc;
    int i, j;
    for (j = 0; j < {PRE}_STATES; ++j) {{
        u += Cc[0][j] * state->xi[j];
    }}
{loop_y_out}{demanded_set}{limit}    for (i = 0; i < {PRE}_STATES; ++i) {{
        acc = 0.0;
        for (j = 0; j < {PRE}_STATES; ++j) {{
            acc += Ao[i][j] * state->xi[j];
        }}
{loop_y_state}        acc += Bou[i][0] * u;
{extra_state}        next[i] = acc;
    }}
    for (i = 0; i < {PRE}_STATES; ++i) {{
        state->xi[i] = next[i];
    }}
    return u;
}}
"""


def _py_tuple(M: np.ndarray) -> str:
    rows = ["(" + ", ".join(repr(float(v)) for v in row) + ",)" for row in np.atleast_2d(M)]
    return "(\n    " + ",\n    ".join(rows) + ",\n)"


def python_controller_source(
    digital: DigitalController,
    *,
    name: str = "controller",
    form: str | None = None,
    u_max: float | None = None,
    title: str = "",
) -> dict[str, bytes]:
    """The digital controller as a standalone Python module ``<prefix>.py`` (no imports).

    The Python counterpart of :func:`c_controller_files`: ``reset()`` returns a zero state
    (a list), ``step(state, y, r)`` returns ``u[k]`` and advances ``state`` in place, with the
    same arithmetic in the same order as the C code (and as :class:`~symbolic.verification.sampled_data.ControllerRunner`).
    ``y`` is a number for one output, a sequence otherwise.

    Raises
    ------
    RenderError
        Several inputs, or an unknown or unavailable form.
    """
    form = _checked_form(digital, form)
    eq = digital.equations[form]
    if eq.output_state.shape[0] != 1:
        raise RenderError("the Python controller export handles one input; this plant has several")
    pre = _c_prefix(name)
    anti_windup = u_max is not None and eq.anti_windup is not None
    out = _py_docstring(digital, form, title, anti_windup) + _py_tables(
        digital, eq, u_max, anti_windup
    )
    out += _py_functions(eq, u_max, anti_windup)
    return {f"{pre}.py": "\n".join(out).encode("ascii")}


def _py_docstring(digital, form: str, title: str, anti_windup: bool) -> list[str]:
    """The module docstring: the equations, the state, the usage and the caution."""
    eq = digital.equations[form]
    doc = [
        f"{_comment_text(title or 'gainsmith digital controller')}: generated by gainsmith;"
        " do not edit.",
        "",
        f"Digital observer-based state feedback, {_FORM_WORDS[form]}:",
        *("    " + line for line in _ascii_equations(digital, form, anti_windup)),
        "implemented as the difference equations",
        "    u[k]    = Cc xi[k] + Dcy y[k] + Dcr r[k]   (limited to +/-U_MAX unless None)",
        "    xi[k+1] = Ao xi[k] + Boy y[k] + Bou u[k]"
        + (" + Bor r[k]" if eq.reference_input is not None else "")
        + (" + Baw (u_d[k] - u[k])" if anti_windup else ""),
        "with the controller state",
        *("    " + line for line in _state_lines(eq)),
        "",
        "Usage: state = reset(); then every SAMPLE_TIME seconds u = step(state, y, r).",
        "",
        "Caution: before this code drives a machine that moves, heats or flies, run it against",
        "the simulation, then on the machine with reduced limits and an independent emergency",
        "stop.",
    ]
    text = "\n".join(doc).replace("\\", "/").replace('"', "'")
    out = ['"""' + text + '\n"""', ""]
    return out


def _py_tables(digital, eq: DifferenceEquations, u_max, anti_windup: bool) -> list[str]:
    """The constants: sample time, sizes, the limit and the coefficient tables."""
    p = eq.measurement_matrix.shape[1]
    out = []
    out.append(f"SAMPLE_TIME = {digital.sample_time!r}")
    out.append(f"STATES = {eq.state_matrix.shape[0]}")
    out.append(f"OUTPUTS = {p}")
    out.append(f"U_MAX = {None if u_max is None else float(u_max)!r}")
    out.append(f"AO = {_py_tuple(eq.state_matrix)}")
    out.append(f"BOY = {_py_tuple(eq.measurement_matrix)}")
    out.append(f"BOU = {_py_tuple(eq.control_matrix)}")
    if eq.reference_input is not None:
        out.append(f"BOR = {_py_tuple(eq.reference_input)}")
    if anti_windup:
        out.append(f"BAW = {_py_tuple(eq.anti_windup)}")
    out.append(f"CC = {_py_tuple(eq.output_state)}")
    out.append(f"DCY = {_py_tuple(eq.output_measurement)}")
    out.append(f"DCR = {float(eq.output_reference[0, 0])!r}")
    return out


def _py_functions(eq: DifferenceEquations, u_max, anti_windup: bool) -> list[str]:
    """The ``reset`` and ``step`` functions, the arithmetic in the order of the C code."""
    out = [
        "",
        "",
        "def reset():",
        '    """A zero controller state (estimate of a plant at rest, integrator empty)."""',
        "    return [0.0] * STATES",
        "",
        "",
        "def step(state, y, r):",
        '    """One sample: returns u[k] and advances ``state`` (a list) in place."""',
        "    ys = [float(y)] if OUTPUTS == 1 else [float(v) for v in y]",
        "    r = float(r)",
        "    u = DCR * r",
        "    for j in range(STATES):",
        "        u += CC[0][j] * state[j]",
        "    for j in range(OUTPUTS):",
        "        u += DCY[0][j] * ys[j]",
    ]
    if anti_windup:
        out.append("    u_demanded = u")
    if u_max is not None:
        out += [
            "    if u > U_MAX:",
            "        u = U_MAX",
            "    elif u < -U_MAX:",
            "        u = -U_MAX",
        ]
    out += [
        "    nxt = []",
        "    for i in range(STATES):",
        "        acc = 0.0",
        "        for j in range(STATES):",
        "            acc += AO[i][j] * state[j]",
        "        for j in range(OUTPUTS):",
        "            acc += BOY[i][j] * ys[j]",
        "        acc += BOU[i][0] * u",
    ]
    if eq.reference_input is not None:
        out.append("        acc += BOR[i][0] * r")
    if anti_windup:
        out.append("        acc += BAW[i][0] * (u_demanded - u)")
    out += [
        "        nxt.append(acc)",
        "    state[:] = nxt",
        "    return u",
        "",
    ]
    return out
