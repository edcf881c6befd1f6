"""The chain walk's direct envelope text equals the canonical JSON that append_event hashes.

``decisions.services.audit_envelope.envelope_text`` writes an event envelope's canonical
form by hand for speed (verify_audit over a million events); the reference is the project's
own ``valuation.canonical.canonical_json`` of ``event_envelope(...)``, which
``append_event`` hashes. Inputs with odd types are refused (None) so that the walk falls
back to the reference.
"""

from __future__ import annotations

import pytest

from decisions.services.audit_envelope import envelope_text, event_envelope
from valuation.canonical import canonical_json

BASE = {"seq": 1, "created_at": "2026-12-01T09:30:00.000001+00:00", "actor_id": 7,
        "actor_username": "ana", "action": "decision.create", "object_type": "decision",
        "object_id": "12", "payload_sha256": "a" * 64, "prev_hash": "0" * 64}


@pytest.mark.parametrize("change", [
    {},
    {"actor_id": None, "actor_username": ""},
    {"seq": 10**15, "actor_id": 2**40},
    {"actor_username": 'Zoë "quoted" \\ back\\slash'},
    {"actor_username": "tab\tnewline\nbell\x07 and nul\x00"},
    {"object_id": "张伟 – Łódź ✓", "action": "signoff.approve"},
    {"created_at": "2026-12-01T09:30:00+00:00"},
])
def test_direct_text_equals_canonical_json(change):
    envelope = event_envelope(**{**BASE, **change})
    text = envelope_text(**{**BASE, **change})
    assert text is not None
    assert text.encode("utf-8") == canonical_json(envelope)


@pytest.mark.parametrize("change", [
    {"seq": 1.0}, {"seq": True}, {"actor_id": 7.0}, {"actor_id": "7"}, {"object_id": 12},
])
def test_odd_types_are_left_to_the_full_encoder(change):
    assert envelope_text(**{**BASE, **change}) is None
