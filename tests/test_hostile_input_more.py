"""Hostile input beyond the JSON parser's own table (tests/test_api_bad_input.py):
huge numbers, unicode edge cases in names, size limits on every body type, upload
names that try to leave the folder, and paths no route matches.

T4.3 of the reliability notes: every one gets a 4xx with our JSON error body, never a 5xx.
"""

import json
from urllib.parse import urlencode

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile

from decisions.models import AuditEvent, Decision
from decisions.services import sources
from tests.personas import small_table

pytestmark = pytest.mark.django_db

CLAIM = {"hot": {"good": 0.9, "poor": 0.1}, "cold": {"good": 0.2, "poor": 0.8}}


def _post_raw(client, url, body: bytes, content_type="application/json", **extra):
    return client.generic("POST", url, body, content_type=content_type, **extra)


def _is_json_error(response, status):
    assert response.status_code == status, response.content[:300]
    body = response.json()
    assert body["errors"] and all(set(e) == {"location", "message"} for e in body["errors"])
    return body


@pytest.mark.parametrize("number", [
    "9" * 5000,            # beyond CPython's 4300-digit int conversion limit
    "1e400",               # overflows a float to infinity without the word Infinity
    "-1e400",
    "1" + "0" * 400,       # a big integer that fits in Python but not in a payoff
])
def test_huge_numbers_in_a_model_are_refused_not_crashed_on(people, client_for, number):
    doc = json.dumps(small_table()).replace("9000000", number, 1).encode()
    r = _post_raw(client_for(people.ana), "/api/evaluate/", b'{"document": ' + doc + b"}")
    body = _is_json_error(r, 400)
    assert body["errors"][0]["location"] in ("body", "document.alternatives[0].payoffs.hot"), body
    assert "range" in body["errors"][0]["message"] or "digits" in body["errors"][0]["message"], body


@pytest.mark.parametrize("title", [
    "Wärmepumpe \u00e9\u0301 (combining accent)",
    "\u202eevil\u202c right-to-left override",
    "\U0001F525 heat \U0001F30D",          # outside the Basic Multilingual Plane
    "zero\u200bwidth\ufeffspace",
    "\u0627\u0644\u062d\u0631\u0627\u0631\u0629",  # Arabic
])
def test_unicode_edge_cases_in_names_are_stored_and_returned_exactly(people, client_for, title):
    r = client_for(people.ana).post("/api/decisions/", {"team": people.team.pk, "title": title},
                                    format="json")
    assert r.status_code == 201, r.content
    assert Decision.objects.get(pk=r.json()["id"]).title == title
    assert client_for(people.ana).get(f"/api/decisions/{r.json()['id']}/").json()["title"] == title


def test_a_lone_surrogate_in_a_name_is_refused_with_400(people, client_for):
    body = b'{"team": %d, "title": "half a pair \\ud800 here"}' % people.team.pk
    before = AuditEvent.objects.count()
    r = _post_raw(client_for(people.ana), "/api/decisions/", body)
    _is_json_error(r, 400)
    assert AuditEvent.objects.count() == before


def test_the_body_limit_holds_for_multipart_uploads(people, client_for, settings):
    settings.DATA_UPLOAD_MAX_MEMORY_SIZE = 4096
    source = sources.create_source(actor=people.ana, team=people.team, name="S (invented)",
                                   claimed=CLAIM)
    big = b"date,signal,state\n" + b"2020-01-01,good,hot\n" * 400_000  # about 8 MB
    r = client_for(people.ana).post(f"/api/sources/{source.pk}/import/",
                                    {"file": SimpleUploadedFile("big.csv", big, "text/csv")},
                                    format="multipart")
    assert 400 <= r.status_code < 500
    _is_json_error(r, r.status_code)
    assert source.records.count() == 0


def test_the_body_limit_holds_for_the_token_endpoint_form(db, client, settings):
    settings.DATA_UPLOAD_MAX_MEMORY_SIZE = 2048
    r = client.post("/api/token/", urlencode({"username": "x" * 5000, "password": "y"}),
                    content_type="application/x-www-form-urlencoded")
    _is_json_error(r, 400)


def test_an_upload_name_that_climbs_folders_is_only_a_label(people, client_for, tmp_path):
    source = sources.create_source(actor=people.ana, team=people.team, name="S (invented)",
                                   claimed=CLAIM)
    data = b"date,signal,state\n2020-01-01,good,hot\n2020-02-01,poor,cold\n"
    r = client_for(people.ana).post(
        f"/api/sources/{source.pk}/import/",
        {"file": SimpleUploadedFile("../../etc/passwd", data, "text/csv")}, format="multipart")
    assert r.status_code == 201, r.content
    assert r.json()["file"] == "passwd"
    event = AuditEvent.objects.filter(action="source.import").latest("seq")
    assert event.payload["file"] == "passwd" and "/" not in event.payload["file"]


def test_a_path_no_api_route_matches_answers_json_404(people, client_for):
    r = client_for(people.ana).get("/api/decisions/not-a-number/versions/")
    assert _is_json_error(r, 404)["code"] == "not_found"
    assert client_for(people.ana).get("/no-such-page/")["Content-Type"].startswith("text/html")


def test_options_is_not_offered_and_never_crashes(people, client_for, draft):
    """Found by the schema fuzzer: DRF's OPTIONS description raised on a view without a
    serializer class (a 500); the API now answers 405 to OPTIONS everywhere."""
    for url in [f"/api/decisions/{draft.pk}/apply-source/", "/api/decisions/", "/api/evaluate/"]:
        r = client_for(people.ana).options(url)
        assert _is_json_error(r, 405)["code"] == "method_not_allowed"
