"""The register: decisions, immutable model versions, sign-off and the chosen plan.

Decision lifecycle (every other move is refused with 409)::

    draft --submit--> submitted --policy met on current version--> approved
      ^                  |                                            |
      |   reject sign-off or new version                              | commit (needs a
      +------------------+                                            v  chosen strategy)
                                                                  committed --close--> closed

- ``save_version`` is allowed in draft and submitted; in submitted it sends the
  decision back to draft, and the sign-offs of the earlier version no longer
  count (they stay on record, bound to the version they signed).
- A ``reject`` sign-off sends a submitted decision back to draft; it can only be
  submitted again once a new version has been saved.

Model versions, sign-offs and chosen strategies are never updated or deleted:
database triggers refuse it (migration 0002).
"""

from django.conf import settings
from django.db import models

from decisions.models.teams import Role, Team


class Status(models.TextChoices):
    DRAFT = "draft", "draft"
    SUBMITTED = "submitted", "submitted"
    APPROVED = "approved", "approved"
    COMMITTED = "committed", "committed"
    CLOSED = "closed", "closed"


class Meaning(models.TextChoices):
    APPROVE = "approve", "approve"
    REJECT = "reject", "reject"


class Decision(models.Model):
    title = models.CharField(max_length=200)
    team = models.ForeignKey(Team, on_delete=models.PROTECT, related_name="decisions")
    owner = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="owned_decisions"
    )
    status = models.CharField(max_length=16, choices=Status.choices, default=Status.DRAFT)
    # Incremented by every change; the ETag is derived from it (optimistic concurrency).
    lock_version = models.PositiveIntegerField(default=1)
    created_at = models.DateTimeField()
    updated_at = models.DateTimeField()

    class Meta:
        ordering = ("-created_at", "-id")
        indexes = (models.Index(fields=["team", "status"]),)

    def __str__(self) -> str:
        return self.title

    @property
    def etag(self) -> str:
        """Strong entity tag of the decision's current state (RFC 9110 §8.8.3)."""
        return f'"decision-{self.pk}-{self.lock_version}"'

    def current_version(self):
        # A list query may have prefetched the versions newest first (see
        # decisions.api.views); use them rather than one more query per decision.
        prefetched = getattr(self, "versions_newest_first", None)
        if prefetched is not None:
            return prefetched[0] if prefetched else None
        return self.versions.order_by("-number").first()


class ModelVersion(models.Model):
    """One saved model: canonical JSON, its hash and the results computed when saved."""

    decision = models.ForeignKey(Decision, on_delete=models.PROTECT, related_name="versions")
    number = models.PositiveIntegerField()
    canonical_json = models.TextField()
    content_sha256 = models.CharField(max_length=64)
    # Results as computed by the core at save time: later code changes must not
    # silently alter what was signed.
    results = models.JSONField()
    results_sha256 = models.CharField(max_length=64)
    author = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="authored_versions"
    )
    created_at = models.DateTimeField()
    change_note = models.TextField(blank=True)
    source_note = models.TextField(blank=True)

    class Meta:
        ordering = ("decision_id", "number")
        constraints = (
            models.UniqueConstraint(fields=["decision", "number"], name="version_number_unique"),
        )

    def __str__(self) -> str:
        return f"{self.decision} v{self.number}"


class SignOffPolicy(models.Model):
    """Who must sign a decision's current version before it is approved."""

    decision = models.OneToOneField(Decision, on_delete=models.PROTECT, related_name="policy")
    updated_at = models.DateTimeField()

    def __str__(self) -> str:
        parts = ", ".join(f"{r.count} × {r.role}" for r in self.requirements.all())
        return f"Policy of {self.decision}: {parts or 'no roles'}"

    def as_dict(self) -> dict[str, int]:
        # Sorted in Python so a prefetched ``requirements`` set is used as it is.
        return {r.role: r.count for r in sorted(self.requirements.all(), key=lambda r: r.role)}


class PolicyRequirement(models.Model):
    policy = models.ForeignKey(SignOffPolicy, on_delete=models.CASCADE, related_name="requirements")
    role = models.CharField(max_length=32, choices=Role.choices)
    count = models.PositiveSmallIntegerField()

    class Meta:
        ordering = ("role",)
        constraints = (
            models.UniqueConstraint(fields=["policy", "role"], name="policy_role_unique"),
            models.CheckConstraint(condition=models.Q(count__gte=1), name="policy_count_positive"),
        )

    def __str__(self) -> str:
        return f"{self.count} × {self.role}"


class SignOff(models.Model):
    """A signature: printed name, time and meaning, bound to one version's hash."""

    version = models.ForeignKey(ModelVersion, on_delete=models.PROTECT, related_name="signoffs")
    signer = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="signoffs"
    )
    # Snapshot: renaming the user later must not change a past signature.
    signer_printed_name = models.CharField(max_length=300)
    role = models.CharField(max_length=32, choices=Role.choices)
    meaning = models.CharField(max_length=16, choices=Meaning.choices)
    reason = models.TextField(blank=True)
    signed_at = models.DateTimeField()
    bound_sha256 = models.CharField(max_length=64)

    class Meta:
        ordering = ("version_id", "signed_at", "id")
        constraints = (
            models.UniqueConstraint(fields=["version", "signer"], name="one_signoff_per_person"),
        )

    def __str__(self) -> str:
        return self.manifestation()

    def manifestation(self) -> str:
        """The signature as shown or printed: printed name, UTC time and meaning."""
        when = self.signed_at.strftime("%Y-%m-%d %H:%M:%S UTC")
        text = f"{self.signer_printed_name} ({self.role}) — {self.meaning} — {when}"
        return f"{text} — reason: {self.reason}" if self.reason else text


class ChosenStrategy(models.Model):
    """The plan recorded on an approved version (the latest record is the one in force)."""

    version = models.ForeignKey(ModelVersion, on_delete=models.PROTECT, related_name="strategies")
    plan = models.JSONField()
    recommended = models.BooleanField()
    justification = models.TextField(blank=True)
    value_given_up = models.FloatField(default=0.0)
    chosen_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="chosen_strategies"
    )
    chosen_at = models.DateTimeField()

    class Meta:
        ordering = ("version_id", "chosen_at", "id")

    def __str__(self) -> str:
        return f"Strategy for {self.version}"
