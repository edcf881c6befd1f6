"""Teams and the role each member plays in one team."""

from django.conf import settings
from django.db import models


class Role(models.TextChoices):
    """What a member may do in a team.

    Analysts create decisions, save versions, submit, record the chosen
    strategy, commit and close. The three reviewer roles sign off. Viewers read.
    """

    ANALYST = "analyst", "analyst"
    FINANCIAL_REVIEW = "financial review", "financial review"
    OPERATIONS = "operations", "operations"
    BUDGET_HOLDER = "budget holder", "budget holder"
    VIEWER = "viewer", "viewer"


SIGNING_ROLES = (Role.FINANCIAL_REVIEW, Role.OPERATIONS, Role.BUDGET_HOLDER)


class Team(models.Model):
    name = models.CharField(max_length=200, unique=True)
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ("name",)

    def __str__(self) -> str:
        return self.name


class Membership(models.Model):
    """One user in one team with one role (change the role to change duties)."""

    user = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="memberships"
    )
    team = models.ForeignKey(Team, on_delete=models.PROTECT, related_name="memberships")
    role = models.CharField(max_length=32, choices=Role.choices)
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ("team_id", "user_id")
        constraints = (
            models.UniqueConstraint(fields=["user", "team"], name="membership_one_role_per_team"),
        )

    def __str__(self) -> str:
        return f"{self.user} in {self.team} as {self.role}"
