"""The tolerances every numeric cross-check of a derivation is judged by."""

__all__ = ["COMPENSATOR_TOLERANCE", "GAIN_TOLERANCE", "ILL_CONDITIONED", "POLYNOMIAL_TOLERANCE"]

#: Relative tolerance of gain comparisons against SciPy.
GAIN_TOLERANCE = 1e-8
#: Relative tolerance of characteristic-polynomial coefficient checks.
POLYNOMIAL_TOLERANCE = 1e-8
#: Condition number of the controllability/observability matrix above which a warning is given.
ILL_CONDITIONED = 1e8
#: Relative tolerance of the compensator's frequency-response check.
COMPENSATOR_TOLERANCE = 1e-7
