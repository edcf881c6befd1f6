"""Canonical JSON encoding, so the same document always hashes the same.

Why our own encoder: a hash must be taken over bytes we produce, never over
JSON read back from a database, whose key order and number formatting may
change (PostgreSQL ``jsonb`` reorders keys). Rules, in the spirit of RFC 8785
(JSON Canonicalization Scheme):

- object keys sorted by code point, no insignificant white space;
- strings as UTF-8, with only the escapes JSON requires;
- integers as integers; a float with an integral value below 2**53 is written as
  that integer (``1.0`` -> ``1``), any other float in Python's shortest
  round-trip form (``0.1`` -> ``0.1``);
- NaN and infinities are refused.
"""

from __future__ import annotations

import hashlib
import json
import math
from typing import Any

from valuation.errors import ValuationError

__all__ = ["canonical_json", "sha256_hex", "normalise_numbers"]

_SAFE_INTEGER = 2**53


def normalise_numbers(value: Any, _path: str = "$") -> Any:
    """Return a copy of ``value`` with floats in canonical form; refuse NaN and infinities."""
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValuationError(f"{_path}: must be a finite number, got {value}")
        if value.is_integer() and abs(value) < _SAFE_INTEGER:
            return int(value)
        return value
    if isinstance(value, dict):
        out = {}
        for key, item in value.items():
            if not isinstance(key, str):
                raise ValuationError(f"{_path}: object keys must be strings, got {key!r}")
            out[key] = normalise_numbers(item, f"{_path}.{key}")
        return out
    if isinstance(value, list | tuple):
        return [normalise_numbers(item, f"{_path}[{i}]") for i, item in enumerate(value)]
    raise ValuationError(f"{_path}: cannot encode a value of type {type(value).__name__}")


def canonical_json(value: Any) -> bytes:
    """Encode ``value`` as canonical UTF-8 JSON bytes.

    Examples
    --------
    >>> canonical_json({"b": 1.0, "a": [0.1, "é"]})
    b'{"a":[0.1,"\\xc3\\xa9"],"b":1}'
    """
    text = json.dumps(
        normalise_numbers(value),
        sort_keys=True,
        separators=(",", ":"),
        ensure_ascii=False,
        allow_nan=False,
    )
    try:
        return text.encode("utf-8")
    except UnicodeEncodeError as exc:  # a lone surrogate ("\ud800"): not a Unicode character
        raise ValuationError(f"text must be Unicode characters: U+{ord(text[exc.start]):04X} "
                             f"is half of a surrogate pair, which UTF-8 cannot encode") from None


def sha256_hex(value: Any) -> str:
    """SHA-256 of the canonical encoding, as 64 hexadecimal digits."""
    return hashlib.sha256(canonical_json(value)).hexdigest()
