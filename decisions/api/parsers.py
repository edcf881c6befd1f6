"""A strict JSON parser: bounded before parsing, strict while parsing.

- The body is read with a cap of ``DATA_UPLOAD_MAX_MEMORY_SIZE`` + 1 bytes, so an
  oversized body is refused without being held whole in memory.
- Only UTF-8 is accepted: a client-chosen charset (``bz2_codec``...) could
  otherwise expand the body after the size check.
- Nesting deeper than :data:`MAX_DEPTH` is refused: the parser's recursion guard
  stops pathological nesting (answered as this rule, not a 500), and a walk over
  the parsed containers enforces the limit itself.
- NaN, Infinity, duplicate keys, the character U+0000 and unpaired surrogates
  (``\\ud800`` alone) are refused: jsonb keeps the last of duplicate keys and
  rejects U+0000 and unpaired surrogates, so the stored copy and the hashed
  canonical text could otherwise disagree (and no UTF-8 answer could carry them).

A body is read first by orjson (``_orjson_parse``), which parses a model in half
the standard library's time, and is taken from it only when every rule above is
settled without doubt; any other body goes through the standard library's parse
(``_stdlib_parse``), which decides and names the problem. Both give the same
value for the bodies the first one takes (tests/test_api_strict_parser.py).
"""

from __future__ import annotations

import json
import math
import re
from itertools import chain

import orjson
from django.conf import settings
from rest_framework.exceptions import ParseError
from rest_framework.parsers import JSONParser

__all__ = ["MAX_DEPTH", "BodyProblem", "StrictJSONParser", "parse_strict_json"]

MAX_DEPTH = 64
_NUL_ESCAPE = "\\u0000"
_SURROGATE = re.compile("[\ud800-\udfff]")


class BodyProblem(ParseError):
    """A malformed body, with the place in it (``location``) when known."""

    def __init__(self, message: str, location: str = "body"):
        self.location = location
        super().__init__(message)


def _reject_constant(name: str):
    raise BodyProblem(f"{name} is not a valid JSON number; send a finite number")


def _finite_float(text: str) -> float:
    value = float(text)
    if math.isinf(value):  # 1e400 overflows to infinity without the word Infinity
        raise BodyProblem(f"the number {text[:40]} is beyond the range of a double "
                          f"(about ±1.8e308); send a finite number")
    return value


def _no_duplicates(pairs):
    out = {}
    for key, value in pairs:
        if key in out:
            raise BodyProblem(f"duplicate key {key!r} in one object")
        out[key] = value
    return out


def _levels(data):
    """``data`` level by level: each level's objects and the values inside its containers.

    Iterative, depth-checked: the parser's own recursion guard (RecursionError) has
    already stopped pathological nesting, and an earlier scan of the raw text had to
    skip every string and cost more than the parse itself.
    """
    level, depth = [data], 1
    while level:
        if depth > MAX_DEPTH:
            raise BodyProblem(f"must not nest deeper than {MAX_DEPTH} levels")
        found = [item for item in level if type(item) is dict]
        values = [v for item in found for v in item.values()]
        values += [v for item in level if type(item) is list for v in item]
        yield found, values
        level = [v for v in values if type(v) is dict or type(v) is list]
        depth += 1


def _objects(data) -> list[dict]:
    """Every object in ``data`` (and the depth rule checked on the way)."""
    return [item for found, _ in _levels(data) for item in found]


def _check_text(value, path: str = "body") -> None:
    """Refuse U+0000 and unpaired surrogates in keys and strings, naming the place."""
    # Iterative walk: the depth is already bounded, but a list may be long.
    stack = [(value, path)]
    while stack:
        item, where = stack.pop()
        if isinstance(item, str):
            _check_string(item, where, "must not contain")
        elif isinstance(item, dict):
            for key, sub in item.items():
                _check_string(key, where, "object keys must not contain")
                stack.append((sub, f"{where}.{key}"))
        elif isinstance(item, list):
            stack.extend((sub, f"{where}[{i}]") for i, sub in enumerate(item))


def _check_string(text: str, where: str, rule: str) -> None:
    if "\x00" in text:
        raise BodyProblem(f"{rule} the character U+0000" if rule == "must not contain"
                          else f"{rule} U+0000", location=where)
    found = _SURROGATE.search(text)
    if found:
        raise BodyProblem(f"{rule} an unpaired surrogate (U+{ord(found.group()):04X}); "
                          f"send Unicode text", location=where)


def _loads(text: str, *, checked: bool):
    hooks = {"object_pairs_hook": _no_duplicates} if checked else {}
    try:
        return json.loads(text, parse_constant=_reject_constant, parse_float=_finite_float,
                          **hooks)
    except BodyProblem:
        raise
    except RecursionError:
        raise BodyProblem(f"must not nest deeper than {MAX_DEPTH} levels") from None
    except ValueError as exc:
        raise BodyProblem(f"is not valid JSON: {exc}") from None


