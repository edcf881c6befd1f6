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
from tests.typed_values import typed


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


# -- the orjson reading (decisions/api/parsers.py ``_orjson_parse``) ------------------------
#
# The reference above compares with ``==``, for which 1 == 1.0 and 0.0 == -0.0; these
# tests compare typed values, bit for bit, against Python's own ``json`` (the reference
# reader of the standard library), so that the fast reading cannot change a value's
# type or its last bit unnoticed.

def _typed_outcome(text: str):
    try:
        return ("accepted", typed(parse_strict_json(text.encode())))
    except BodyProblem as exc:
        return ("refused", str(exc.detail))


def _typed_reference(text: str):
    try:
        return ("accepted", typed(_reference(text)))
    except BodyProblem as exc:
        return ("refused", str(exc.detail))


@settings(max_examples=400, deadline=None)
@given(text=bodies())
def test_the_orjson_reading_keeps_every_type_and_bit(text):
    assert _typed_outcome(text) == _typed_reference(text), text


# Number literals as a client may write them: long mantissas, exponents both ways,
# integers past 64 bits (which orjson would read as floats).
DIGITS = st.text(alphabet="0123456789", min_size=1, max_size=40)
LITERALS = st.one_of(
    st.builds(lambda sign, whole, frac, exp: f"{sign}{whole.lstrip('0') or '0'}"
              f"{'.' + frac if frac else ''}{exp}",
              st.sampled_from(["", "-"]), DIGITS, st.one_of(st.just(""), DIGITS),
              st.one_of(st.just(""), st.integers(-340, 340).map(lambda e: f"e{e}"),
                        st.integers(0, 340).map(lambda e: f"E+{e}"))),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
    st.integers(-2**70, 2**70).map(str),
    # Hard cases for correct rounding (halfway points, the smallest normals and
    # subnormals), from the literature on decimal-to-binary conversion (common practice).
    st.sampled_from(["2.2250738585072011e-308", "2.2250738585072012e-308",
                     "4.9406564584124654e-324", "2.4703282292062328e-324",
                     "9007199254740993", "9007199254740993.0", "1.7976931348623158e308",
                     "0.1000000000000000055511151231257827", "18446744073709551616",
                     "-9223372036854775809", "9223372036854775807", "18446744073709551615"]),
)


@settings(max_examples=1500, deadline=None)
@given(literal=LITERALS)
def test_numbers_read_as_the_standard_library_reads_them(literal):
    text = f'{{"amount": {literal}, "list": [{literal}]}}'
    assert _typed_outcome(text) == _typed_reference(text), text


@pytest.mark.parametrize("literal", ["123456789012345678901234567890", "-9223372036854775809",
                                     "18446744073709551616"])
def test_integers_past_64_bits_stay_whole(literal):
    # orjson reads these as floats; the body goes to the standard library's parse.
    assert parse_strict_json(f'{{"n": {literal}}}'.encode()) == {"n": int(literal)}
    assert type(parse_strict_json(f'[{literal}]'.encode())[0]) is int


def _nested(levels: int, inner: str = "1") -> str:
    return "[" * levels + inner + "]" * levels


@pytest.mark.parametrize(("text", "accepted"), [
    (_nested(MAX_DEPTH), True),
    (_nested(MAX_DEPTH - 1, "[]"), True),
    (_nested(MAX_DEPTH, "[]"), False),
    (_nested(MAX_DEPTH, "{}"), False),
    (_nested(MAX_DEPTH + 1), False),
    ('{"a":' * (MAX_DEPTH - 1) + '{"b": 1}' + "}" * (MAX_DEPTH - 1), True),
    ('{"a":' * MAX_DEPTH + '{"b": 1}' + "}" * MAX_DEPTH, False),
    (_nested(300), False),  # past orjson's own writing limit (255 levels)
    (_nested(2000), False),  # past its reading limit (1024 levels)
])
def test_depth_limit_at_its_edge(text, accepted):
    outcome = _typed_outcome(text)
    if len(text) < 1000:  # the reference's recursive depth count would overflow the stack
        assert outcome == _typed_reference(text)
    if accepted:
        assert outcome[0] == "accepted"
    else:
        assert outcome == ("refused", f"must not nest deeper than {MAX_DEPTH} levels")


