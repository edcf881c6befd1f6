"""``POST /api/decisions/`` with an ``Idempotency-Key``: a retry creates nothing new.

The behaviour checked here is the one the IETF draft "The Idempotency-Key HTTP Header
Field" (draft-ietf-httpapi-idempotency-key-header, -07) describes: §2.1 the key as a
Structured Field String (RFC 8941 §3.3.3), §2.6 first request and retry, §2.7 422 for a
reused key and 409 for a request still in progress, §2.3 expiry, §5 keys scoped to the
client. The key rule (1 to 255 printable ASCII characters) and the replay header
(``Idempotent-Replayed``) are this register's own, documented in README.md.
"""

import datetime as dt
import io
import os
import subprocess
import sys
import threading
from pathlib import Path

import pytest
import time_machine
from django.core.management import call_command
from django.db import connection
from django.utils import timezone
from rest_framework.test import APIClient

from decisions.models import AuditEvent, Decision, IdempotencyKey, Membership
from decisions.services import decisions as svc
from decisions.services import idempotency, teams
from decisions.services.audit import verify_chain
from tests.dbutil import purge_register
from valuation.canonical import sha256_hex

pytestmark = pytest.mark.django_db

URL = "/api/decisions/"
KEY = "8e03978e-40d5-43e8-bc93-6894a57f9324"  # the draft's own example key (§2.1)
RULE = "must be 1 to 255 printable ASCII characters (U+0020 to U+007E)"
T0 = dt.datetime(2026, 5, 4, 9, 0, tzinfo=dt.UTC)


def _body(people, title="Heat source (invented)"):
    return {"team": people.team.pk, "title": title, "policy": {"financial review": 1}}


def _post(client, body, key=KEY):
    headers = {} if key is None else {"HTTP_IDEMPOTENCY_KEY": key}
    return client.post(URL, body, format="json", **headers)


def _created_events():
    return AuditEvent.objects.filter(action="decision.create").count()


# ---- first request and retry (draft §2.6) ---------------------------------------------------

def test_the_first_request_with_a_key_creates_and_records_the_decision(people, client_for):
    body = _body(people)
    r = _post(client_for(people.ana), body)
    assert r.status_code == 201, r.data
    assert "Idempotent-Replayed" not in r
    record = IdempotencyKey.objects.get()
    assert (record.user, record.key, record.decision_id) == (people.ana, KEY, r.data["id"])
    assert record.request_sha256 == sha256_hex(body)


def test_a_retry_with_the_same_key_and_body_replays_the_first_answer(people, client_for):
    ana = client_for(people.ana)
    first = _post(ana, _body(people))
    decisions_before, events_before = Decision.objects.count(), AuditEvent.objects.count()
    again = _post(ana, _body(people))
    assert again.status_code == 201
    assert again["Idempotent-Replayed"] == "true"
    assert again.data == first.data
    assert again["ETag"] == first["ETag"]
    assert Decision.objects.count() == decisions_before
    assert AuditEvent.objects.count() == events_before  # no second decision.create event
    assert IdempotencyKey.objects.count() == 1


def test_the_body_is_compared_as_canonical_json(people, client_for):
    ana = client_for(people.ana)
    first = _post(ana, _body(people))
    # Other key order, other spacing, 1.0 for 1: the same request (canonical JSON).
    text = ('{ "policy": {"financial review": 1.0},  "title": "Heat source (invented)", '
            f'"team": {people.team.pk} }}')
    again = ana.post(URL, text, content_type="application/json", HTTP_IDEMPOTENCY_KEY=KEY)
    assert again.status_code == 201
    assert again["Idempotent-Replayed"] == "true"
    assert again.data["id"] == first.data["id"]


def test_a_replay_shows_the_decision_as_it_is_now(people, client_for):
    ana = client_for(people.ana)
    first = _post(ana, _body(people))
    renamed = ana.patch(f"{URL}{first.data['id']}/", {"title": "Heat pump (invented)"},
                        format="json", HTTP_IF_MATCH=first["ETag"])
    assert renamed.status_code == 200
    again = _post(ana, _body(people))
    assert again.status_code == 201 and again["Idempotent-Replayed"] == "true"
    assert again.data["title"] == "Heat pump (invented)"
    assert again["ETag"] == renamed["ETag"] != first["ETag"]


