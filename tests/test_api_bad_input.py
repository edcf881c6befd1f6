"""Bad input gets 400 with located messages, never a 500; hostile JSON is refused early."""

import json

import pytest

from tests.personas import small_table

pytestmark = pytest.mark.django_db


def _post_raw(client, url, body: bytes, content_type="application/json"):
    return client.generic("POST", url, body, content_type=content_type)


@pytest.mark.parametrize(("body", "location", "message"), [
    (b'{"a": NaN}', "body", "NaN is not a valid JSON number; send a finite number"),
    (b'{"a": Infinity}', "body", "Infinity is not a valid JSON number; send a finite number"),
    (b'{"a": 1, "a": 2}', "body", "duplicate key 'a' in one object"),
    (b'{"document": {"title": "x\\u0000"}}', "body.document.title",
     "must not contain the character U+0000"),
    (b"[" * 65 + b"]" * 65, "body", "must not nest deeper than 64 levels"),
    (b'{"a": [' * 33 + b"1" + b"]}" * 33, "body",
     "must not nest deeper than 64 levels"),
    (b'{"document": {"x\\u0000": 1}}', "body.document", "object keys must not contain U+0000"),
    (b"[" * 20000 + b"]" * 20000, "body", "must not nest deeper than 64 levels"),
    (b'{"a": "\xff"}', "body", "must be UTF-8 text (byte 7 is not)"),
    (b'{"document": {"kind": "tree", "title": "a\\ud800b"}}', "body.document.title",
     "must not contain an unpaired surrogate (U+D800); send Unicode text"),
    (b'{"a": ', "body", "is not valid JSON: Expecting value: line 1 column 7 (char 6)"),
])
def test_hostile_json_is_refused_with_a_located_message(people, client_for, body, location,
                                                        message):
    response = _post_raw(client_for(people.ana), "/api/evaluate/", body)
    assert response.status_code == 400
    assert response.json() == {"errors": [{"location": location, "message": message}],
                               "code": "invalid_body"}


def test_strings_that_look_like_brackets_do_not_count_as_nesting(people, client_for):
    doc = small_table(title="[" * 100)
    response = client_for(people.ana).post("/api/evaluate/", {"document": doc}, format="json")
    assert response.status_code == 200, response.data


@pytest.mark.parametrize("body", [
    b"[" * 64 + b"]" * 64,  # exactly the limit
    b'{"a": [' * 32 + b"1" + b"]}" * 32,  # objects and lists, exactly the limit
    b'{"document": {"title": "back\\\\u0000slash"}}',  # an escaped backslash, then text
])
def test_bodies_within_the_rules_reach_the_view(people, client_for, body):
    response = _post_raw(client_for(people.ana), "/api/evaluate/", body)
    assert response.status_code == 400  # the parser accepts; the view refuses the content
    assert response.json()["code"] != "invalid_body", response.json()


def test_an_oversized_body_is_refused(people, client_for, settings):
    settings.DATA_UPLOAD_MAX_MEMORY_SIZE = 2048
    body = json.dumps({"document": {"title": "x" * 4096}}).encode()
    response = _post_raw(client_for(people.ana), "/api/evaluate/", body)
    assert response.status_code == 400


def test_a_foreign_charset_is_refused(people, client_for):
    response = _post_raw(client_for(people.ana), "/api/evaluate/", b"{}",
                         content_type="application/json; charset=bz2_codec")
    assert response.status_code == 400
    assert response.json()["errors"][0]["message"] == \
        "charset 'bz2_codec' is not accepted; send UTF-8 JSON"


def test_form_bodies_are_not_accepted(people, client_for):
    response = client_for(people.ana).post("/api/evaluate/", {"document": "x"})
    assert response.status_code == 415


@pytest.mark.parametrize(("change", "location", "message"), [
    ({"states": [{"name": "hot", "probability": 1.2}, {"name": "cold", "probability": 0.6}]},
     "document.states[0].probability", "must be within [0, 1], got 1.2"),
    ({"objective": "most"}, "document.objective", None),
    ({"alternatives": []}, "document.alternatives", None),
])
def test_an_invalid_model_gets_the_cores_messages(people, client_for, change, location,
                                                   message):
    import valuation

    doc = small_table(**change)
    expected = [{"location": f"document.{p.location}", "message": p.message}
                for p in valuation.validate(doc)]
    response = client_for(people.ana).post("/api/evaluate/", {"document": doc}, format="json")
    assert response.status_code == 400
    assert response.data["errors"] == expected
    assert location in [e["location"] for e in expected]
    if message:
        assert {"location": location, "message": message} in expected


def test_evaluate_returns_the_cores_result_document(people, client_for):
    import valuation

    doc = small_table()
    response = client_for(people.vic).post("/api/evaluate/", {"document": doc}, format="json")
    assert response.status_code == 200
    # Same document as the core's own output (JSON round trip of plain floats).
    assert response.json() == json.loads(json.dumps(valuation.evaluate(doc)))
    # Expected value without information: max(0.4*9e6 + 0.6*(-1e6), 2.5e6) = 3.0e6,
    # worked by hand (common practice: expected value of each alternative).
    assert response.json()["without_information"]["expected_value"] == pytest.approx(3.0e6)


