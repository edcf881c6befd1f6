"""Valuation core: decision trees, Bayesian revision, value of information, risk.

Pure Python and numpy; it never imports Django, so it can run in a notebook, a
batch job or the command line (``python -m valuation``).
"""

from valuation.errors import ModelValidationError, ParameterError, Problem, ValuationError
from valuation.evaluate import evaluate, expand, validate, value_of_learning

__all__ = [
    "evaluate",
    "validate",
    "expand",
    "value_of_learning",
    "Problem",
    "ValuationError",
    "ModelValidationError",
    "ParameterError",
]
