"""Append to and verify the tamper-evident audit chain.

Every state change calls :func:`append_event` inside its own
``transaction.atomic()`` block, so the change and its event commit or roll
back together. The acting user is always an explicit argument. The walk along
the chain lives in ``audit_verify`` (re-exported here, where callers find it).
"""

from __future__ import annotations

import hashlib
import json

from django.db import transaction
from django.utils import timezone

from decisions.models import GENESIS_HASH, AuditEvent, ChainHead
from decisions.services.audit_envelope import event_envelope
from decisions.services.audit_verify import ChainReport, verify_chain, verify_events
from valuation.canonical import canonical_json, sha256_hex

__all__ = [
    "ChainReport",
    "append_event",
    "event_envelope",
    "read_checkpoint",
    "verify_chain",
    "verify_events",
    "verify_records",
]


def append_event(*, actor, action: str, object_type: str, object_id, payload: dict) -> AuditEvent:
    """Write one event at the head of the chain, in the caller's transaction."""
    if not transaction.get_connection().in_atomic_block:
        raise RuntimeError(
            "append_event must run inside transaction.atomic(), together with the change "
            "it records; wrap the service function's change in one atomic block"
        )
    # The race this lock prevents: two transactions read the same head, both
    # compute seq n+1 with the same prev_hash, and the chain forks. Holding the
    # head row's lock until commit makes appends strictly one after another.
    # (SQLite ignores FOR UPDATE but serialises writers with its IMMEDIATE
    # transactions; the unique seq and prev_hash constraints back both up.)
    head = ChainHead.objects.select_for_update().filter(pk=1).first()
    if head is None:
        # Migration 0002 creates the row; a database flushed by a test runner
        # has lost it. Recreating it is only right on an empty chain.
        if AuditEvent.objects.exists():
            raise RuntimeError("audit chain head row is missing while events exist; "
                               "run `manage.py verify_audit` and restore the head")
        ChainHead.objects.get_or_create(pk=1, defaults={"seq": 0, "hash": GENESIS_HASH})
        head = ChainHead.objects.select_for_update().get(pk=1)
    canonical = canonical_json(payload)
    created_at = timezone.now()
    actor_id = actor.pk if actor is not None else None
    actor_username = actor.get_username() if actor is not None else ""
    envelope = event_envelope(
        seq=head.seq + 1,
        created_at=created_at.isoformat(),
        actor_id=actor_id,
        actor_username=actor_username,
        action=action,
        object_type=object_type,
        object_id=str(object_id),
        payload_sha256=hashlib.sha256(canonical).hexdigest(),
        prev_hash=head.hash,
    )
    event = AuditEvent.objects.create(
        seq=envelope["seq"],
        created_at=created_at,
        actor_id=actor_id,
        actor_username=actor_username,
        action=action,
        object_type=object_type,
        object_id=envelope["object_id"],
        payload=json.loads(canonical),
        payload_canonical=canonical.decode("utf-8"),
        prev_hash=head.hash,
        hash=sha256_hex(envelope),
    )
    head.seq = event.seq
    head.hash = event.hash
    head.save(update_fields=["seq", "hash"])
    return event


def verify_records(*, chunk_size: int = 500) -> list[str]:
    """Check the signed records against the chain: every problem found, in order.

    - each version's canonical text still hashes to its ``content_sha256``, and
      that hash is the one its ``version.create`` event recorded;
    - each sign-off is bound to the hash of the version it sits on, as its
      audit event recorded.
    """
    from decisions.models import ModelVersion, SignOff

    recorded: dict[tuple[str, int], str] = {}
    signed: dict[int, str] = {}
    events = AuditEvent.objects.filter(action__in=["version.create", "signoff.approve",
                                                   "signoff.reject"]).order_by("seq")
    for event in events.iterator(chunk_size=chunk_size):
        payload = json.loads(event.payload_canonical)
        if event.action == "version.create":
            recorded[(event.object_id, payload["number"])] = payload["content_sha256"]
        else:
            signed[payload["signoff_id"]] = payload["bound_sha256"]
    problems = []
    versions = ModelVersion.objects.order_by("decision_id", "number")
    for v in versions.iterator(chunk_size=chunk_size):
        where = f"decision {v.decision_id} version {v.number}"
        actual = hashlib.sha256(v.canonical_json.encode("utf-8")).hexdigest()
        if actual != v.content_sha256:
            problems.append(f"{where}: content does not match its content_sha256")
        elif recorded.get((str(v.decision_id), v.number)) != v.content_sha256:
            problems.append(f"{where}: content_sha256 differs from the one the audit trail "
                            f"recorded")
    rows = SignOff.objects.select_related("version").order_by("id")
    for s in rows.iterator(chunk_size=chunk_size):
        if s.bound_sha256 != s.version.content_sha256 or signed.get(s.pk) != s.bound_sha256:
            problems.append(f"sign-off {s.pk} ({s.signer_printed_name}): not bound to the "
                            f"content of decision {s.version.decision_id} version "
                            f"{s.version.number}")
    return problems


def read_checkpoint(text: str) -> dict:
    """Parse a checkpoint file written by ``audit_checkpoint``; refuse anything else."""
    try:
        data = json.loads(text)
    except ValueError as exc:
        raise ValueError(f"checkpoint: not valid JSON ({exc})") from None
    if not isinstance(data, dict):
        raise ValueError("checkpoint: must be a JSON object with 'seq' and 'hash'")
    seq, digest = data.get("seq"), data.get("hash")
    if not isinstance(seq, int) or isinstance(seq, bool) or seq < 0:
        raise ValueError(f"checkpoint.seq: must be a whole number >= 0, got {seq!r}")
    if not isinstance(digest, str) or len(digest) != 64:
        raise ValueError("checkpoint.hash: must be 64 hexadecimal digits")
    return {"seq": seq, "hash": digest}
