"""Token authentication (decisions.api.authentication): DRF's answers, one raw query.

The reference is DRF's own ``rest_framework.authentication.TokenAuthentication``:
for every key below, ours must accept or refuse exactly as it does, and give back
a user equal field for field (values and types) to the one the ORM loads.
"""

from __future__ import annotations

import pytest
from django.contrib.auth import get_user_model
from django.db import connection
from django.test.utils import CaptureQueriesContext
from rest_framework import authentication as drf_authentication
from rest_framework.authtoken.models import Token
from rest_framework.exceptions import AuthenticationFailed
from rest_framework.test import APIClient

from decisions.api.authentication import TokenAuthentication
from tests.personas import PASSWORD

pytestmark = pytest.mark.django_db

TREE = {"kind": "tree", "title": "Token check (invented)", "root": "d", "nodes": [
    {"id": "d", "kind": "decision", "branches": [
        {"label": "go", "to": "e1", "cash_flow": -5}, {"label": "stop", "to": "e2"}]},
    {"id": "e1", "kind": "end", "payoff": 20}, {"id": "e2", "kind": "end", "payoff": 0}]}


def _outcome(auth, key):
    try:
        user, token = auth.authenticate_credentials(key)
    except AuthenticationFailed as exc:
        return ("refused", str(exc.detail))
    return ("accepted", user.pk, token.key, token.user_id)


def _fields(user) -> dict:
    return {f.attname: (type(getattr(user, f.attname)), getattr(user, f.attname))
            for f in get_user_model()._meta.concrete_fields}


def test_same_answers_as_drf_for_good_unknown_inactive_and_hostile_keys(people):
    good = Token.objects.create(user=people.ana).key
    inactive = Token.objects.create(user=people.fred).key
    people.fred.is_active = False
    people.fred.save(update_fields=["is_active"])
    keys = [good, inactive, "0" * 40, "", good.upper(), good[:-1], "' OR '1'='1", good + " "]
    ours, drf = TokenAuthentication(), drf_authentication.TokenAuthentication()
    for key in keys:
        assert _outcome(ours, key) == _outcome(drf, key), key
    assert _outcome(ours, good)[0] == "accepted"
    assert _outcome(ours, inactive) == ("refused", "User inactive or deleted.")
    assert _outcome(ours, "0" * 40) == ("refused", "Invalid token.")


def test_user_is_the_one_the_orm_loads_field_for_field(people):
    people.ana.last_login = people.ana.date_joined
    people.ana.save(update_fields=["last_login"])
    key = Token.objects.create(user=people.ana).key
    user, token = TokenAuthentication().authenticate_credentials(key)
    expected = Token.objects.select_related("user").get(key=key).user
    # Types too: SQLite stores booleans as integers and datetimes as text; the
    # database converters must still give bool and time-zone-aware datetime.
    assert _fields(user) == _fields(expected)
    assert user.is_active is True and user.date_joined.tzinfo is not None
    assert token.key == key and token.user is user and not token._state.adding
    stored = Token.objects.get(key=key)
    assert token.created == stored.created and token.created.tzinfo is not None
    assert not hasattr(user, "token_created_for_auth")


def test_one_query_per_authenticated_request(people):
    key = Token.objects.create(user=people.ana).key
    with CaptureQueriesContext(connection) as queries:
        TokenAuthentication().authenticate_credentials(key)
    assert len(queries) == 1
    # The join itself, not the ORM's select_related (whose select list names every column).
    assert queries[0]["sql"].startswith("SELECT u.*, t.")


def test_api_with_issued_token_unknown_token_and_inactive_user(people):
    anonymous = APIClient()
    issued = anonymous.post("/api/token/", {"username": "ana", "password": PASSWORD},
                            format="json").json()["token"]
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {issued}")
    assert client.post("/api/evaluate/", {"document": TREE}, format="json").status_code == 200
    assert client.get("/api/decisions/").status_code == 200

    stranger = APIClient()
    stranger.credentials(HTTP_AUTHORIZATION="Token " + "f" * 40)
    r = stranger.get("/api/decisions/")
    # 403, not 401: session authentication comes first in the settings and DRF takes the
    # status from the first class, which sends no WWW-Authenticate challenge.
    assert r.status_code == 403
    assert r.json() == {"errors": [{"location": "", "message": "Invalid token."}],
                        "code": "authentication_failed"}

    people.ana.is_active = False
    people.ana.save(update_fields=["is_active"])
    r = client.get("/api/decisions/")
    assert r.status_code == 403
    assert r.json()["errors"][0]["message"] == "User inactive or deleted."


def test_malformed_header_is_refused_before_any_lookup(people):
    for header in ("Token", "Token a b", "Token \u00e9t\u00e9"):
        client = APIClient()
        client.credentials(HTTP_AUTHORIZATION=header)
        r = client.get("/api/decisions/")
        assert r.status_code == 403, header
        assert r.json()["code"] == "authentication_failed"


def test_unreadable_and_nul_keys_are_refused_not_a_server_error(people):
    # DRF's own class answers both with a 500: the header cannot be encoded as
    # ISO-8859-1 (HTTP's header encoding), and PostgreSQL refuses U+0000 in a query.
    cases = {"Token \ud800" + "a" * 39: "Invalid token header. Token string should not "
                                           "contain invalid characters.",
             "Token \u20ac" + "a" * 39: "Invalid token header. Token string should not "
                                         "contain invalid characters.",
             "Token " + "a" * 20 + "\x00" + "a" * 19: "Invalid token."}
    for header, message in cases.items():
        client = APIClient()
        client.credentials(HTTP_AUTHORIZATION=header)
        r = client.get("/api/decisions/")
        assert r.status_code == 403, (header, r.status_code)
        assert r.json() == {"errors": [{"location": "", "message": message}],
                            "code": "authentication_failed"}, header


def test_revoked_token_no_longer_works_on_the_next_request(people):
    # Nothing is cached between requests: removing the row revokes the key at once.
    key = Token.objects.create(user=people.bea).key
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {key}")
    assert client.get("/api/decisions/").status_code == 200
    Token.objects.filter(key=key).delete()
    r = client.get("/api/decisions/")
    assert r.status_code == 403 and r.json()["errors"][0]["message"] == "Invalid token."