def test_the_quoted_and_the_bare_form_carry_the_same_key(people, client_for):
    ana = client_for(people.ana)
    first = _post(ana, _body(people), key=f'"{KEY}"')
    again = _post(ana, _body(people), key=KEY)
    assert again["Idempotent-Replayed"] == "true"
    assert again.data["id"] == first.data["id"]
    assert IdempotencyKey.objects.get().key == KEY


def test_requests_without_a_key_are_not_deduplicated(people, client_for):
    ana = client_for(people.ana)
    ids = {_post(ana, _body(people), key=None).data["id"] for _ in range(2)}
    assert len(ids) == 2
    assert IdempotencyKey.objects.count() == 0


# ---- reuse with another body (draft §2.7) ---------------------------------------------------

def test_the_same_key_with_another_body_gets_422_and_creates_nothing(people, client_for):
    ana = client_for(people.ana)
    _post(ana, _body(people))
    before = Decision.objects.count(), AuditEvent.objects.count()
    r = _post(ana, _body(people, title="Something else (invented)"))
    assert r.status_code == 422
    assert r.data == {"code": "idempotency_key_reused", "errors": [{
        "location": "Idempotency-Key",
        "message": "Idempotency-Key: this key was already used for a different request "
                   "(another body) within the last 24 hours; send a new key with a new request, "
                   "or the first request's body to get its answer again"}]}
    assert (Decision.objects.count(), AuditEvent.objects.count()) == before


# ---- keys belong to their user (draft §5) ---------------------------------------------------

def test_another_user_may_use_the_same_key_for_their_own_decision(people, client_for):
    mine = _post(client_for(people.ana), _body(people))
    theirs = _post(client_for(people.omar),
                   {"team": people.other_team.pk, "title": "Intake (invented)"})
    assert theirs.status_code == 201
    assert "Idempotent-Replayed" not in theirs
    assert theirs.data["id"] != mine.data["id"]
    assert theirs.data["team"] == people.other_team.pk
    assert IdempotencyKey.objects.filter(key=KEY).count() == 2


def test_a_replay_is_refused_once_the_user_has_left_the_team(people, client_for):
    ana = client_for(people.ana)
    _post(ana, _body(people))
    teams.remove_member(actor=people.sam,
                        membership=Membership.objects.get(user=people.ana, team=people.team))
    before = Decision.objects.count()
    r = _post(ana, _body(people))
    assert r.status_code == 403
    assert r.data["errors"] == [{"location": "Idempotency-Key", "message":
                                 "Idempotency-Key: the decision this key created belongs to a "
                                 "team you are no longer a member of"}]
    assert Decision.objects.count() == before


# ---- the key's form (draft §2.1; the rule is ours) ------------------------------------------

BAD_KEYS = [
    # (header value as received, message after "Idempotency-Key: ")
    ("", f"{RULE}, got an empty key"),
    ("   ", f"{RULE}, got an empty key"),
    ('""', f"{RULE}, got an empty key"),
    ("k" * 256, f"{RULE}, got 256 characters"),
    ('"' + "k" * 256 + '"', f"{RULE}, got 256 characters"),
    ("café", f"{RULE}, got U+00E9 at position 4"),
    ("cafÃ©", f"{RULE}, got U+00C3 at position 4"),  # UTF-8 bytes as WSGI hands them over
    ("a\tb", f"{RULE}, got U+0009 at position 2"),
    ("a\x00b", f"{RULE}, got U+0000 at position 2"),
    ("ab\x1b", f"{RULE}, got U+001B at position 3"),
    ("\x7f", f"{RULE}, got U+007F at position 1"),
    ('"a\nb"', f"{RULE}, got U+000A at position 2"),
    ('"unterminated', "a quoted key must end with a closing quote"),
    ('"one", "two"', "a quoted key must end at its closing quote (send one Idempotency-Key "
                     "field, with one key)"),
    ('"a\\x"', 'inside a quoted key only \\" and \\\\ may follow a backslash'),
]


@pytest.mark.parametrize(("raw", "message"), BAD_KEYS)
def test_a_malformed_key_gets_400_naming_the_header_and_the_rule(people, client_for, raw,
                                                                  message):
    before = Decision.objects.count(), AuditEvent.objects.count()
    r = _post(client_for(people.ana), _body(people), key=raw)
    assert r.status_code == 400
    assert r.data == {"code": "invalid", "errors": [
        {"location": "Idempotency-Key", "message": f"Idempotency-Key: {message}"}]}
    assert (Decision.objects.count(), AuditEvent.objects.count()) == before
    assert IdempotencyKey.objects.count() == 0


