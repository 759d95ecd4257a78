"""The memo's list of references: the published sources of every method it uses.

The list depends on the design: the sections for integral action, the reduced-order
observer, the digital controller and pole placement from specifications add theirs.
"""

from __future__ import annotations

from ..model.results import Derivation

__all__ = ["references"]


def references(d: Derivation) -> list[str]:
    """The published sources of the methods the memo uses; optional sections add theirs."""
    refs = [
        "J. Ackermann, \u201cDer Entwurf linearer Regelungssysteme im Zustandsraum\u201d,"
        " Regelungstechnik 20(7):297\u2013300, 1972 (Ackermann's formula).",
        "D. G. Luenberger, \u201cObserving the state of a linear system\u201d, IEEE Transactions on"
        " Military Electronics 8(2):74\u201380, 1964 (the observer; its poles by duality).",
        "D. G. Luenberger, \u201cAn introduction to observers\u201d, IEEE Transactions on Automatic"
        " Control 16(6):596\u2013602, 1971 (separation of controller and observer poles).",
        "K. Ogata, Modern Control Engineering, 5th ed., Prentice Hall, 2010, Sec. 10-2 to 10-6"
        " (pole placement, Ackermann's formula, full-order observers).",
        "G. F. Franklin, J. D. Powell, A. Emami-Naeini, Feedback Control of Dynamic Systems,"
        " 7th ed., Pearson, 2015, Sec. 7.5\u20137.9 (state feedback, reference input, estimators,"
        " the compensator).",
        "T. Kailath, Linear Systems, Prentice Hall, 1980, Sec. 2.4 and Appendix (determinant"
        " identities for transfer-function numerators).",
        "A. Varga, \u201cA Schur method for pole assignment\u201d and A. L. Tits, Y. Yang,"
        " \u201cGlobally convergent algorithms for robust pole assignment by state feedback\u201d,"
        " IEEE Transactions on Automatic Control 41(10):1432\u20131452, 1996 (the method of"
        " scipy.signal.place_poles used for the cross-check).",
        "C. F. Van Loan, \u201cComputing integrals involving the matrix exponential\u201d, IEEE"
        " Transactions on Automatic Control 23(3):395\u2013404, 1978 (exact zero-order-hold"
        " stepping of the simulation).",
    ]
    if d.integral is not None:
        refs.append(
            "H. H. Rosenbrock, State-Space and Multivariable Theory, Nelson, 1970, Ch. 3 (the"
            " system matrix; a plant zero at s = 0 forbids integral action)."
        )
        refs.append(
            "K. J. \u00c5str\u00f6m and T. H\u00e4gglund, Advanced PID Control, ISA, 2006,"
            " Sec. 3.5 (integrator windup; back-calculation)."
        )
    if d.reduced_observer is not None:
        refs.append(
            "D. G. Luenberger, \u201cObservers for multivariable systems\u201d, IEEE Transactions"
            " on Automatic Control 11(2):190\u2013197, 1966 (the reduced-order observer)."
        )
    if d.discrete is not None:
        refs.append(
            "G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic Systems,"
            " 3rd ed., Addison-Wesley, 1998, Sec. 4.3 and 8.2 (zero-order-hold equivalent;"
            " prediction and current estimators)."
        )
        if "Putzer" in d.discrete.method:
            refs.append(
                "E. J. Putzer, \u201cAvoiding the Jordan canonical form in the discussion of"
                " linear systems with constant coefficients\u201d, The American Mathematical"
                " Monthly 73(1):2\u20137, 1966 (the closed-form matrix exponential of the"
                " hold-equivalent model)."
            )
    if d.controller_poles.dominant is not None:
        refs.insert(
            4,
            "N. S. Nise, Control Systems Engineering, 7th ed., Wiley, 2015, Sec. 4.6 (damping"
            " ratio from overshoot, settling and rise time of the second-order response).",
        )
    return refs
