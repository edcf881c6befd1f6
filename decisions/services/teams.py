"""Teams and memberships: who belongs where, with which role (staff only)."""

from __future__ import annotations

from django.db import transaction

from decisions.models import Membership, Role, Team
from decisions.services.audit import append_event
from decisions.services.errors import ConflictError, ForbiddenError, InvalidInput

__all__ = ["add_member", "change_role", "create_team", "remove_member"]


def _require_staff(actor, action: str) -> None:
    if actor is None or not (actor.is_active and actor.is_staff):
        raise ForbiddenError(f"{action}: only staff administer teams")


def create_team(*, actor, name: str) -> Team:
    _require_staff(actor, "create a team")
    name = (name or "").strip()
    if not name:
        raise InvalidInput("must not be blank", location="name")
    with transaction.atomic():
        if Team.objects.filter(name=name).exists():
            raise ConflictError(f"a team named {name!r} exists already", location="name")
        team = Team.objects.create(name=name)
        append_event(actor=actor, action="team.create", object_type="team", object_id=team.pk,
                     payload={"name": name})
    return team


def _check_role(role: str) -> None:
    if role not in Role.values:
        raise InvalidInput(f"must be one of {', '.join(Role.values)}, got {role!r}",
                           location="role")


def add_member(*, actor, team: Team, user, role: str) -> Membership:
    _require_staff(actor, "add a member")
    _check_role(role)
    with transaction.atomic():
        if Membership.objects.filter(team=team, user=user).exists():
            raise ConflictError(f"{user.get_username()} is already a member of {team.name}",
                                location="user")
        membership = Membership.objects.create(team=team, user=user, role=role)
        append_event(actor=actor, action="membership.add", object_type="team", object_id=team.pk,
                     payload={"user": user.get_username(), "role": role})
    return membership


def change_role(*, actor, membership: Membership, role: str) -> Membership:
    _require_staff(actor, "change a member's role")
    _check_role(role)
    with transaction.atomic():
        membership = Membership.objects.select_for_update().get(pk=membership.pk)
        before = membership.role
        if before == role:
            return membership
        membership.role = role
        membership.save(update_fields=["role"])
        append_event(actor=actor, action="membership.change", object_type="team",
                     object_id=membership.team_id,
                     payload={"user": membership.user.get_username(), "before": before,
                              "after": role})
    return membership


def remove_member(*, actor, membership: Membership) -> None:
    _require_staff(actor, "remove a member")
    with transaction.atomic():
        # Re-read under a lock: the caller's copy may be stale (a role changed since).
        membership = Membership.objects.select_for_update().get(pk=membership.pk)
        team_id, username, role = (membership.team_id, membership.user.get_username(),
                                   membership.role)
        membership.delete()
        append_event(actor=actor, action="membership.remove", object_type="team",
                     object_id=team_id, payload={"user": username, "role": role})
