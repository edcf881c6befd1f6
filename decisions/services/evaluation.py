"""The one door from the register to the valuation core.

Both faces send model documents through here, so a document is checked by the
core's own validator and every message reads the same on the API and the web.
"""

from __future__ import annotations

from typing import Any

import valuation
from decisions.services.errors import InvalidInput
from valuation.canonical import canonical_json
from valuation.errors import ModelValidationError, ParameterError, ValuationError
from valuation.utility import check_risk_tolerance

__all__ = ["evaluate_document", "prepare_document"]


def _invalid(problems, prefix: str) -> InvalidInput:
    return InvalidInput(problems=[
        (f"{prefix}.{p.location}" if prefix and p.location else (p.location or prefix), p.message)
        for p in problems
    ])


def evaluate_document(document: Any, *, risk_tolerance: float | None = None,
                      location: str = "") -> dict:
    """Validate and evaluate ``document``; bad input raises :class:`InvalidInput`.

    ``location`` prefixes each problem's place (``document.states[2].probability``)
    when the document sits inside a larger request body.
    """
    if not isinstance(document, dict):
        raise InvalidInput("must be a JSON object (a model document)", location=location)
    try:
        risk_tolerance = check_risk_tolerance(risk_tolerance)
    except ParameterError as exc:
        raise InvalidInput(str(exc).partition(": ")[2], location="risk_tolerance") from None
    # ``evaluate`` validates first and lists every problem, so the document is
    # parsed once, not once to validate and again to evaluate.
    try:
        return valuation.evaluate(document, risk_tolerance=risk_tolerance)
    except ModelValidationError as exc:
        raise _invalid(exc.problems, location) from None
    except ValuationError as exc:
        raise InvalidInput(str(exc), location=location) from None


def prepare_document(document: Any, *, location: str = "document") -> tuple[bytes, dict]:
    """Canonical bytes of a valid document and the core's results for it."""
    results = evaluate_document(document, location=location)
    try:
        canonical = canonical_json(document)
    except ValuationError as exc:
        raise InvalidInput(str(exc), location=location) from None
    return canonical, results
