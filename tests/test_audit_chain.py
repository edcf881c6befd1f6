"""The audit chain: every change leaves one linked event; tampering is detected."""

from itertools import pairwise

import pytest
from django.db import IntegrityError, connection, transaction

from decisions.models import AuditEvent, ChainHead, Decision
from decisions.services import decisions as svc
from decisions.services.audit import verify_chain
from decisions.services.errors import InvalidInput
from decisions.services.locking import IF_MATCH_ANY
from tests.dbutil import triggers_off

pytestmark = pytest.mark.django_db


def _sql(sql, params=()):
    with triggers_off(), connection.cursor() as cur:
        cur.execute(sql, params)


def test_an_untouched_chain_verifies(draft):
    report = verify_chain()
    assert report.ok, report.first_break
    assert report.count == AuditEvent.objects.count() >= 3
    head = ChainHead.objects.get(pk=1)
    assert (head.seq, head.hash) == (report.head_seq, report.head_hash)


def test_events_link_to_their_predecessor(draft):
    events = list(AuditEvent.objects.order_by("seq"))
    assert events[0].prev_hash == "0" * 64
    for before, after in pairwise(events):
        assert after.prev_hash == before.hash and after.seq == before.seq + 1


def test_an_edited_payload_is_detected(draft):
    event = AuditEvent.objects.get(seq=3)
    _sql("UPDATE decisions_auditevent SET payload_canonical = %s WHERE seq = 3",
         [event.payload_canonical.replace('"', '"x', 1)])
    assert verify_chain().first_break.startswith("event #3:")


def test_an_edited_action_is_detected(draft):
    _sql("UPDATE decisions_auditevent SET action = 'decision.close' WHERE seq = 2")
    assert verify_chain().first_break == \
        "event #2: hash does not match its content (the event was altered)"


def test_an_edited_json_copy_is_detected(draft):
    _sql("UPDATE decisions_auditevent SET payload = %s WHERE seq = 2", ['{"forged": 1}'])
    assert verify_chain().first_break == \
        "event #2: payload differs from the canonical text that was hashed"


def test_a_deleted_event_is_detected(draft):
    _sql("DELETE FROM decisions_auditevent WHERE seq = 2")
    assert verify_chain().first_break == \
        "event #3: expected sequence number 2 (an event is missing or out of order)"


def test_reordered_events_are_detected(draft):
    # Swap the sequence numbers of events 2 and 3 (through a free number).
    _sql("UPDATE decisions_auditevent SET seq = 999999 WHERE seq = 2")
    _sql("UPDATE decisions_auditevent SET seq = 2 WHERE seq = 3")
    _sql("UPDATE decisions_auditevent SET seq = 3 WHERE seq = 999999")
    assert verify_chain().first_break.startswith("event #2:")


def test_a_removed_tail_is_detected_by_the_head_row(draft):
    last = AuditEvent.objects.order_by("-seq").first().seq
    _sql("DELETE FROM decisions_auditevent WHERE seq = %s", [last])
    assert verify_chain().first_break.startswith("chain head: records #")


def test_a_rewritten_chain_is_caught_by_the_checkpoint(draft):
    head = ChainHead.objects.get(pk=1)
    checkpoint = {"seq": head.seq, "hash": head.hash}
    # The attacker truncates the chain and also moves the head row back: the
    # links alone now look fine; only the checkpoint kept elsewhere shows it.
    _sql("DELETE FROM decisions_auditevent WHERE seq = %s", [head.seq])
    prev = AuditEvent.objects.get(seq=head.seq - 1)
    with connection.cursor() as cur:
        cur.execute("UPDATE decisions_chainhead SET seq = %s, hash = %s WHERE id = 1",
                    [prev.seq, prev.hash])
    assert verify_chain().ok
    report = verify_chain(checkpoint=checkpoint)
    assert report.first_break == \
        f"checkpoint: event #{head.seq} is missing (the chain was truncated)"


def test_a_fork_is_impossible_even_without_the_lock(draft):
    head = ChainHead.objects.get(pk=1)
    forged = AuditEvent.objects.get(seq=head.seq)
    with pytest.raises(IntegrityError), transaction.atomic():
        AuditEvent.objects.create(seq=head.seq + 1, created_at=forged.created_at,
                                  action="fork", object_type="x", object_id="1",
                                  payload={}, payload_canonical="{}",
                                  prev_hash=forged.prev_hash, hash="f" * 64)


def test_a_failed_change_leaves_no_event_and_no_change(draft, people):
    before = AuditEvent.objects.count()
    with pytest.raises(InvalidInput):
        svc.save_version(draft.pk, actor=people.ana, document={"kind": "payoff_table"},
                         if_match=IF_MATCH_ANY)
    assert AuditEvent.objects.count() == before
    assert Decision.objects.get(pk=draft.pk).lock_version == draft.lock_version


def test_the_actor_is_the_user_passed_in(draft, people):
    event = AuditEvent.objects.order_by("-seq").first()
    assert (event.actor, event.actor_username, event.action) == \
        (people.ana, "ana", "version.create")
