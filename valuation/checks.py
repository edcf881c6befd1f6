"""Small checks shared by the validators: each adds a located problem, never raises.

Validation collects every problem rather than stopping at the first, so a user
fixes a document in one round instead of one error at a time.
"""

from __future__ import annotations

import math
import re
from typing import Any

from valuation.errors import ModelValidationError, Problem
from valuation.limits import AMOUNT_TOTAL_LIMIT, MAX_NAME_LENGTH, MAX_PROBLEMS_REPORTED

__all__ = ["CONTROL_CHARACTERS", "XML_ILLEGAL_CONTROLS", "Problems", "amount_total_message",
           "control_character", "describe", "is_number", "total_text"]


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


#: C0 control characters (U+0000 to U+001F): none belongs in a one-line title.
CONTROL_CHARACTERS = re.compile("[\x00-\x1f]")
#: The C0 control characters XML 1.0 does not allow (all but tab, LF and CR): a name
#: holding one could not be drawn in an SVG. Names in model documents are held to this
#: rule rather than the one above because tab, LF and CR were accepted in names before,
#: and stored model versions are read again by the same rules. ``flattree._names_ok``
#: applies it to a column of names.
XML_ILLEGAL_CONTROLS = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f]")


def control_character(text: str, *, line_breaks_allowed: bool = False) -> str:
    """The rule broken if ``text`` holds a control character it may not, else ``""``.

    ``line_breaks_allowed``: tab, line feed and carriage return are let through (names
    in model documents), and only the XML-illegal controls are refused.
    """
    pattern = XML_ILLEGAL_CONTROLS if line_breaks_allowed else CONTROL_CHARACTERS
    found = pattern.search(text)
    if not found:
        return ""
    which = ("(U+0000 to U+001F other than tab, line feed and carriage return)"
             if line_breaks_allowed else "(U+0000 to U+001F)")
    return (f"must not contain control characters {which}, found "
            f"U+{ord(found.group()):04X} at position {found.start() + 1}")


class Problems:
    """Collects located problems, up to a cap, and raises them together."""

    #: The control-character rule of :meth:`name`, for readers that check names in bulk.
    CONTROL_CHARACTERS = XML_ILLEGAL_CONTROLS

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
        bad = control_character(value, line_breaks_allowed=True)
        if bad:
            self.add(location, f"{what} {bad}")
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
