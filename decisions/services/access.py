"""Who sees what: every query of team data goes through these helpers."""

from __future__ import annotations

from collections.abc import Iterable

from django.db.models import QuerySet

from decisions.models import Decision, Membership, Team
from decisions.services.errors import ForbiddenError, NotFoundError

__all__ = ["require_role", "role_of", "visible_decisions", "visible_teams"]


def _team_ids(user):
    return Membership.objects.filter(user_id=user.pk).values("team_id")


def visible_teams(user) -> QuerySet[Team]:
    """Teams the user belongs to (none for an anonymous user)."""
    if user is None or not user.is_authenticated:
        return Team.objects.none()
    return Team.objects.filter(id__in=_team_ids(user))


def visible_decisions(user) -> QuerySet[Decision]:
    """Decisions of the user's teams; a foreign decision is simply absent (404)."""
    if user is None or not user.is_authenticated:
        return Decision.objects.none()
    return Decision.objects.filter(team_id__in=_team_ids(user))


def role_of(user, team_id: int) -> str | None:
    if user is None or not user.is_authenticated:
        return None
    return (
        Membership.objects.filter(user_id=user.pk, team_id=team_id)
        .values_list("role", flat=True)
        .first()
    )


def require_role(user, team_id: int, roles: Iterable[str], action: str) -> str:
    """Return the user's role in the team, or refuse: 404 for an outsider, 403 for a member."""
    role = role_of(user, team_id)
    if role is None:
        raise NotFoundError("not found")
    # str() first: repr() of a TextChoices member shows "Role.ANALYST", not the role's name.
    allowed = [str(r) for r in roles]
    if str(role) not in allowed:
        raise ForbiddenError(
            f"{action}: needs the role {' or '.join(repr(r) for r in allowed)} in this team; "
            f"you are {str(role)!r}"
        )
    return role
