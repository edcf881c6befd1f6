"""Append to and verify the tamper-evident audit chain.

Every state change calls :func:`append_event` inside its own
``transaction.atomic()`` block, so the change and its event commit or roll
back together. The acting user is always an explicit argument.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterable
from dataclasses import dataclass, field
from json.encoder import encode_basestring as _json_string
from typing import Any

from django.db import transaction
from django.utils import timezone

from decisions.models import GENESIS_HASH, AuditEvent, ChainHead
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


def event_envelope(
    *, seq: int, created_at: str, actor_id: int | None, actor_username: str, action: str,
    object_type: str, object_id: str, payload_sha256: str, prev_hash: str,
) -> dict[str, Any]:
    """The fields an event's hash covers (its payload through the payload's own hash)."""
    return {
        "seq": seq,
        "created_at": created_at,
        "actor_id": actor_id,
        "actor_username": actor_username,
        "action": action,
        "object_type": object_type,
        "object_id": object_id,
        "payload_sha256": payload_sha256,
        "prev_hash": prev_hash,
    }


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


@dataclass
class ChainReport:
    """Outcome of a walk along the chain."""

    count: int = 0
    head_seq: int = 0
    head_hash: str = GENESIS_HASH
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    @property
    def first_break(self) -> str | None:
        return self.problems[0] if self.problems else None

    def as_dict(self) -> dict[str, Any]:
        return {"ok": self.ok, "events": self.count, "head_seq": self.head_seq,
                "head_hash": self.head_hash, "first_break": self.first_break}


_ENVELOPE_ARGS = ("seq", "created_at", "actor_id", "actor_username", "action", "object_type",
                  "object_id", "payload_sha256", "prev_hash")
#: The fields a walk along the chain reads, in the order ``_walk`` takes them.
_WALK_FIELDS = ("seq", "created_at", "actor_id", "actor_username", "action", "object_type",
                "object_id", "payload", "payload_canonical", "prev_hash", "hash")


def _envelope_text(seq, created_at, actor_id, actor_username, action, object_type, object_id,
                   payload_sha256, prev_hash) -> str | None:
    """``canonical_json(event_envelope(...))`` as text, written out directly; None when a
    field is not of the plain type this shortcut assumes (the caller then encodes fully).

    A million envelopes go through ``verify_audit``: writing the nine fields in key order
    with json's own string escaper takes a quarter of the time of a sorted dict encode.
    tests/test_audit_envelope_text.py checks it against ``canonical_json``.
    """
    if type(seq) is not int or not (actor_id is None or type(actor_id) is int) or not all(
            type(v) is str for v in (created_at, actor_username, action, object_type, object_id,
                                     payload_sha256, prev_hash)):
        return None
    q = _json_string
    return (f'{{"action":{q(action)},"actor_id":{"null" if actor_id is None else actor_id},'
            f'"actor_username":{q(actor_username)},"created_at":{q(created_at)},'
            f'"object_id":{q(object_id)},"object_type":{q(object_type)},'
            f'"payload_sha256":{q(payload_sha256)},"prev_hash":{q(prev_hash)},"seq":{seq}}}')


def verify_events(events: Iterable[Any]) -> ChainReport:
    """Check links, sequence and hashes of events given in ascending ``seq`` order.

    Stops at the first broken link (later links cannot be trusted after it).
    ``events`` may be model instances or dicts with the same fields (an export).
    """
    def row(event):
        if isinstance(event, dict):
            return tuple(event.get(name) for name in _WALK_FIELDS)
        return tuple(getattr(event, name) for name in _WALK_FIELDS)

    return _walk(row(event) for event in events)


def _walk(rows: Iterable[tuple]) -> ChainReport:
    """``verify_events`` over tuples in ``_WALK_FIELDS`` order: the one loop both paths use.

    A million events pass through here in ``verify_audit``, so the loop body is kept
    to two JSON decodes, one JSON encode and two SHA-256 per event (no model instances).
    """
    report = ChainReport()
    expected_seq, prev_hash = 1, GENESIS_HASH
    sha256, loads = hashlib.sha256, json.loads
    for (seq, created_at, actor_id, actor_username, action, object_type, object_id, payload,
         canonical, event_prev, digest) in rows:
        where = f"event #{seq}"
        problem = None
        if seq != expected_seq:
            problem = (f"{where}: expected sequence number {expected_seq} "
                       f"(an event is missing or out of order)")
        elif event_prev != prev_hash:
            problem = f"{where}: prev_hash does not match the hash of event #{expected_seq - 1}"
        elif loads(canonical) != payload:
            problem = f"{where}: payload differs from the canonical text that was hashed"
        else:
            fields = (seq, created_at if isinstance(created_at, str) else created_at.isoformat(),
                      actor_id, actor_username, action, object_type, object_id,
                      sha256(canonical.encode("utf-8")).hexdigest(), event_prev)
            text = _envelope_text(*fields)
            # an export with odd types: the full canonical form decides
            encoded = canonical_json(event_envelope(**dict(zip(_ENVELOPE_ARGS, fields, strict=True)))) \
                if text is None else text.encode("utf-8")
            if sha256(encoded).hexdigest() != digest:
                problem = f"{where}: hash does not match its content (the event was altered)"
        if problem:
            report.problems.append(problem)
            break
        report.count += 1
        expected_seq, prev_hash = seq + 1, digest
    # the last good event (sequence numbers were checked to run 1, 2, 3...)
    report.head_seq, report.head_hash = expected_seq - 1, prev_hash
    return report


def verify_chain(*, checkpoint: dict | None = None, chunk_size: int = 2000) -> ChainReport:
    """Walk the stored chain (streamed, never loaded whole) and check its head.

    ``checkpoint`` is ``{"seq": n, "hash": h}`` written earlier by
    ``audit_checkpoint``: the event with that sequence number must still exist
    with that hash, which catches truncation and a wholesale rewrite that the
    links alone cannot.
    """
    # Plain tuples, streamed in chunks: no model instance per event, memory flat.
    rows = AuditEvent.objects.order_by("seq").values_list(*_WALK_FIELDS)
    report = _walk(rows.iterator(chunk_size=chunk_size))
    if not report.ok:
        return report
    head = ChainHead.objects.filter(pk=1).first()
    if head is None:
        report.problems.append("chain head: the head row is missing")
    elif (head.seq, head.hash) != (report.head_seq, report.head_hash):
        report.problems.append(
            f"chain head: records #{head.seq} {head.hash[:12]}… but the last event is "
            f"#{report.head_seq} {report.head_hash[:12]}… (events were removed or added)"
        )
    if checkpoint is not None and report.ok:
        seq, expected = checkpoint["seq"], checkpoint["hash"]
        stored = AuditEvent.objects.filter(seq=seq).values_list("hash", flat=True).first()
        if seq > 0 and stored is None:
            report.problems.append(
                f"checkpoint: event #{seq} is missing (the chain was truncated)"
            )
        elif seq > 0 and stored != expected:
            report.problems.append(
                f"checkpoint: event #{seq} has hash {stored[:12]}…, the checkpoint recorded "
                f"{expected[:12]}… (the chain was rewritten)"
            )
    return report


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
