"""The memo's paragraph on certified stability over the parameter box, as plain data.

The certificates come from :func:`symbolic.analysis.certify.box_certificates` (the same ones
the requirements table judges); here they become sentences for
``templates/memo_certificate.tex.j2`` and ``.md.j2``, included after the robustness section.
Every value is plain text: the memo's environment escapes it.
"""

from __future__ import annotations

from ..analysis.certify import Certificate, box_certificates
from ..model.results import Derivation
from ..verification.shipped_assembly import shipped_controller

__all__ = ["memo_certificate"]

_METHOD = (
    "Method: the characteristic polynomial of the loop is computed exactly, its coefficients"
    " rational functions of the ranged parameters (multiplied by their common denominator); the"
    " loop is stable at a point exactly when the Liénard–Chipart conditions (every coefficient"
    " and every other Hurwitz determinant positive) hold there. Each condition is enclosed over"
    " boxes by interval arithmetic with outward rounding (mpmath) or bounded from below by its"
    " exact Taylor form about the box centre, and the box is halved until every condition is"
    " shown positive on every piece (proved), a point violates one in exact rational arithmetic"
    " and NumPy's eigenvalues there confirm it (counterexample), or the cap on boxes is reached"
    " (undecided, which does not pass). No conclusion is drawn from samples."
)
_LIMITS = (
    "Limits: the proof covers the linear model with the declared ranges and the controller's"
    " numbers as shipped; it says nothing about parameters outside the ranges, time-varying"
    " parameters, saturation or unmodelled dynamics, and is no substitute for tests on the"
    " machine and the applicable standards."
)


def _ranges(cert: Certificate) -> str:
    return ", ".join(
        f"{n} in [{lo:.6g}, {hi:.6g}]"
        for n, (lo, hi) in zip(cert.parameters, cert.box, strict=True)
    )


def _sentence(cert: Certificate) -> str:
    loop = (
        "With K and L fixed at the nominal design"
        if cert.case == "gains fixed"
        else "With K(p) and L(p) following the parameters (the closed forms as a gain schedule)"
    )
    if cert.status == "not covered":
        return f"{loop}: not covered ({cert.detail})."
    where = f"the loop (characteristic polynomial of order {cert.order}) over {_ranges(cert)}"
    if cert.status == "proved":
        return (
            f"{loop}, {where} is proved stable at every point: all {len(cert.conditions)}"
            " conditions were shown positive "
            + (
                "on the whole box at once."
                if cert.boxes == 1
                else f"on every piece of a subdivision of the box ({cert.boxes} boxes examined)."
            )
        )
    if cert.status == "undecided":
        return (
            f"{loop}, {where} is undecided after {cert.boxes} boxes (the cap is"
            f" {cert.max_boxes}; {cert.detail}): neither proved nor refuted, so the row fails."
        )
    if cert.eigenvalue is not None:
        z = cert.eigenvalue
        pole = f"{z.real:.4g}" + (f" ± {abs(z.imag):.4g}j" if abs(z.imag) > 1e-12 else "")
        return (
            f"{loop}, {where} is not stable: at {cert.point_text} {cert.detail}"
            f" (exact rational arithmetic), and its least stable pole there is s = {pole}"
            + (" (NumPy's eigenvalues agree)." if cert.confirmed else ".")
        )
    return f"{loop}, {where} is not certified: {cert.detail}, near {cert.point_text}."


def memo_certificate(d: Derivation, controller=None) -> dict | None:
    """Plain data of the memo's certificate paragraph, or None when no parameter has a range.

    ``controller`` is the shipped controller the requirements table judged (built from ``d``
    when not given).
    """
    ctrl = shipped_controller(d) if controller is None else controller
    report = box_certificates(d, ctrl)
    if report is None:
        return None
    cases = [
        {"case": c.case, "status": c.status, "summary": c.summary, "sentence": _sentence(c)}
        for c in (report.fixed, report.scheduled)
    ]
    return {"cases": cases, "method": _METHOD, "limits": _LIMITS}
