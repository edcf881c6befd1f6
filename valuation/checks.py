"""Small checks shared by the validators: each adds a located problem, never raises.

Validation collects every problem rather than stopping at the first, so a user
fixes a document in one round instead of one error at a time.
"""

from __future__ import annotations

import math
from typing import Any

from valuation.errors import ModelValidationError, Problem
from valuation.limits import AMOUNT_TOTAL_LIMIT, MAX_NAME_LENGTH, MAX_PROBLEMS_REPORTED

__all__ = ["Problems", "is_number", "describe", "amount_total_message", "total_text"]


def is_number(value: Any) -> bool:
    """A JSON number: int or float, not a bool (``true`` is not 1 in a model)."""
    return isinstance(value, int | float) and not isinstance(value, bool)


def describe(value: Any) -> str:
    """Short rendering of an offending value for a message."""
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def total_text(total: float) -> str:
    """A total of amounts for a message; one beyond a double's range was added up as inf."""
    return f"{total:.4g}" if math.isfinite(total) else "more than a double holds (about 1.8e+308)"


def amount_total_message(amounts: str, total: float) -> str:
    """The message of the ``AMOUNT_TOTAL_LIMIT`` rule, given at the largest amount.

    Trees and payoff tables word it alike; ``amounts`` says what is added up.
    """
    return (f"{amounts} must total less than {AMOUNT_TOTAL_LIMIT:g} in absolute value, so that no "
            f"total or expected value overflows; they total {total_text(total)}, and this amount "
            "is the largest")


class Problems:
    """Collects located problems, up to a cap, and raises them together."""

    def __init__(self) -> None:
        self.items: list[Problem] = []
        self.overflow = 0

    def add(self, location: str, message: str) -> None:
        if len(self.items) < MAX_PROBLEMS_REPORTED:
            self.items.append(Problem(location, message))
        else:
            self.overflow += 1

    def __bool__(self) -> bool:
        return bool(self.items)

    def as_list(self) -> list[Problem]:
        if self.overflow:
            return [*self.items, Problem("", f"... and {self.overflow} more problems not listed")]
        return list(self.items)

    def raise_if_any(self) -> None:
        if self.items:
            raise ModelValidationError(self.as_list())

    # -- typed field checks -------------------------------------------------
    def name(self, location: str, value: Any, what: str = "name") -> bool:
        if not isinstance(value, str) or not value.strip():
            self.add(location, f"{what} must be a non-empty text, got {describe(value)}")
            return False
        if len(value) > MAX_NAME_LENGTH:
            self.add(location, f"{what} must be at most {MAX_NAME_LENGTH} characters long")
            return False
        if "\x00" in value:
            self.add(location, f"{what} must not contain the NUL character")
            return False
        return True

    def number(self, location: str, value: Any) -> bool:
        if not is_number(value):
            self.add(location, f"must be a number, got {describe(value)}")
            return False
        try:
            finite = math.isfinite(value)
        except OverflowError:
            # JSON allows integers of any length; one beyond the float range
            # (about 1.8e308) cannot be compared, let alone computed with.
            self.add(location, f"must be a finite number within the range of a double "
                               f"(about ±1.8e308), got an integer of {len(str(abs(value)))} digits")
            return False
        if not finite:
            self.add(location, f"must be a finite number, got {value}")
            return False
        return True

    def probability(self, location: str, value: Any) -> bool:
        if not self.number(location, value):
            return False
        if not 0.0 <= value <= 1.0:
            self.add(location, f"must be within [0, 1], got {value}")
            return False
        return True

    def unknown_fields(self, location: str, obj: dict, allowed: frozenset[str]) -> None:
        for key in obj:
            if key not in allowed:
                where = f"{location}.{key}" if location else key
                self.add(where, f"unknown field (allowed: {', '.join(sorted(allowed))})")
