"""Idempotency keys of decision creation: a retried ``POST /api/decisions/`` creates nothing new.

One row per (user, key) remembers which decision the first request created and a
hash of its body, written in the same transaction as the decision (see
``decisions.services.idempotency``). Keys follow the IETF draft "The
Idempotency-Key HTTP Header Field" (draft-ietf-httpapi-idempotency-key-header):
the key is scoped to the authenticated user, as its Security Considerations
recommend (a composite of the client's identity and the key), and expires after
``IDEMPOTENCY_KEY_TTL_HOURS`` (its §2.3, "Idempotency Key Validity and Expiry").

Unlike the records of the register, these rows are a cache of answers, not facts:
an expired row is deleted (by ``manage.py purge_idempotency_keys``, or when the
same user reuses the key after it expired).
"""

from django.conf import settings
from django.db import models

from decisions.models.register import Decision

#: The draft leaves the length to the server; 255 bounds the column and the index.
MAX_KEY_LENGTH = 255


class IdempotencyKey(models.Model):
    # No index of its own: the unique index on (user, key) starts with the user.
    user = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.CASCADE,
                             related_name="idempotency_keys", db_index=False)
    key = models.CharField(max_length=MAX_KEY_LENGTH)
    # SHA-256 of the canonical JSON of the first request's body (the draft's
    # "idempotency fingerprint", §2.4): a retry must send the same body.
    request_sha256 = models.CharField(max_length=64)
    decision = models.ForeignKey(Decision, on_delete=models.CASCADE,
                                 related_name="idempotency_keys")
    created_at = models.DateTimeField()

    class Meta:
        constraints = (
            # Decides the race between two first requests with one key: the
            # second insert fails, its whole transaction (decision and audit
            # event included) rolls back, and it answers with the winner's decision.
            models.UniqueConstraint(fields=["user", "key"], name="idempotency_key_unique_per_user"),
        )
        # The purge deletes by age.
        indexes = (models.Index(fields=["created_at"], name="idempotency_key_created_at"),)

    def __str__(self) -> str:
        return f"{self.key!r} of user {self.user_id} -> decision {self.decision_id}"
