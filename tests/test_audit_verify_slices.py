"""The chain walked in slices reports exactly what the walk in one piece reports.

Each tampering below is checked three ways: ``verify_chain`` in one slice, in slices of
1 to 4 events (so slice boundaries fall on and around the tampered event) read in
keyset pages of 2 rows, and the reference walk over model instances
(``verify_events``). The expected first break is written out for each case: the
wording and event numbers are the audit chain's contract (tests/test_audit_chain.py).
Slices run here one after another in this process (the test's transaction is
invisible to other processes); tests/test_audit_verify_processes.py runs them in two.
"""

from __future__ import annotations

import hashlib

import pytest
from django.db import connection

from decisions.models import AuditEvent
from decisions.services import decisions as svc
from decisions.services.audit import verify_chain, verify_events
from decisions.services.audit_envelope import event_envelope
from decisions.services.audit_verify import _slice_bounds
from tests.dbutil import triggers_off
from valuation.canonical import sha256_hex

pytestmark = pytest.mark.django_db

SLICE_SIZES = (1, 2, 3, 4)


@pytest.fixture
def chain(draft, people):
    """At least ten events: the personas, the draft, two more decisions."""
    for title in ("Second heat source (invented)", "Third heat source (invented)"):
        svc.create_decision(actor=people.ana, team=people.team, title=title,
                            policy={"financial review": 1})
    assert AuditEvent.objects.count() >= 10
    return AuditEvent.objects.count()


def _sql(sql, params=()):
    with triggers_off(), connection.cursor() as cur:
        cur.execute(sql, params)


def _hash(seq):
    return AuditEvent.objects.values_list("hash", flat=True).get(seq=seq)


def _insert(seq, *, prev_hash, digest, created_at, action="forged", payload="{}"):
    """Write an event row the way an attacker with database access would."""
    _sql("INSERT INTO decisions_auditevent (seq, created_at, actor_id, actor_username, action, "
         "object_type, object_id, payload, payload_canonical, prev_hash, hash) "
         "VALUES (%s, %s, NULL, 'mallory', %s, 'decision', '1', %s, %s, %s, %s)",
         [seq, connection.ops.adapt_datetimefield_value(created_at), action, payload, payload,
          prev_hash, digest])


def _forged_hash(seq, prev_hash, created_at, action="forged", payload="{}"):
    """The hash a forger who knows the envelope format computes for ``_insert``'s row."""
    return sha256_hex(event_envelope(
        seq=seq, created_at=created_at.isoformat(), actor_id=None, actor_username="mallory",
        action=action, object_type="decision", object_id="1",
        payload_sha256=hashlib.sha256(payload.encode()).hexdigest(), prev_hash=prev_hash))


# Each tampering takes b, the last event of the first slice, and returns the first break.
def changed_action(b, n):
    _sql("UPDATE decisions_auditevent SET action = 'decision.close' WHERE seq = %s", [b + 1])
    return f"event #{b + 1}: hash does not match its content (the event was altered)"


def time_moved_by_a_microsecond(b, n):
    event = AuditEvent.objects.get(seq=b)
    moved = event.created_at.replace(microsecond=(event.created_at.microsecond + 1) % 10**6)
    _sql("UPDATE decisions_auditevent SET created_at = %s WHERE seq = %s",
         [connection.ops.adapt_datetimefield_value(moved), b])
    return f"event #{b}: hash does not match its content (the event was altered)"


def changed_payload_copy(b, n):
    _sql("UPDATE decisions_auditevent SET payload = %s WHERE seq = %s", ['{"forged": 1}', b + 1])
    return f"event #{b + 1}: payload differs from the canonical text that was hashed"


def canonical_text_respaced(b, n):
    # Same JSON value as the copy, other bytes: only the hash can tell.
    _sql("UPDATE decisions_auditevent SET payload_canonical = REPLACE(payload_canonical, ':', ': ') "
         "WHERE seq = %s", [b])
    return f"event #{b}: hash does not match its content (the event was altered)"


def canonical_text_not_json(b, n):
    _sql("UPDATE decisions_auditevent SET payload_canonical = 'not json' WHERE seq = %s", [b + 1])
    return f"event #{b + 1}: payload differs from the canonical text that was hashed"


def deleted_at_a_slice_end(b, n):
    _sql("DELETE FROM decisions_auditevent WHERE seq = %s", [b])
    return f"event #{b + 1}: expected sequence number {b} (an event is missing or out of order)"


def deleted_at_a_slice_start(b, n):
    _sql("DELETE FROM decisions_auditevent WHERE seq = %s", [b + 1])
    return f"event #{b + 2}: expected sequence number {b + 1} (an event is missing or out of order)"


def a_whole_slice_deleted(b, n):
    _sql("DELETE FROM decisions_auditevent WHERE seq > %s AND seq <= %s", [b, 2 * b])
    return (f"event #{2 * b + 1}: expected sequence number {b + 1} "
            f"(an event is missing or out of order)")


def first_event_deleted(b, n):
    _sql("DELETE FROM decisions_auditevent WHERE seq = 1")
    return "event #2: expected sequence number 1 (an event is missing or out of order)"


