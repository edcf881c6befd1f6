"""The strict JSON parser's fast path against a plain checked reference.

``parse_strict_json`` parses without a per-object hook and looks for hidden duplicate
keys by counting colons (decisions/api/parsers.py). The reference here is the
straightforward rule, written independently: Python's ``json`` with a hook that
refuses a repeated key in one object, a finite-number check and a recursive depth
count. Both must accept the same bodies with the same result, and refuse the same
bodies with the same message.
"""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from decisions.api.parsers import MAX_DEPTH, BodyProblem, parse_strict_json


class Pairs(list):
    """An object as written, key by key: it may repeat a key."""


def _reference(text: str):
    def pairs_hook(pairs):
        out = {}
        for key, value in pairs:
            if key in out:
                raise BodyProblem(f"duplicate key {key!r} in one object")
            out[key] = value
        return out

    def finite(literal):
        value = float(literal)
        if math.isinf(value):
            raise BodyProblem(f"the number {literal[:40]} is beyond the range of a double "
                              f"(about ±1.8e308); send a finite number")
        return value

    def constant(name):
        raise BodyProblem(f"{name} is not a valid JSON number; send a finite number")

    def depth(value) -> int:
        if isinstance(value, dict):
            return 1 + max(map(depth, value.values()), default=0)
        if isinstance(value, list):
            return 1 + max(map(depth, value), default=0)
        return 0

    data = json.loads(text, object_pairs_hook=pairs_hook, parse_float=finite,
                      parse_constant=constant)
    if depth(data) > MAX_DEPTH:
        raise BodyProblem(f"must not nest deeper than {MAX_DEPTH} levels")
    return data


def _outcome(parse, text: str):
    try:
        return ("accepted", parse(text))
    except BodyProblem as exc:
        return ("refused", str(exc.detail))


# Keys and texts with colons in them, the case the fast path cannot settle alone.
KEYS = st.sampled_from(["a", "b", "id", ":", "a:b", "time", "x y"])
TEXTS = st.sampled_from(["", "plain", "12:30", "http://example.invalid", "::", "{", "]"])
NUMBERS = st.one_of(st.integers(-10**6, 10**6), st.floats(allow_nan=False, allow_infinity=False),
                    st.sampled_from(["1e400", "-1e400", "1e308", "2.5e-400"]).map("float".__add__))


def _render(value, draw) -> str:
    if isinstance(value, Pairs):
        members = []
        for key, sub in value:
            written = json.dumps(key)
            if ":" in key and draw(st.booleans()):
                written = written.replace(":", "\\u003a")  # an escaped colon: not a literal one
            members.append(written + draw(st.sampled_from([":", ": ", " : "])) + _render(sub, draw))
        return "{" + ", ".join(members) + "}"
    if isinstance(value, list):
        return "[" + ",".join(_render(sub, draw) for sub in value) + "]"
    if isinstance(value, str) and value.startswith("float"):
        return value.removeprefix("float")  # a number literal written as such (1e400)
    if isinstance(value, str) and ":" in value and draw(st.booleans()):
        return json.dumps(value).replace(":", "\\u003a")
    return json.dumps(value)


@st.composite
def bodies(draw):
    leaves = st.one_of(st.none(), st.booleans(), NUMBERS, TEXTS)
    tree = st.recursive(leaves, lambda inner: st.one_of(
        st.lists(inner, max_size=4),
        st.lists(st.tuples(KEYS, inner), max_size=4).map(Pairs)), max_leaves=25)
    return _render(draw(tree), draw)


@settings(max_examples=400, deadline=None)
@given(text=bodies())
def test_fast_path_agrees_with_the_checked_reference(text):
    ours = _outcome(lambda t: parse_strict_json(t.encode()), text)
    assert ours == _outcome(_reference, text), text


@pytest.mark.parametrize(("text", "message"), [
    # a colon inside a string hides nothing, but sends the body to the checked parse
    ('{"t": "12:30", "a": 1, "a": 2}', "duplicate key 'a' in one object"),
    # one duplicate and one escaped colon in a key: the counts still disagree
    ('{"\\u003a": 1, "a": 1, "a": 2}', "duplicate key 'a' in one object"),
    ('{"a": {"b": 1, "b": 1}}', "duplicate key 'b' in one object"),
    ('{"a": [1e400]}', "the number 1e400 is beyond the range of a double (about ±1.8e308); "
                       "send a finite number"),
    ("-1e400", "the number -1e400 is beyond the range of a double (about ±1.8e308); "
               "send a finite number"),
])
def test_hidden_problems_are_found_and_named(text, message):
    assert _outcome(lambda t: parse_strict_json(t.encode()), text) == ("refused", message)
    assert _outcome(_reference, text) == ("refused", message)


def test_colons_counted_inside_strings_still_expose_a_duplicate():
    # Two colons inside strings and one duplicate: the body's 7 colons less the 2 in
    # strings make 5 members, against 4 parsed entries.
    text = '{"a": 1, "t": "09:30", "u": {"k:v": 2}, "a": 3}'
    assert _outcome(lambda t: parse_strict_json(t.encode()), text) == \
        ("refused", "duplicate key 'a' in one object")


def test_colons_inside_strings_are_accepted_with_the_same_result():
    text = '{"title": "Phase 2: pilot", "when": "09:00", "a": {"b:c": [1, 2.5]}}'
    assert parse_strict_json(text.encode()) == json.loads(text)
