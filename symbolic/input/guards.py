"""The guards on the argument of each allowed function of an expression.

Some arguments make SymPy's later work explode (a number of 1e15 bits, an
expansion that runs for seconds); :func:`check_argument` refuses them when the
call is built.  The measurements behind each guard are in the comment below.
"""

from __future__ import annotations

import sympy

from ..runtime.errors import ExpressionError
from .caps import check_root_base
from .signs import Facts

__all__ = ["check_argument"]

# Guards on function arguments, each measured here with SymPy 1.14 while
# functions were still evaluated on construction.  Functions of non-numeric
# arguments are now kept unevaluated, but a later step that asks SymPy about
# such a value (is it real, finite, zero?) would pay the same price, so the
# guards stay:
# * exp, sinh and cosh grow so fast that exp(exp(1e15)) or sin(exp(1e15)) needs
#   about 1e15 bits to evaluate, and SymPy evaluates numerically inside many
#   later operations (abs, sqrt, a division or a product of such a value each
#   ran past 5 s), so they may not appear inside exp, sinh, cosh, tanh, sin, cos
#   or tan;
# * sinh, cosh, tanh and abs ask for the real and imaginary parts of their
#   argument, which expands it: tanh(tanh(tanh((m+c+g+q)**10))) took 1.3 s and
#   abs(tanh(sqrt(q)*(...)**10)) ran past 20 s.  Their argument must contain no
#   function call (sinh, cosh, tanh) and be known to be real (all four);
# * exp rewrites exp(n*log(k)) as k**n and computes it: exp(1e15*log(2)) would
#   build a number of 1e15 bits, so exp may not contain log.
_GROWTH_FUNCTIONS = (sympy.exp, sympy.sinh, sympy.cosh)
_NO_GROWTH_INSIDE = frozenset({"exp", "sinh", "cosh", "tanh", "sin", "cos", "tan"})
_NO_CALL_INSIDE = frozenset({"sinh", "cosh", "tanh"})
_REAL_ARGUMENT = frozenset({"sinh", "cosh", "tanh", "abs"})


def check_argument(facts: Facts, name: str, argument: sympy.Expr, shown: str) -> None:
    """Apply the argument guards listed above ``_GROWTH_FUNCTIONS``.

    ``name`` is the function called, ``argument`` its built argument and ``shown``
    the quoted call, for the message.
    """
    if name in _NO_GROWTH_INSIDE and argument.has(*_GROWTH_FUNCTIONS):
        raise ExpressionError(
            f"'{name}' may not be applied to an argument that contains exp, sinh or cosh: {shown}"
        )
    if name == "exp" and argument.has(sympy.log):
        raise ExpressionError(f"'exp' may not be applied to an argument that contains log: {shown}")
    if name in _NO_CALL_INSIDE and argument.atoms(sympy.Function):
        raise ExpressionError(
            f"'{name}' may not be applied to an argument that contains a function call: {shown}"
        )
    if name in _REAL_ARGUMENT and not facts.real(argument):
        raise ExpressionError(
            f"the argument of '{name}' must be evidently real (no root or logarithm of a "
            f"quantity that may be negative): {shown}"
        )
    if name == "sqrt":
        check_root_base(argument, shown)
    if name in ("sqrt", "log") and facts.sign(argument) == -1:
        raise ExpressionError(f"{shown} is not real (the argument is negative)")
