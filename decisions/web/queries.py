"""Read-only queries of the browser face, always scoped to the user's teams.

Nothing here changes data: every change goes through ``decisions.services``.
Lookups start from ``visible_decisions`` / ``visible_teams`` so a decision of
another team is simply absent (the page answers 404, never "forbidden").
"""

from __future__ import annotations

from dataclasses import dataclass

from django.http import Http404

from decisions.models import SIGNING_ROLES, AuditEvent, Decision, Meaning, Membership, Role, Status
from decisions.services.access import role_of, visible_decisions
from decisions.services.signoff import policy_progress

__all__ = [
    "SignState",
    "audit_events",
    "dashboard_groups",
    "decision_for",
    "roles_by_team",
    "sign_state",
    "teams_where_analyst",
]

STATUS_ORDER = [Status.DRAFT, Status.SUBMITTED, Status.APPROVED, Status.COMMITTED, Status.CLOSED]


def decision_for(user, pk) -> Decision:
    """The decision if the user may see it; otherwise 404 (for outsiders and strangers alike)."""
    decision = (visible_decisions(user).select_related("team", "owner", "policy")
                .filter(pk=pk).first())
    if decision is None:
        raise Http404("no such decision among your teams")
    return decision


def roles_by_team(user) -> dict[int, str]:
    return dict(Membership.objects.filter(user_id=user.pk).values_list("team_id", "role"))


def teams_where_analyst(user):
    return [m.team for m in Membership.objects.filter(user_id=user.pk, role=Role.ANALYST)
            .select_related("team").order_by("team__name")]


@dataclass(frozen=True)
class SignState:
    """Whether the user can sign the current version now, and if not, why not."""

    can_sign: bool
    role: str | None
    reason: str


def sign_state(user, decision: Decision, version, progress: dict) -> SignState:
    """Mirror of the service's checks, so the page can explain a disabled sign-off panel.

    The service stays the authority: it repeats every check under the row lock.
    """
    role = role_of(user, decision.team_id)
    if role not in SIGNING_ROLES:
        return SignState(False, role, f"Your role in this team is {role!r}; only "
                                      "financial review, operations and budget holder sign.")
    if decision.status != Status.SUBMITTED or version is None:
        return SignState(False, role, f"The decision is {decision.status}; only a submitted "
                                      "decision can be signed.")
    needed = progress["roles"].get(role)
    if needed is None:
        return SignState(False, role, f"The sign-off policy does not ask for {role!r}.")
    if version.author_id == user.pk:
        return SignState(False, role, "You wrote this version; its author cannot sign it.")
    if version.signoffs.filter(signer_id=user.pk).exists():
        return SignState(False, role, f"You have already signed version {version.number}.")
    if needed["signed"] >= needed["required"]:
        return SignState(False, role, f"The {needed['required']} {role!r} sign-off(s) the policy "
                                      "asks for are already given.")
    return SignState(True, role, "")


def dashboard_groups(user) -> tuple[list[dict], list[dict]]:
    """(decisions waiting for the user's sign-off, then every visible decision by status)."""
    decisions = list(visible_decisions(user).select_related("team", "owner", "policy")
                     .prefetch_related("versions__signoffs", "policy__requirements"))
    waiting = []
    for decision in decisions:
        if decision.status != Status.SUBMITTED:
            continue
        version = max(decision.versions.all(), key=lambda v: v.number, default=None)
        progress = policy_progress(decision, version)
        state = sign_state(user, decision, version, progress)
        if state.can_sign:
            waiting.append({"decision": decision, "version": version, "role": state.role})
    groups = []
    for status in STATUS_ORDER:
        rows = [d for d in decisions if d.status == status]
        groups.append({"status": status, "label": status.label, "decisions": rows})
    return waiting, groups


def audit_events(decision: Decision):
    """The decision's audit events, oldest first (the caller has already checked visibility)."""
    return (AuditEvent.objects.filter(object_type="decision", object_id=str(decision.pk))
            .order_by("seq"))


def rejection_of(version) -> object | None:
    """The reject sign-off on a version, if any (a rejected version cannot be resubmitted)."""
    if version is None:
        return None
    return version.signoffs.filter(meaning=Meaning.REJECT).first()