@pytest.mark.parametrize(("body", "errors"), [
    ({"team": "x", "title": "t"}, [{"location": "team", "message": "A valid integer is required."}]),
    ({"team": 1, "title": ""}, [{"location": "title", "message": "This field may not be blank."}]),
    ({"team": 1, "title": "t", "status": "approved"},
     [{"location": "status", "message": "is not an accepted field here"}]),
    ({"team": 1, "title": "t", "policy": {"chief": 1}},
     [{"location": "policy.chief", "message": "must be one of the signing roles "
       "'financial review', 'operations', 'budget holder'"}]),
    ({"team": 1, "title": "t", "policy": {"operations": 0}},
     [{"location": "policy.operations", "message": "must be within [1, 10], got 0"}]),
])
def test_bad_decision_input_is_located(people, client_for, body, errors):
    if body.get("team") == 1:
        body["team"] = people.team.pk
    response = client_for(people.ana).post("/api/decisions/", body, format="json")
    assert response.status_code == 400
    assert response.data["errors"] == errors


@pytest.mark.parametrize(("query", "location"), [
    ("status=pending", "status"), ("team=x", "team"), ("created_after=yesterday", "created_after"),
])
def test_bad_filters_get_400(people, client_for, query, location):
    response = client_for(people.ana).get(f"/api/decisions/?{query}")
    assert response.status_code == 400
    assert response.data["errors"][0]["location"] == location


def test_filters_select_by_status_and_owner(draft, people, client_for):
    client = client_for(people.vic)
    assert client.get("/api/decisions/?status=draft").data["count"] == 1
    assert client.get("/api/decisions/?status=closed").data["count"] == 0
    assert client.get("/api/decisions/?owner=ana").data["count"] == 1
    assert client.get(f"/api/decisions/?team={people.team.pk}").data["count"] == 1


def test_a_huge_integer_is_refused_not_crashed(people, client_for):
    body = b'{"document": {"discount_rate": ' + b"9" * 5000 + b"}}"
    response = _post_raw(client_for(people.ana), "/api/evaluate/", body)
    assert response.status_code == 400
    assert response.json()["errors"][0]["message"].startswith("is not valid JSON: Exceeds the "
                                                              "limit (4300 digits)")


@pytest.mark.parametrize(("url", "body", "field"), [
    ("/api/decisions/{pk}/versions/", {"document": {}, "author": "fred"}, "author"),
    ("/api/decisions/{pk}/versions/", {"document": {}, "content_sha256": "0" * 64},
     "content_sha256"),
    ("/api/decisions/{pk}/versions/1/signoffs/",
     {"role": "operations", "meaning": "approve", "password": "x", "signer": "olga"}, "signer"),
    ("/api/decisions/{pk}/strategy/", {"recommended": True, "chosen_by": "bea"}, "chosen_by"),
    ("/api/decisions/{pk}/", {"status": "approved"}, "status"),
])
def test_server_owned_fields_cannot_be_assigned(draft, people, client_for, url, body, field):
    client = client_for(people.olga if "signoffs" in url else people.ana)
    method = client.patch if url.endswith("{pk}/") else client.post
    response = method(url.format(pk=draft.pk), body, format="json", HTTP_IF_MATCH=draft.etag)
    assert response.status_code == 400
    assert {"location": field, "message": "is not an accepted field here"} in \
        response.data["errors"]


@pytest.mark.parametrize("tolerance", [-5, 0])
def test_a_risk_tolerance_that_is_not_positive_is_named_as_such(people, client_for, tolerance):
    body = {"document": small_table(), "risk_tolerance": tolerance}
    response = client_for(people.ana).post("/api/evaluate/", body, format="json")
    assert response.status_code == 400
    assert response.json()["errors"] == [
        {"location": "risk_tolerance",
         "message": f"must be a positive finite number, got {float(tolerance)}"}]


def test_a_model_whose_amounts_would_overflow_gets_400_at_its_largest_amount(people, client_for):
    # Finite amounts whose sum is beyond a double (about 1.8e308, IEEE 754): the expected
    # value was inf, which JSON cannot carry, and the answer a 500. The project rule
    # (valuation.limits.AMOUNT_TOTAL_LIMIT, 1e300) refuses the model by name instead.
    doc = {"kind": "tree", "title": "t", "root": "d", "nodes": [
        {"id": "d", "kind": "decision", "branches": [
            {"label": "a", "to": "e", "cash_flow": 1.5e308}, {"label": "b", "to": "f"}]},
        {"id": "e", "kind": "end", "payoff": 1.5e308}, {"id": "f", "kind": "end", "payoff": 0}]}
    response = client_for(people.ana).post("/api/evaluate/", {"document": doc}, format="json")
    assert response.status_code == 400
    assert response.json()["errors"] == [{
        "location": "document.nodes[0].branches[0].cash_flow",
        "message": "payoffs and cash flows (after discounting) must total less than 1e+300 in "
                   "absolute value, so that no total or expected value overflows; they total "
                   "more than a double holds (about 1.8e+308), and this amount is the largest"}]
