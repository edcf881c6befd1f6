"""Sign-in lockout per (username, address) on the web form and the API token endpoint."""

import pytest
from django.core.cache import cache
from rest_framework.test import APIClient

from decisions.models import AuditEvent
from decisions.services.audit import verify_chain
from tests.personas import PASSWORD

pytestmark = pytest.mark.django_db

LIMIT = 3


@pytest.fixture(autouse=True)
def _small_limit(settings):
    settings.LOGIN_FAILURE_LIMIT = LIMIT
    settings.LOGIN_LOCKOUT_SECONDS = 600
    cache.clear()
    yield
    cache.clear()


def _web_login(client, username, password, address="203.0.113.7"):
    return client.post("/login/", {"username": username, "password": password},
                       REMOTE_ADDR=address)


def _token(username, password, address="203.0.113.7"):
    return APIClient().post("/api/token/", {"username": username, "password": password},
                            format="json", REMOTE_ADDR=address)


def test_the_web_form_locks_a_username_and_address_after_repeated_failures(people, client):
    for _ in range(LIMIT - 1):
        assert _web_login(client, "ana", "wrong").status_code == 200  # form shown again
    assert _web_login(client, "ana", "wrong").status_code == 429  # the failure that locks
    r = _web_login(client, "ana", PASSWORD)
    assert r.status_code == 429
    assert int(r["Retry-After"]) > 0
    assert "Too many failed sign-ins" in r.content.decode()
    assert "_auth_user_id" not in client.session


def test_the_lockout_is_audited_once_with_who_and_where(people, client):
    for _ in range(LIMIT + 2):
        _web_login(client, "ana", "wrong")
    events = list(AuditEvent.objects.filter(action="auth.lockout"))
    assert len(events) == 1
    assert events[0].payload == {"username": "ana", "known_user": True, "address": "203.0.113.7",
                                 "failures": LIMIT, "seconds": 600}
    assert verify_chain().ok


def test_another_address_is_not_locked_out(people, client):
    for _ in range(LIMIT):
        _web_login(client, "ana", "wrong")
    r = _web_login(client, "ana", PASSWORD, address="198.51.100.2")
    assert r.status_code == 302
    assert client.session["_auth_user_id"] == str(people.ana.pk)


def test_a_success_before_the_limit_resets_the_count(people, client):
    for _ in range(LIMIT - 1):
        _web_login(client, "ana", "wrong")
    assert _web_login(client, "ana", PASSWORD).status_code == 302
    client.logout()
    for _ in range(LIMIT - 1):
        _web_login(client, "ana", "wrong")
    assert _web_login(client, "ana", PASSWORD).status_code == 302


def test_the_token_endpoint_shares_the_lockout_and_answers_429(people):
    for _ in range(LIMIT):
        assert _token("fred", "wrong").status_code == 400
    r = _token("fred", PASSWORD)
    assert r.status_code == 429
    assert r.json()["code"] == "locked_out"
    assert r.json()["errors"][0]["location"] == "username"
    assert int(r["Retry-After"]) > 0
    assert _token("fred", PASSWORD, address="198.51.100.2").status_code == 200


def test_unknown_usernames_are_locked_out_too(db):
    for _ in range(LIMIT):
        _token("nobody", "guess")
    assert _token("nobody", "guess").status_code == 429
    assert AuditEvent.objects.get(action="auth.lockout").payload["known_user"] is False


def test_the_token_endpoint_refuses_deep_nesting_with_400(db):
    body = "[" * 5000 + "]" * 5000
    r = APIClient().post("/api/token/", body, content_type="application/json")
    assert r.status_code == 400
    assert r.json()["code"] == "invalid_body"