GOOD_KEYS = [
    # (header value as received, the key)
    ("k" * 255, "k" * 255),
    ('"' + "k" * 255 + '"', "k" * 255),
    ("x", "x"),
    ("  padded\t", "padded"),  # spaces and tabs around a field value are not part of it
    ("a b ~!", "a b ~!"),
    ('"a\\"b\\\\c"', 'a"b\\c'),  # RFC 8941 escapes
]


@pytest.mark.parametrize(("raw", "key"), GOOD_KEYS)
def test_a_wellformed_key_is_accepted_and_stored_as_read(people, client_for, raw, key):
    r = _post(client_for(people.ana), _body(people), key=raw)
    assert r.status_code == 201, r.data
    assert IdempotencyKey.objects.get().key == key


# ---- a refused request records nothing (draft §2.7: correct, then resend) -------------------

def test_a_refused_body_records_nothing_and_the_corrected_retry_succeeds(people, client_for):
    ana = client_for(people.ana)
    bad = _post(ana, {"team": people.team.pk, "title": "", "policy": {"financial review": 1}})
    assert bad.status_code == 400
    assert bad.data["errors"][0]["location"] == "title"
    refused_by_service = _post(ana, _body(people, title="   "))  # blank once stripped
    assert refused_by_service.status_code == 400
    assert IdempotencyKey.objects.count() == 0
    good = _post(ana, _body(people))
    assert good.status_code == 201
    assert "Idempotent-Replayed" not in good
    again = _post(ana, _body(people))
    assert again["Idempotent-Replayed"] == "true" and again.data["id"] == good.data["id"]


def test_a_request_refused_for_the_role_records_nothing(people, client_for):
    r = _post(client_for(people.vic), _body(people))
    assert r.status_code == 403
    assert IdempotencyKey.objects.count() == 0
    assert Decision.objects.count() == 0


@pytest.mark.parametrize("key", [None, KEY, "\x00"])
def test_anonymous_requests_are_refused_as_without_a_key(people, client_for, key):
    r = _post(client_for(None), _body(people), key=key)
    assert r.status_code in (401, 403)
    assert r.data["code"] == "not_authenticated"
    assert Decision.objects.count() == 0 and IdempotencyKey.objects.count() == 0


# ---- the audit trail --------------------------------------------------------------------------

def test_a_replay_writes_no_audit_event(people, client_for):
    ana = client_for(people.ana)
    before = _created_events()
    first = _post(ana, _body(people))
    for _ in range(3):
        assert _post(ana, _body(people))["Idempotent-Replayed"] == "true"
    assert _created_events() == before + 1
    events = AuditEvent.objects.filter(object_type="decision", object_id=str(first.data["id"]))
    assert list(events.values_list("action", flat=True)) == ["decision.create"]
    assert verify_chain().ok


# ---- expiry (draft §2.3) ----------------------------------------------------------------------

def test_a_key_is_remembered_for_the_ttl_and_then_starts_afresh(people, client_for):
    ana = client_for(people.ana)
    with time_machine.travel(T0, tick=False):
        first = _post(ana, _body(people))
    with time_machine.travel(T0 + dt.timedelta(hours=23, minutes=59), tick=False):
        within = _post(ana, _body(people))
    assert within["Idempotent-Replayed"] == "true" and within.data["id"] == first.data["id"]
    with time_machine.travel(T0 + dt.timedelta(hours=24, seconds=1), tick=False):
        after = _post(ana, _body(people, title="Another heat source (invented)"))
    assert after.status_code == 201, after.data
    assert "Idempotent-Replayed" not in after
    assert after.data["id"] != first.data["id"]
    record = IdempotencyKey.objects.get()  # the expired record was replaced, not kept
    assert record.decision_id == after.data["id"]
    assert record.created_at == T0 + dt.timedelta(hours=24, seconds=1)


def test_the_ttl_comes_from_the_setting(people, client_for, settings):
    settings.IDEMPOTENCY_KEY_TTL_HOURS = 2
    ana = client_for(people.ana)
    with time_machine.travel(T0, tick=False):
        first = _post(ana, _body(people))
    with time_machine.travel(T0 + dt.timedelta(hours=2, seconds=1), tick=False):
        after = _post(ana, _body(people))
    assert "Idempotent-Replayed" not in after and after.data["id"] != first.data["id"]


