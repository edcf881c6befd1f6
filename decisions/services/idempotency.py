"""Decision creation that is safe to retry: the ``Idempotency-Key`` request header.

A client whose connection drops after sending ``POST /api/decisions/`` cannot know
whether the decision was created. Sending the request again with the same key
answers with the decision the first request created instead of a duplicate.

The behaviour follows the IETF draft "The Idempotency-Key HTTP Header Field"
(draft-ietf-httpapi-idempotency-key-header; section numbers of draft -07):

- §2.1: the field value is a Structured Field String (RFC 8941 §3.3.3), e.g.
  ``Idempotency-Key: "8e03978e-40d5-43e8-bc93-6894a57f9324"``. The bare form many
  clients send (``Idempotency-Key: 8e03978e-...``) is read as the same key. The
  draft leaves the key's format to the server (§5 asks it to publish and check
  one): 1 to 255 printable ASCII characters (U+0020 to U+007E); anything else is
  refused with 400 before any work is done.
- §2.6, first request: processed as without the key; the key, a hash of the
  body's canonical JSON (the "fingerprint" of §2.4) and the created decision are
  written in the same transaction as the decision, so neither exists without
  the other. A refused request (400, 403...) records nothing, and the client can
  correct it and resend with the same key (§2.7: "Clients MUST correct the requests").
- §2.6, retry: nothing is written (no second decision, no second audit event);
  the answer is the decision the key created, as it is now.
- §2.7: the same key with a different body gets 422; a request whose key is held by
  another request still being processed gets 409.
- §2.3: a key is remembered for ``IDEMPOTENCY_KEY_TTL_HOURS`` (default 24); an older
  one is ignored, and ``manage.py purge_idempotency_keys`` deletes it.
- §5 (Security Considerations): keys are scoped to the authenticated user, so two
  users may use the same key independently and nobody can read another's answer.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any, NamedTuple

from django.conf import settings
from django.db import IntegrityError, transaction
from django.utils import timezone

from decisions.models import Decision, IdempotencyKey, Team
from decisions.models.idempotency import MAX_KEY_LENGTH
from decisions.services.access import visible_decisions
from decisions.services.decisions import create_decision
from decisions.services.errors import (
    ForbiddenError,
    IdempotencyKeyInProgress,
    IdempotencyKeyReused,
    InvalidInput,
)
from valuation.canonical import sha256_hex

__all__ = ["KEY_HEADER", "Creation", "create_decision_once", "parse_key", "purge_expired"]

KEY_HEADER = "Idempotency-Key"
_RULE = f"must be 1 to {MAX_KEY_LENGTH} printable ASCII characters (U+0020 to U+007E)"


class Creation(NamedTuple):
    """The decision a create request stands for, and whether it was made earlier."""

    decision: Decision
    replayed: bool


def _refuse(detail: str) -> InvalidInput:
    return InvalidInput(f"{KEY_HEADER}: {detail}", location=KEY_HEADER)


def _unquote(value: str) -> str:
    """The content of an RFC 8941 §4.2.5 String: ``\\"`` and ``\\\\`` are its only escapes."""
    chars, i = [], 1
    while i < len(value):
        char = value[i]
        if char == "\\":
            if value[i + 1:i + 2] not in ('"', "\\"):
                raise _refuse('inside a quoted key only \\" and \\\\ may follow a backslash')
            chars.append(value[i + 1])
            i += 2
        elif char == '"':
            if i != len(value) - 1:
                raise _refuse("a quoted key must end at its closing quote (send one "
                              "Idempotency-Key field, with one key)")
            return "".join(chars)
        else:
            chars.append(char)
            i += 1
    raise _refuse("a quoted key must end with a closing quote")


def parse_key(raw: str | None) -> str | None:
    """The key an ``Idempotency-Key`` field value carries; None when the header is absent.

    Raises
    ------
    InvalidInput
        At ``Idempotency-Key`` (400), naming the rule the value breaks.
    """
    if raw is None:
        return None
    # Spaces and tabs around a field value are not part of it (RFC 9110 §5.5).
    value = raw.strip(" \t")
    key = _unquote(value) if value.startswith('"') else value
    if not key:
        raise _refuse(f"{_RULE}, got an empty key")
    if len(key) > MAX_KEY_LENGTH:
        raise _refuse(f"{_RULE}, got {len(key)} characters")
    for position, char in enumerate(key, 1):
        if not " " <= char <= "~":
            # The code point, not the character: a control character would garble the message.
            raise _refuse(f"{_RULE}, got U+{ord(char):04X} at position {position}")
    return key


