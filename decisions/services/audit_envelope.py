"""The hashed form of an audit event: one definition for the writer and the verifiers.

``append_event`` hashes ``canonical_json(event_envelope(...))``; the chain walk in
``decisions.services.audit_verify`` must rebuild exactly those bytes from stored rows,
so both read the field list from here.
"""

from __future__ import annotations

from json.encoder import encode_basestring as _json_string
from typing import Any

__all__ = ["ENVELOPE_FIELDS", "event_envelope", "envelope_text"]

#: The envelope's fields, in the order ``event_envelope`` takes them.
ENVELOPE_FIELDS = ("seq", "created_at", "actor_id", "actor_username", "action", "object_type",
                   "object_id", "payload_sha256", "prev_hash")


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


def envelope_text(seq, created_at, actor_id, actor_username, action, object_type, object_id,
                  payload_sha256, prev_hash) -> str | None:
    """``canonical_json(event_envelope(...))`` as text, written out directly; None when a
    field is not of the plain type this shortcut assumes (the caller then encodes fully).

    Writing the nine fields in key order with json's own string escaper takes a quarter
    of the time of a sorted dict encode. tests/test_audit_envelope_text.py checks it
    against ``canonical_json``.
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