def test_a_ttl_below_one_hour_stops_the_process_at_start_up(tmp_path):
    env = {**os.environ, "IDEMPOTENCY_KEY_TTL_HOURS": "0", "DECISIONS_DATA_DIR": str(tmp_path)}
    done = subprocess.run([sys.executable, "-c", "import decisions.settings"],
                          cwd=Path(__file__).resolve().parent.parent, env=env,
                          capture_output=True, text=True, timeout=60)
    assert done.returncode != 0
    assert "IDEMPOTENCY_KEY_TTL_HOURS: must be at least 1, got 0" in done.stderr


def test_purge_idempotency_keys_deletes_only_expired_keys(people, client_for):
    ana = client_for(people.ana)
    with time_machine.travel(T0, tick=False):
        _post(ana, _body(people), key="old")
    with time_machine.travel(T0 + dt.timedelta(hours=20), tick=False):
        _post(ana, _body(people), key="young")
    out = io.StringIO()
    with time_machine.travel(T0 + dt.timedelta(hours=25), tick=False):
        call_command("purge_idempotency_keys", stdout=out)
    assert out.getvalue() == "Purged 1 idempotency key(s) older than 24 hour(s).\n"
    assert list(IdempotencyKey.objects.values_list("key", flat=True)) == ["young"]
    assert Decision.objects.count() == 2  # the decisions stay; only the keys go


# ---- the OpenAPI schema -----------------------------------------------------------------------

def test_the_schema_documents_the_request_and_the_replay_header(client):
    operation = client.get("/api/schema/?format=json").json()["paths"][URL]["post"]
    [key] = [p for p in operation["parameters"] if p["name"] == "Idempotency-Key"]
    assert key["in"] == "header" and not key.get("required", False)
    assert "422" in key["description"] and "409" in key["description"]
    assert "Idempotent-Replayed" in operation["responses"]["201"]["headers"]


# ---- two first requests at once (draft §2.6 "Concurrent Request") ---------------------------

@pytest.fixture
def stale_lookups(monkeypatch):
    """``stale_lookups(n)``: the next ``n`` look-ups of a key see nothing, as when another
    request with the key commits between our look-up and our insert; later ones see the
    database. Returns the list of keys looked up, to count the look-ups."""
    real, calls, misses = idempotency._live_record, [], []

    def lookup(actor, key):
        calls.append(key)
        if misses:
            misses.pop()
            return None
        return real(actor, key)

    monkeypatch.setattr(idempotency, "_live_record", lookup)

    def arm(n):
        misses.extend([None] * n)
        calls.clear()
        return calls

    return arm


def _record_of_another_request(people, request_sha256):
    """The committed work of a request that won the race with this key."""
    decision = svc.create_decision(actor=people.ana, team=people.team, title="earlier (invented)")
    return IdempotencyKey.objects.create(user=people.ana, key=KEY, request_sha256=request_sha256,
                                         decision=decision, created_at=timezone.now())


def test_losing_the_race_rolls_back_and_replays_the_winner(people, client_for, stale_lookups):
    ana = client_for(people.ana)
    winner = _post(ana, _body(people))
    before = Decision.objects.count(), AuditEvent.objects.count()
    calls = stale_lookups(1)
    loser = _post(ana, _body(people))
    assert len(calls) == 2  # the unique constraint refused the insert: looked up again
    assert loser.status_code == 201 and loser["Idempotent-Replayed"] == "true"
    assert loser.data["id"] == winner.data["id"]
    # The loser's decision, policy and audit event were rolled back with its key...
    assert (Decision.objects.count(), AuditEvent.objects.count()) == before
    # ...by a savepoint: the surrounding transaction still works (PostgreSQL refuses every
    # further statement in an aborted one) and the chain did not fork.
    assert verify_chain().ok


def test_losing_the_race_with_another_body_gets_422(people, client_for, stale_lookups):
    _record_of_another_request(people, request_sha256="0" * 64)
    before = Decision.objects.count()
    stale_lookups(1)
    r = _post(client_for(people.ana), _body(people))
    assert r.status_code == 422 and r.data["code"] == "idempotency_key_reused"
    assert Decision.objects.count() == before


