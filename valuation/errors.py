"""The core's exceptions: one small hierarchy, so callers can catch precisely.

A validation failure carries every problem found, each with its location in the
document (``states[2].probability``) and the rule it broke, so a web form or an
API client can put each message next to the field it concerns.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Problem", "ValuationError", "ModelValidationError", "ParameterError"]


@dataclass(frozen=True)
class Problem:
    """One rule broken at one place in a model document."""

    location: str
    message: str

    def __str__(self) -> str:
        return f"{self.location}: {self.message}" if self.location else self.message

    def as_dict(self) -> dict[str, str]:
        return {"location": self.location, "message": self.message}


class ValuationError(Exception):
    """Base class of every error the valuation core raises on purpose."""


class ModelValidationError(ValuationError):
    """A model document broke one or more rules; ``problems`` lists them all."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        super().__init__("; ".join(str(p) for p in self.problems) or "invalid model")


class ParameterError(ValuationError):
    """A sensitivity or risk parameter is unknown or out of its range."""