@pytest.mark.parametrize("text", [
    '{"a": 1, "a": 2}',
    '{"n": "a:b", "n": "c"}',
    '[{"x": {"k": 1, "k": 1}}]',
    '{"t": "12\\u003a30", "a": 1, "a": 2}',
    '{"note": "a + b", "a": 1, "a": 2}',
])
def test_duplicates_are_named_whichever_parse_reads_them(text):
    assert _typed_outcome(text)[0] == "refused"
    assert "duplicate key" in _typed_outcome(text)[1]
    assert _typed_outcome(text) == _typed_reference(text)


@pytest.mark.parametrize("text", ['{"a": "\\u0000"}', '{"\\u0000": 1}', '["ok", ["\\u0000"]]'])
def test_nul_is_refused_after_the_orjson_reading(text):
    outcome = _typed_outcome(text)
    assert outcome[0] == "refused" and "U+0000" in outcome[1]


@pytest.mark.parametrize("raw", [b'{"a": NaN}', b'{"a": Infinity}', b'\xef\xbb\xbf{}',
                                 b'{"a": "\xff"}', b'{"a": "\\ud800"}', b'{"a": 1,}',
                                 b'{"a": "\x01"}'])
def test_what_orjson_refuses_is_decided_by_the_standard_library(raw):
    from decisions.api.parsers import _UNSETTLED, _orjson_parse, _stdlib_parse

    assert _orjson_parse(raw) is _UNSETTLED
    try:
        expected = ("accepted", typed(_stdlib_parse(raw)))
    except BodyProblem as exc:
        expected = ("refused", str(exc.detail))
    try:
        got = ("accepted", typed(parse_strict_json(raw)))
    except BodyProblem as exc:
        got = ("refused", str(exc.detail))
    assert got == expected


def test_an_ordinary_model_body_is_settled_by_the_orjson_reading():
    # The point of the fast reading: a model as clients send it never needs the other
    # parse. (Colons in names and a '+' would send it there, at a cost, not an error.)
    from decisions.api.parsers import _UNSETTLED, _orjson_parse
    from tests.benchmarks.bench_inputs import alternating_tree

    raw = json.dumps({"document": alternating_tree(199, seed=7)}).encode()
    data = _orjson_parse(raw)
    assert data is not _UNSETTLED
    assert typed(data) == typed(json.loads(raw))


@pytest.mark.parametrize(("raw", "location", "message"), [
    (b'{"title": "a\\ud800b"}', "body.title",
     "must not contain an unpaired surrogate (U+D800); send Unicode text"),
    (b'{"a": ["ok", "\\udfff"]}', "body.a[1]",
     "must not contain an unpaired surrogate (U+DFFF); send Unicode text"),
    (b'{"policy": {"\\uDBFF": 1}}', "body.policy",
     "object keys must not contain an unpaired surrogate (U+DBFF); send Unicode text"),
])
def test_unpaired_surrogates_are_refused_with_their_place(raw, location, message):
    # PostgreSQL's jsonb refuses them and UTF-8 cannot carry them in an answer (the
    # Unicode Standard, D75: a surrogate code point is not a scalar value).
    with pytest.raises(BodyProblem) as caught:
        parse_strict_json(raw)
    assert (caught.value.location, str(caught.value.detail)) == (location, message)


def test_a_surrogate_pair_is_one_character_and_accepted():
    raw = b'{"title": "heat \\ud83d\\udd25 pump"}'
    assert parse_strict_json(raw) == {"title": "heat \U0001f525 pump"} == json.loads(raw)


def test_a_deep_body_of_many_values_is_settled_on_the_fast_path():
    # A body 63 levels deep holding many short values is accepted on the fast path:
    # the depth rule is a walk over the containers, which costs nothing per nesting
    # level of text (an indented rewrite would repeat ~126 spaces per value).
    from decisions.api.parsers import _UNSETTLED, _orjson_parse

    raw = b"[" * 63 + b",".join([b"1"] * 10_000) + b"]" * 63
    data = _orjson_parse(raw)
    assert data is not _UNSETTLED
    inner = data
    for _ in range(62):
        inner = inner[0]
    assert inner == [1] * 10_000
    assert _orjson_parse(b"[" * 65 + b"1" + b"]" * 65) is _UNSETTLED  # left to the other parse
