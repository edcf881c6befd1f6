"""The walk's direct check of stored rows agrees with what append_event hashed.

The stored chain is checked from raw column values (``_stored_content_check``), with
the hashed envelope written out directly; only what fails there goes to the reference
check on ORM values. Here events with unusual contents are written by the real
writer, ``append_event``, and must pass the direct check alone (the reference check
is made to fail the test if it is asked). Stored forms the direct check does not
expect must be left to the reference check, whose answer stands.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json

import pytest
import time_machine
from django.contrib.auth import get_user_model
from django.db import connection, transaction

from decisions.models import AuditEvent
from decisions.services import audit_verify
from decisions.services.audit import append_event, verify_chain, verify_events
from tests.dbutil import triggers_off

pytestmark = pytest.mark.django_db

# Invented contents chosen for the JSON rules they exercise (common practice: quotes,
# backslashes and control characters escaped, other characters written as UTF-8, floats
# in shortest round-trip form, integral floats as integers).
UNUSUAL_PAYLOAD = {
    "text": 'line\nbreak\ttab "quoted" back\\slash é 张伟 \u2028 ✓ \x07',
    "float": 0.1, "integral_float": 2.0, "negative_zero": -0.0, "tiny": 5e-324,
    "big_int": 2**62, "nested": [1, [2.5, None, True, False], {"z": [], "a": {}}], "": "empty key",
}
WHOLE_SECOND = dt.datetime(2026, 12, 1, 9, 30, tzinfo=dt.UTC)


def _unusual_events():
    """Events by the real writer: odd user name, ids and payloads, one at a whole second
    (its time text has no fraction of a second)."""
    user = get_user_model().objects.create_user('zoë "q" \\ tab\there', password="x" * 12)
    with time_machine.travel(WHOLE_SECOND, tick=False), transaction.atomic():
        append_event(actor=user, action="test.unusual", object_type='dé"cision',
                     object_id="张伟 – Łódź ✓", payload=UNUSUAL_PAYLOAD)
    with transaction.atomic():
        append_event(actor=None, action="test.anonymous", object_type="decision",
                     object_id="7", payload={})
        append_event(actor=user, action="test.list", object_type="decision", object_id="8",
                     payload={"values": [0.30000000000000004, -1e-7, 123456789012345678]})


def _raw_rows():
    return [row for page in audit_verify._stored_pages(connection, None, None, 2) for row in page]


def test_unusual_events_pass_the_direct_check_alone(people, monkeypatch):
    _unusual_events()

    def reference_asked(*row):
        raise AssertionError(f"the reference check was needed for event #{row[0]}")

    monkeypatch.setattr(audit_verify, "_reference_problem", reference_asked)
    check = audit_verify._stored_content_check(connection)
    rows = _raw_rows()
    assert len(rows) == AuditEvent.objects.count() >= 3
    assert [check(row) for row in rows] == [None] * len(rows)
    assert AuditEvent.objects.get(action="test.unusual").created_at == WHOLE_SECOND


def test_unusual_events_verify_in_one_piece_and_in_slices(people):
    _unusual_events()
    whole = verify_chain()
    assert whole.ok, whole.first_break
    assert verify_chain(slice_size=1, page_size=1).as_dict() == whole.as_dict()
    assert verify_events(AuditEvent.objects.order_by("seq")).as_dict() == whole.as_dict()


@pytest.mark.parametrize("change", ["action", "object_id", "actor_username"])
def test_an_unusual_event_altered_is_caught(people, change):
    _unusual_events()
    seq = AuditEvent.objects.get(action="test.unusual").seq
    with triggers_off(), connection.cursor() as cur:
        cur.execute(f"UPDATE decisions_auditevent SET {change} = {change} || ' ' WHERE seq = %s",  # noqa: S608 - fixed column names
                    [seq])
    assert verify_chain(slice_size=2).first_break == \
        f"event #{seq}: hash does not match its content (the event was altered)"


def _stored_time(seq):
    with connection.cursor() as cur:
        cur.execute("SELECT CAST(created_at AS TEXT) FROM decisions_auditevent WHERE seq = %s",
                    [seq])
        return cur.fetchone()[0]


@pytest.mark.parametrize(("rewrite", "reference_asked"), [
    (lambda text: text.replace(" ", "T"), False),  # the other ISO separator: same text built
    (lambda text: text + ".000000", True),          # a zero fraction written out
    (lambda text: text + "+00:00", True),           # the offset written out
], ids=["separator", "zero-fraction", "offset"])
def test_a_time_stored_in_another_text_form_is_judged_as_django_reads_it(
        people, rewrite, reference_asked, monkeypatch):
    # Only SQLite keeps times as text. Django reads each of these forms as the same
    # instant as the original, so the walk must accept them, as the reference does.
    if connection.vendor != "sqlite":
        pytest.skip("SQLite keeps times as text")
    _unusual_events()
    seq = AuditEvent.objects.get(action="test.unusual").seq
    old = _stored_time(seq)
    assert old == "2026-12-01 09:30:00"  # whole second: str() of the UTC time, no fraction
    with triggers_off(), connection.cursor() as cur:
        cur.execute("UPDATE decisions_auditevent SET created_at = %s WHERE seq = %s",
                    [rewrite(old), seq])
    assert _stored_time(seq) == rewrite(old)
    asked = []
    original = audit_verify._reference_problem
    monkeypatch.setattr(audit_verify, "_reference_problem",
                        lambda *row: asked.append(row[0]) or original(*row))
    report = verify_chain(slice_size=2)
    assert report.ok, report.first_break
    assert asked == ([seq] if reference_asked else [])
    assert verify_events(AuditEvent.objects.order_by("seq")).as_dict() == report.as_dict()


# The hashed form of an event, written out by hand from the writer's format (sorted keys,
# no spaces, times in ISO 8601 with the UTC offset) rather than by the project's encoder:
# a chain written before the walk changed must verify after it.
GOLDEN_CANONICAL = '{"title":"Heat source (invented)"}'
GOLDEN_ENVELOPE = (
    '{"action":"decision.create","actor_id":null,"actor_username":"ana",'
    '"created_at":"2026-12-01T09:30:00.000001+00:00","object_id":"12","object_type":"decision",'
    f'"payload_sha256":"{hashlib.sha256(GOLDEN_CANONICAL.encode()).hexdigest()}",'
    f'"prev_hash":"{"0" * 64}","seq":1}}')
GOLDEN_HASH = hashlib.sha256(GOLDEN_ENVELOPE.encode()).hexdigest()


def _write_golden_event(action="decision.create"):
    created = dt.datetime(2026, 12, 1, 9, 30, 0, 1, tzinfo=dt.UTC)
    with triggers_off(), connection.cursor() as cur:
        cur.execute(
            "INSERT INTO decisions_auditevent (seq, created_at, actor_id, actor_username, action, "
            "object_type, object_id, payload, payload_canonical, prev_hash, hash) "
            "VALUES (1, %s, NULL, 'ana', %s, 'decision', '12', %s, %s, %s, %s)",
            [connection.ops.adapt_datetimefield_value(created), action,
             json.dumps(json.loads(GOLDEN_CANONICAL)), GOLDEN_CANONICAL, "0" * 64, GOLDEN_HASH])
        cur.execute("UPDATE decisions_chainhead SET seq = 1, hash = %s WHERE id = 1", [GOLDEN_HASH])


def test_an_event_hashed_in_the_writers_format_verifies(monkeypatch):
    _write_golden_event()

    def reference_asked(*row):
        raise AssertionError("the direct check did not pass the event on its own")

    monkeypatch.setattr(audit_verify, "_reference_problem", reference_asked)
    report = verify_chain()
    assert report.as_dict() == {"ok": True, "events": 1, "head_seq": 1, "head_hash": GOLDEN_HASH,
                                "first_break": None}


def test_an_event_hashed_in_the_writers_format_with_one_field_changed_does_not():
    _write_golden_event(action="decision.close")
    assert verify_chain().first_break == \
        "event #1: hash does not match its content (the event was altered)"


# Doubles whose shortest decimal form is not their exact value (common practice: a
# double holds 53 bits; 1e300 is not the integer 10**300). PostgreSQL's jsonb copy
# reads them back as those exact integers.
LARGE_FLOATS = {"huge": 1e300, "large": 1.2345678901234567e25, "negative": -3.0e200}


def test_large_floats_in_a_payload_verify(people):
    with transaction.atomic():
        append_event(actor=None, action="test.large", object_type="decision", object_id="9",
                     payload=LARGE_FLOATS)
    report = verify_chain()
    assert report.ok, report.first_break
    assert verify_chain(slice_size=2).as_dict() == report.as_dict()


def test_a_large_float_changed_in_the_copy_is_caught(people):
    with transaction.atomic():
        event = append_event(actor=None, action="test.large", object_type="decision",
                             object_id="9", payload=LARGE_FLOATS)
    with triggers_off(), connection.cursor() as cur:
        cur.execute("UPDATE decisions_auditevent SET payload = %s WHERE seq = %s",
                    [json.dumps({**LARGE_FLOATS, "huge": 2e300}), event.seq])
    assert verify_chain().first_break == \
        f"event #{event.seq}: payload differs from the canonical text that was hashed"


@pytest.mark.parametrize(("hashed", "copy", "same"), [
    # storage differences that are not changes
    (1e300, 10**300, True), ({"x": [1e300]}, {"x": [10**300]}, True), (2, 2.0, True),
    ({"a": 1}, {"a": 1.0}, True), (0, -0.0, True), (1e20, 10**20, True),
    # changes
    (1e300, 10**300 + 10**290, False), (1e308, 10**400, False), ({"x": 1}, {"y": 1}, False),
    ([1.5], [1.5, 2], False), ("1e300", 1e300, False), (True, 1, False), (1, True, False),
    (False, 0, False), ({"ok": True}, {"ok": 1}, False),
    (9007199254740993, 9007199254740992.0, False), (2**53, float(2**53), False),
    ([1], (1,), False), (None, 0, False), ("a", "b", False),
])
def test_the_copy_must_hold_what_the_canonical_text_holds_type_for_type(hashed, copy, same):
    assert audit_verify._same_json(hashed, copy) is same


def _tamper(sql: str, params) -> None:
    with triggers_off(), connection.cursor() as cur:
        cur.execute(sql, params)


def _chain_of_three():
    with transaction.atomic():
        for n in range(3):
            append_event(actor=None, action="test.plain", object_type="decision",
                         object_id=str(n), payload={"n": n})


def test_a_huge_tampered_sequence_number_is_reported_at_once(people):
    # Slices are cut by the row count: a stored 10**15 must not mean 10**10 empty slices.
    _chain_of_three()
    last = AuditEvent.objects.order_by("-seq").values_list("seq", flat=True).first()
    _tamper("UPDATE decisions_auditevent SET seq = %s WHERE seq = %s", [10**15, last])
    report = verify_chain(slice_size=2)
    assert report.first_break == (f"event #{10**15}: expected sequence number {last} "
                                  "(an event is missing or out of order)")


@pytest.mark.parametrize(("hashed", "changed"), [
    ({"n": 9007199254740993}, {"n": 9007199254740992.0}),
    ({"approved": 1, "flag": False}, {"approved": True, "flag": 0}),
])
def test_a_copy_changed_within_loose_equality_is_caught(people, hashed, changed):
    with transaction.atomic():
        event = append_event(actor=None, action="test.copy", object_type="decision",
                             object_id="1", payload=hashed)
    _tamper("UPDATE decisions_auditevent SET payload = %s WHERE seq = %s",
            [json.dumps(changed), event.seq])
    expected = f"event #{event.seq}: payload differs from the canonical text that was hashed"
    assert verify_chain().first_break == expected
    assert verify_events(AuditEvent.objects.order_by("seq")).first_break == expected


@pytest.mark.skipif(connection.vendor != "sqlite", reason="SQLite stores any type in any column")
def test_text_where_a_number_or_time_belongs_is_reported_not_raised(people):
    _chain_of_three()
    _tamper("UPDATE decisions_auditevent SET actor_id = 'null' WHERE seq = 2", [])
    assert verify_chain().first_break == \
        "event #2: hash does not match its content (the event was altered)"
    _tamper("UPDATE decisions_auditevent SET actor_id = NULL, created_at = 'garbage' "
            "WHERE seq = 2", [])
    assert verify_chain().first_break == \
        "event #2: hash does not match its content (the event was altered)"