def an_event_numbered_zero_inserted(b, n):
    created = AuditEvent.objects.get(seq=1).created_at
    _insert(0, prev_hash="a" * 64, digest="b" * 64, created_at=created)
    return "event #0: expected sequence number 1 (an event is missing or out of order)"


def link_broken_at_a_slice_boundary(b, n):
    _sql("UPDATE decisions_auditevent SET prev_hash = %s WHERE seq = %s", ["c" * 64, b + 1])
    return f"event #{b + 1}: prev_hash does not match the hash of event #{b}"


def reordered_across_a_slice_boundary(b, n):
    _sql("UPDATE decisions_auditevent SET seq = 999999 WHERE seq = %s", [b])
    _sql("UPDATE decisions_auditevent SET seq = %s WHERE seq = %s", [b, b + 1])
    _sql("UPDATE decisions_auditevent SET seq = %s WHERE seq = 999999", [b + 1])
    # the event now numbered b is the old b + 1, linked to the old b
    return f"event #{b}: prev_hash does not match the hash of event #{b - 1}"


def inserted_with_its_links_repaired(b, n):
    # The forger renumbers the rest, writes a well-formed event after b and relinks the
    # next one to it; that next event's own hash then no longer covers its content.
    before, created = _hash(b), AuditEvent.objects.get(seq=b).created_at
    forged = _forged_hash(b + 1, before, created)
    _sql("UPDATE decisions_auditevent SET seq = seq + 100000 WHERE seq > %s", [b])
    _sql("UPDATE decisions_auditevent SET seq = seq - 99999 WHERE seq > 100000")
    _sql("UPDATE decisions_auditevent SET prev_hash = %s WHERE seq = %s", [forged, b + 2])
    _insert(b + 1, prev_hash=before, digest=forged, created_at=created)
    return f"event #{b + 2}: hash does not match its content (the event was altered)"


def appended_without_moving_the_head(b, n):
    last, created = _hash(n), AuditEvent.objects.get(seq=n).created_at
    forged = _forged_hash(n + 1, last, created)
    _insert(n + 1, prev_hash=last, digest=forged, created_at=created)
    return (f"chain head: records #{n} {last[:12]}… but the last event is #{n + 1} "
            f"{forged[:12]}… (events were removed or added)")


def last_event_deleted(b, n):
    last = _hash(n)
    _sql("DELETE FROM decisions_auditevent WHERE seq = %s", [n])
    return (f"chain head: records #{n} {last[:12]}… but the last event is #{n - 1} "
            f"{_hash(n - 1)[:12]}… (events were removed or added)")


TAMPERINGS = [changed_action, time_moved_by_a_microsecond, changed_payload_copy,
              canonical_text_respaced, canonical_text_not_json, deleted_at_a_slice_end,
              deleted_at_a_slice_start, a_whole_slice_deleted, first_event_deleted,
              an_event_numbered_zero_inserted, link_broken_at_a_slice_boundary,
              reordered_across_a_slice_boundary, inserted_with_its_links_repaired,
              appended_without_moving_the_head, last_event_deleted]


@pytest.mark.parametrize("slice_size", SLICE_SIZES)
@pytest.mark.parametrize("tamper", TAMPERINGS, ids=lambda f: f.__name__)
def test_slices_report_the_first_break_as_one_walk_does(chain, tamper, slice_size):
    expected = tamper(slice_size, chain)
    reference = verify_events(AuditEvent.objects.order_by("seq"))
    if not expected.startswith("chain head:"):
        assert reference.first_break == expected
    for options in ({}, {"slice_size": slice_size}, {"slice_size": slice_size, "page_size": 2}):
        report = verify_chain(**options)
        assert report.first_break == expected, options
        assert (report.count, report.head_seq, report.head_hash) == \
            (reference.count, reference.head_seq, reference.head_hash), options


@pytest.mark.parametrize("slice_size", SLICE_SIZES)
def test_an_untouched_chain_verifies_in_slices(chain, slice_size):
    whole = verify_chain()
    assert whole.ok and whole.count == chain
    assert verify_chain(slice_size=slice_size, page_size=2).as_dict() == whole.as_dict()


def test_an_empty_chain_verifies_in_slices():
    assert verify_chain(slice_size=1).as_dict() == \
        {"ok": True, "events": 0, "head_seq": 0, "head_hash": "0" * 64, "first_break": None}


@pytest.mark.parametrize(("top", "size", "bounds"), [
    (0, 5, [(None, None)]),
    (3, 3, [(None, None)]),
    (4, 3, [(None, 3), (3, None)]),
    (10, 3, [(None, 3), (3, 6), (6, 9), (9, None)]),
])
def test_slices_cover_every_sequence_number_open_at_both_ends(top, size, bounds):
    assert _slice_bounds(top, size) == bounds


@pytest.mark.parametrize(("option", "value"), [
    ("processes", 0), ("slice_size", 0), ("page_size", -1), ("slice_size", 2.5)])
def test_walk_settings_below_one_are_refused_by_name(option, value):
    with pytest.raises(ValueError, match=rf"^{option}: must be a whole number >= 1, got {value}$"):
        verify_chain(**{option: value})
