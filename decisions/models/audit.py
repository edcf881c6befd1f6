"""The tamper-evident audit chain.

Each event carries the previous event's hash and its own hash, a SHA-256 over a
canonical encoding we produce when writing (never over JSON read back from the
database, whose key order and number formatting may differ). Appends are
serialised on the single ``ChainHead`` row (see ``decisions.services.audit``);
the unique constraints on ``seq`` and ``prev_hash`` make a fork impossible even
if that lock were bypassed. Triggers (migration 0002) refuse UPDATE, DELETE and
TRUNCATE.
"""

from django.conf import settings
from django.db import models

GENESIS_HASH = "0" * 64


class AuditEvent(models.Model):
    seq = models.PositiveBigIntegerField(unique=True)
    created_at = models.DateTimeField()
    # PROTECT: a user with events is deactivated, never deleted; the snapshot
    # keeps the name as it was.
    actor = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.PROTECT,
        related_name="audit_events",
    )
    actor_username = models.CharField(max_length=150, blank=True)
    action = models.CharField(max_length=64)
    object_type = models.CharField(max_length=64)
    object_id = models.CharField(max_length=64)
    # The queryable copy and the exact canonical text that was hashed.
    payload = models.JSONField()
    payload_canonical = models.TextField()
    prev_hash = models.CharField(max_length=64, unique=True)
    hash = models.CharField(max_length=64, unique=True)

    class Meta:
        ordering = ("seq",)
        indexes = (models.Index(fields=["object_type", "object_id"]),)

    def __str__(self) -> str:
        return f"#{self.seq} {self.action} {self.object_type}:{self.object_id}"


class ChainHead(models.Model):
    """The single row that every append locks and moves forward."""

    id = models.PositiveSmallIntegerField(primary_key=True, default=1)
    seq = models.PositiveBigIntegerField(default=0)
    hash = models.CharField(max_length=64, default=GENESIS_HASH)

    class Meta:
        constraints = (models.CheckConstraint(condition=models.Q(id=1), name="chain_head_single_row"),)

    def __str__(self) -> str:
        return f"head #{self.seq} {self.hash[:12]}"