def _may_hide_a_duplicate(text: str, data) -> bool:
    """Whether the fast parse, which keeps the last of duplicate keys, may have hidden one.

    Outside strings, a colon separates a key from its value, so the body's colons
    number its members plus the colons written inside strings; the parsed objects
    hold one entry per member less one per duplicate. The two counts agree only when
    there is neither: then nothing was hidden. When they do not, the colons found in
    the parsed strings are taken off, unless the body may escape a colon (``\\u003a``
    is a colon in the parsed text but not in the body). Any doubt left goes to the
    checked parse, with a hook per object, which decides and names the key. Counting
    and walking cost less than that hook on every body.
    """
    if type(data) is not dict and type(data) is not list:
        return False
    entries, colons = sum(map(len, _objects(data))), text.count(":")
    if colons == entries:
        return False
    if "\\u003a" in text or "\\u003A" in text:  # an escaped colon: the count below misses it
        return True
    return colons - _colons_in_strings(data) != entries


def _colons_in_strings(data) -> int:
    """Colons inside the keys and string values of ``data``: with no escaped colon in
    the body, the body's colons less these are its members."""
    total = 0
    for found, values in _levels(data):
        total += "".join(chain.from_iterable(found)).count(":")
        total += "".join([v for v in values if type(v) is str]).count(":")
    return total


def parse_strict_json(raw: bytes):
    """Decode and parse a body under the rules above; raise :class:`BodyProblem`."""
    data = _orjson_parse(raw)
    if data is _UNSETTLED:
        return _stdlib_parse(raw)
    if b"\\u0000" in raw:
        _check_text(data)
    return data


_UNSETTLED = object()


def _orjson_parse(raw: bytes):
    """The body parsed by orjson when that settles every rule, else ``_UNSETTLED``.

    orjson refuses, with the standard library's parse then naming the problem: text
    that is not UTF-8, unpaired surrogates, NaN and Infinity, a number beyond a
    double, raw control characters in strings, nesting past its own limit. Three
    rules are left:

    - Integers beyond 64 bits, which orjson reads as floats where Python keeps them
      whole: such a float is at least 2**63 in size, and orjson writes every float
      from 1e16 up with an exponent, ``e+``. A body whose value, written back by
      orjson (``written``, a fraction of the parse), has a ``+`` anywhere (such a
      number, or the sign in a string) is left to the other parse.
    - Duplicate keys, which orjson reads as the last one: outside strings, a colon
      separates a key from its value, so the body's colons number its members plus
      the colons in its strings, and the written text's number the parsed entries plus
      the same colons in the same strings (orjson writes a colon as itself). They
      agree only when no key was repeated. A body that may escape a colon (any
      ``\\u003`` escape, such as ``\\u003a``) is left to the other parse, where the
      count allows for it.
    - Depth, by a walk over the containers (``_deeper_than_the_limit``). Written
      back with an indent, the text would show the depth without a walk, but a body
      of deep, short lines would grow a hundredfold in memory.
    """
    try:
        data = orjson.loads(raw)
        written = orjson.dumps(data)
    except (orjson.JSONDecodeError, orjson.JSONEncodeError):  # writing stops at 255 levels
        return _UNSETTLED
    # One-byte and rare searches first: each is a scan of the text at memory speed.
    if (b"+" in written or b"\\u003" in raw or raw.count(b":") != written.count(b":")
            or _deeper_than_the_limit(data)):
        return _UNSETTLED
    return data


def _deeper_than_the_limit(data) -> bool:
    """Whether a container of ``data`` lies inside MAX_DEPTH others (``_levels``'s rule),
    looking at the containers only."""
    level = [data] if type(data) is dict or type(data) is list else []
    for _ in range(MAX_DEPTH):
        level = [v for item in level for v in (item.values() if type(item) is dict else item)
                 if type(v) is dict or type(v) is list]
        if not level:
            return False
    return True


def _stdlib_parse(raw: bytes):
    """The standard library's parse, which settles every body and names its first problem."""
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise BodyProblem(f"must be UTF-8 text (byte {exc.start} is not)") from None
    try:
        data = _loads(text, checked=False)
        settled = not _may_hide_a_duplicate(text, data)
    except BodyProblem:
        settled = False  # the checked parse names the first problem in reading order
    if not settled:
        data = _loads(text, checked=True)
        _objects(data)  # the depth rule, after the rules the parse itself applies
    # JSON can carry U+0000 only as the escape \u0000 (a raw control character is
    # refused by the parser), and an unpaired surrogate only as an escape \ud800 to
    # \udfff (UTF-8 cannot encode one), so a body without such text needs no walk.
    if _NUL_ESCAPE in text or "\\ud" in text or "\\uD" in text:
        _check_text(data)
    return data


class StrictJSONParser(JSONParser):
    def parse(self, stream, media_type=None, parser_context=None):
        charset = (media_type or "").lower().partition("charset=")[2].strip().strip('"')
        if charset and charset not in ("utf-8", "utf8"):
            raise BodyProblem(f"charset {charset!r} is not accepted; send UTF-8 JSON")
        limit = settings.DATA_UPLOAD_MAX_MEMORY_SIZE
        raw = stream.read(limit + 1) if stream is not None else b""
        if limit is not None and len(raw) > limit:
            raise BodyProblem(f"must be at most {limit} bytes")
        if not raw.strip():
            return {}
        return parse_strict_json(raw)