def test_a_key_held_by_a_request_not_yet_readable_gets_409(people, client_for, stale_lookups):
    _record_of_another_request(people, request_sha256=sha256_hex(_body(people)))
    before = Decision.objects.count(), AuditEvent.objects.count()
    calls = stale_lookups(2)
    r = _post(client_for(people.ana), _body(people))
    assert len(calls) == 2
    assert r.status_code == 409
    assert r.data == {"code": "idempotency_key_in_progress", "errors": [{
        "location": "Idempotency-Key",
        "message": "Idempotency-Key: another request with this key is being processed or "
                   "conflicted with this one; send it again shortly"}]}
    assert (Decision.objects.count(), AuditEvent.objects.count()) == before
    assert verify_chain().ok


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_eight_first_requests_at_once_create_exactly_one_decision(people):
    """Real PostgreSQL, each thread on its own connection, released together."""
    writers, body = 8, _body(people, title="Raced heat source (invented)")
    events_before = _created_events()
    answers, barrier = [], threading.Barrier(writers)

    def writer():
        client = APIClient()
        client.force_authenticate(people.ana)
        barrier.wait()
        r = client.post(URL, body, format="json", HTTP_IDEMPOTENCY_KEY=KEY)
        answers.append((r.status_code, r.get("Idempotent-Replayed"), r.data))
        connection.close()

    threads = [threading.Thread(target=writer) for _ in range(writers)]
    try:
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        created = [data for code, replayed, data in answers if code == 201 and not replayed]
        replayed = [data for code, replayed, data in answers if code == 201 and replayed]
        conflicts = [data for code, _, data in answers if code == 409]
        assert len(created) == 1, answers
        assert len(created) + len(replayed) + len(conflicts) == writers, answers
        assert {d["id"] for d in replayed} <= {created[0]["id"]}
        assert all(d["code"] == "idempotency_key_in_progress" for d in conflicts)
        assert Decision.objects.filter(title=body["title"]).count() == 1
        assert IdempotencyKey.objects.get().decision_id == created[0]["id"]
        assert _created_events() == events_before + 1
        assert verify_chain().ok
    finally:
        purge_register()


def test_an_unpaired_surrogate_in_the_body_is_a_400_not_a_500_with_a_key(people, client_for):
    # The body's hash (canonical JSON) could not be taken of it; the parser refuses it first.
    response = client_for(people.ana).generic(
        "POST", "/api/decisions/",
        b'{"team": %d, "title": "ok", "policy": {"\\ud800": 1}}' % people.team.pk,
        content_type="application/json", HTTP_IDEMPOTENCY_KEY='"k-surrogate"')
    assert response.status_code == 400
    assert response.json()["errors"][0]["location"] == "body.policy"


def test_another_integrity_failure_is_not_taken_for_a_key_conflict(people, monkeypatch):
    # Only the (user, key) constraint means "another request has this key"; any other
    # integrity failure inside the creation goes up as itself (a 500, logged), not a 409.
    from django.db import IntegrityError

    def broken(**kwargs):
        raise IntegrityError("FOREIGN KEY constraint failed")

    monkeypatch.setattr(idempotency, "create_decision", broken)
    with pytest.raises(IntegrityError, match="FOREIGN KEY"):
        idempotency.create_decision_once(actor=people.ana, key="k-other", body={"title": "t"},
                                         team=people.team, title="t")


@pytest.mark.parametrize("message", [
    'duplicate key value violates unique constraint "idempotency_key_unique_per_user"',
    "UNIQUE constraint failed: decisions_idempotencykey.user_id, decisions_idempotencykey.key",
])
def test_the_key_constraint_is_recognised_in_each_databases_words(message):
    # PostgreSQL's and SQLite's messages for the unique constraint (as they word them).
    from django.db import IntegrityError

    assert idempotency._is_the_key_constraint(IntegrityError(message))


def test_the_key_constraint_is_recognised_in_the_databases_own_error(people):
    # The real refusal of a second (user, key) row by the database in use (SQLite or
    # PostgreSQL), not a message written by hand.
    from django.db import IntegrityError, transaction

    decision = svc.create_decision(actor=people.ana, team=people.team, title="k (invented)")
    IdempotencyKey.objects.create(user=people.ana, key="k-real", request_sha256="0" * 64,
                                  decision=decision, created_at=timezone.now())
    with pytest.raises(IntegrityError) as caught, transaction.atomic():
        IdempotencyKey.objects.create(user=people.ana, key="k-real", request_sha256="1" * 64,
                                      decision=decision, created_at=timezone.now())
    assert idempotency._is_the_key_constraint(caught.value)