def _cutoff(now: datetime) -> datetime:
    return now - timedelta(hours=settings.IDEMPOTENCY_KEY_TTL_HOURS)


def _live_record(actor, key: str) -> IdempotencyKey | None:
    """The user's record of ``key`` if it has not expired (expired ones are ignored)."""
    return IdempotencyKey.objects.filter(
        user_id=actor.pk, key=key, created_at__gte=_cutoff(timezone.now())).first()


def _replay(record: IdempotencyKey, actor, request_sha256: str) -> Creation:
    if record.request_sha256 != request_sha256:
        raise IdempotencyKeyReused(
            f"{KEY_HEADER}: this key was already used for a different request (another body) "
            f"within the last {settings.IDEMPOTENCY_KEY_TTL_HOURS} hours; send a new key with "
            f"a new request, or the first request's body to get its answer again",
            location=KEY_HEADER)
    # Scoped like every other read: a user since removed from the team does not get
    # the decision back.
    decision = visible_decisions(actor).filter(pk=record.decision_id).first()
    if decision is None:
        raise ForbiddenError(f"{KEY_HEADER}: the decision this key created belongs to a team "
                             f"you are no longer a member of", location=KEY_HEADER)
    return Creation(decision, replayed=True)


def create_decision_once(*, actor, key: str | None, body: Any, team: Team | int, title: str,
                         policy: dict[str, int] | None = None) -> Creation:
    """:func:`~decisions.services.decisions.create_decision`, answered once per ``key``.

    ``body`` is the request body as parsed; its canonical JSON's hash tells a retry
    (same body) from a reuse of the key (another body: :class:`IdempotencyKeyReused`).
    Without a key this is ``create_decision``.
    """
    if key is None:
        return Creation(create_decision(actor=actor, team=team, title=title, policy=policy),
                        replayed=False)
    request_sha256 = sha256_hex(body)
    found = _live_record(actor, key)
    if found is not None:
        return _replay(found, actor, request_sha256)
    try:
        # One transaction for the decision, its audit event and the key (create_decision's
        # own block becomes a savepoint inside it): a crash leaves all or none.
        with transaction.atomic():
            now = timezone.now()
            # The key's expired record, if any, is forgotten so that the key can start again.
            IdempotencyKey.objects.filter(user_id=actor.pk, key=key,
                                          created_at__lt=_cutoff(now)).delete()
            decision = create_decision(actor=actor, team=team, title=title, policy=policy)
            IdempotencyKey.objects.create(user=actor, key=key, request_sha256=request_sha256,
                                          decision=decision, created_at=now)
    except IntegrityError as exc:
        if not _is_the_key_constraint(exc):
            raise  # another integrity failure: not this key's business, and not a conflict
        # The race: another request with this key committed its record between our
        # look-up and our insert (two first sends of one request, e.g. a client that
        # retried before the first answer came). The unique constraint on (user, key)
        # refused our row, and leaving the atomic block by the exception rolled back
        # everything in it: our decision, its policy and its audit event. When an outer
        # transaction is open the block was a savepoint, so that transaction is usable
        # again (PostgreSQL would otherwise refuse every later statement in it). Our
        # insert waited on the unique index until the other transaction ended, so its
        # record is committed now and this request is answered as a retry.
        found = _live_record(actor, key)
        if found is None:
            raise IdempotencyKeyInProgress(
                f"{KEY_HEADER}: another request with this key is being processed or "
                f"conflicted with this one; send it again shortly", location=KEY_HEADER) from None
        return _replay(found, actor, request_sha256)
    return Creation(decision, replayed=False)


def _is_the_key_constraint(exc: IntegrityError) -> bool:
    """Whether ``exc`` is the (user, key) unique constraint refusing our record.

    PostgreSQL names the constraint; SQLite names the table and its columns.
    """
    text = str(exc)
    return ("idempotency_key_unique_per_user" in text
            or f"{IdempotencyKey._meta.db_table}.key" in text)


def purge_expired(*, now: datetime | None = None) -> int:
    """Delete the keys older than ``IDEMPOTENCY_KEY_TTL_HOURS``; return how many.

    Expired keys are already ignored; this only keeps the table small.
    """
    deleted, _ = IdempotencyKey.objects.filter(
        created_at__lt=_cutoff(now or timezone.now())).delete()
    return deleted
