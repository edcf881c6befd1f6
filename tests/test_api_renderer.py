"""The evaluate endpoint's orjson renderer against DRF's own JSON renderer.

decisions/api/renderers.py writes result documents with orjson. The reference is
DRF's ``JSONRenderer`` (the standard library's encoder with DRF's settings): every
value must read back the same, typed and to the last bit, and whatever orjson would
write differently must come out as DRF's bytes exactly.
"""

from __future__ import annotations

import datetime
import decimal
import json

import pytest
from django.utils.translation import gettext_lazy
from hypothesis import given, settings
from hypothesis import strategies as st
from rest_framework.renderers import JSONRenderer

from decisions.api.renderers import CoreResultRenderer
from tests.personas import small_table
from tests.typed_values import typed

TEXT = st.text(st.characters(blacklist_categories=("Cs",)), max_size=12) | st.sampled_from(
    ["line\u2028break", "para\u2029graph", "quote \" and \\ back", "ctl \x00 \x1f", "é €"])
SCALARS = (st.none() | st.booleans() | st.integers(-2**63, 2**64 - 1)
           | st.floats(allow_nan=False, allow_infinity=False) | TEXT)
VALUES = st.recursive(SCALARS, lambda inner: st.lists(inner, max_size=5)
                      | st.dictionaries(TEXT, inner, max_size=5), max_leaves=40)


@settings(max_examples=300, deadline=None)
@given(value=VALUES)
def test_every_plain_value_reads_back_as_drf_writes_it(value):
    ours = CoreResultRenderer().render(value)
    drf = JSONRenderer().render(value)
    if value is None:  # DRF writes no body for no data
        assert ours == drf == b""
        return
    assert typed(json.loads(ours)) == typed(json.loads(drf))
    # DRF escapes the two JavaScript line terminators; so must we.
    assert "\u2028".encode() not in ours and "\u2029".encode() not in ours


@pytest.mark.parametrize("value", [
    {"when": datetime.datetime(2026, 12, 2, 9, 30, 15, 123456, tzinfo=datetime.UTC)},
    {"day": datetime.date(2026, 12, 2)},
    {"amount": decimal.Decimal("12.50")},
    {"label": gettext_lazy("Invented label")},
    {"big": 2**70},
    {1: "a key that is not a string"},
    [{"nested": {"at": datetime.time(9, 30)}}],
])
def test_values_orjson_would_write_its_own_way_are_written_by_drf(value):
    assert CoreResultRenderer().render(value) == JSONRenderer().render(value)


def test_an_indent_asked_for_is_drfs_indent():
    value = {"a": [1, 2.5, None]}
    media = "application/json; indent=2"
    assert (CoreResultRenderer().render(value, media, {})
            == JSONRenderer().render(value, media, {}))
    assert b"\n" in CoreResultRenderer().render(value, media, {})


def test_no_data_is_no_body():
    assert CoreResultRenderer().render(None) == b""


@pytest.mark.django_db
def test_the_evaluate_endpoint_answers_the_same_document(people, client_for):
    import valuation

    doc = small_table()
    response = client_for(people.ana).post("/api/evaluate/", {"document": doc}, format="json")
    assert response.status_code == 200
    assert response["Content-Type"] == "application/json"
    expected = JSONRenderer().render(valuation.evaluate(doc))
    assert typed(json.loads(response.content)) == typed(json.loads(expected))


@pytest.mark.django_db
def test_the_evaluate_endpoint_still_offers_the_browsable_page(people, client_for):
    response = client_for(people.ana).post("/api/evaluate/", {"document": small_table()},
                                           format="json", HTTP_ACCEPT="text/html")
    assert response.status_code == 200
    assert response["Content-Type"].startswith("text/html")


def test_the_evaluate_endpoint_renders_with_orjson():
    # The figures above hold for either renderer; this holds the endpoint to the fast one.
    from decisions.api.views_extra import EvaluateView

    assert EvaluateView.renderer_classes[0] is CoreResultRenderer
