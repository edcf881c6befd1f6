"""Sign-off: a named, re-authenticated signature bound to one version's hash.

The signer gives their password again at the moment of signing (the second
component of the signature). A refused attempt (wrong password, or the author
trying to sign their own version) is written to the audit trail in its own
transaction, since the signing transaction itself rolls back.
"""

from __future__ import annotations

from django.db import transaction
from django.utils import timezone

from decisions.models import SIGNING_ROLES, Decision, Meaning, ModelVersion, SignOff, Status
from decisions.services.access import require_role, visible_decisions
from decisions.services.audit import append_event
from decisions.services.decisions import _touch, get_version
from decisions.services.errors import (
    ConflictError,
    ForbiddenError,
    InvalidInput,
    NotFoundError,
    ReauthenticationFailed,
)
from decisions.services.locking import lock_decision

__all__ = ["policy_progress", "printed_name", "reject", "sign"]


def printed_name(user) -> str:
    return user.get_full_name().strip() or user.get_username()


def policy_progress(decision: Decision, version: ModelVersion | None) -> dict:
    """Per required role: how many approvals it needs and who has given them."""
    requirements = decision.policy.as_dict() if hasattr(decision, "policy") else {}
    # Filtered in Python so a prefetched ``signoffs`` set is used as it is.
    approvals = ([so for so in version.signoffs.all() if so.meaning == Meaning.APPROVE]
                 if version else [])
    roles = {}
    for role, count in requirements.items():
        names = [s.signer_printed_name for s in approvals if s.role == role]
        roles[role] = {"required": count, "signed": len(names), "signers": names}
    met = bool(requirements) and all(r["signed"] >= r["required"] for r in roles.values())
    return {"roles": roles, "met": met}


def _audit_refusal(*, actor, decision_id, version_number, role, meaning, reason: str) -> None:
    # Its own transaction: the signing transaction has rolled back, yet the
    # refused attempt must stay on record (failed authorisations are logged).
    with transaction.atomic():
        append_event(actor=actor, action="signoff.refused", object_type="decision",
                     object_id=decision_id,
                     payload={"version": version_number, "role": role, "meaning": meaning,
                              "reason": reason})


def sign(decision_id, version_number, *, actor, password: str, role: str, meaning: str,
         reason: str = "", if_match: str | None) -> SignOff:
    """Record ``actor``'s signature on the decision's current version.

    When the last signature the policy asks for arrives, the decision becomes
    approved in the same transaction; a ``reject`` sends it back to draft.
    """
    problems = []
    if role not in SIGNING_ROLES:
        allowed = ", ".join(repr(str(r)) for r in SIGNING_ROLES)
        problems.append(("role", f"must be one of the signing roles {allowed}, got {role!r}"))
    if meaning not in Meaning.values:
        problems.append(("meaning", f"must be 'approve' or 'reject', got {meaning!r}"))
    reason = (reason or "").strip()
    if meaning == Meaning.REJECT and not reason:
        problems.append(("reason", "is required when rejecting"))
    if not password:
        problems.append(("password", "is required: enter your password again to sign"))
    if problems:
        raise InvalidInput(problems=problems)
    # An outsider learns nothing, not even that the decision exists.
    decision = visible_decisions(actor).filter(pk=decision_id).first()
    if decision is None:
        raise NotFoundError("decision: not found")
    if not actor.check_password(password):
        _audit_refusal(actor=actor, decision_id=decision.pk, version_number=version_number,
                       role=role, meaning=meaning, reason="wrong password")
        raise ReauthenticationFailed("the password does not match; signing needs your own "
                                     "password entered again", location="password")
    try:
        with transaction.atomic():
            return _sign_locked(decision.pk, version_number, actor=actor, role=role,
                                meaning=meaning, reason=reason, if_match=if_match)
    except ForbiddenError as exc:
        _audit_refusal(actor=actor, decision_id=decision.pk, version_number=version_number,
                       role=role, meaning=meaning, reason=str(exc))
        raise


def _sign_locked(decision_id, version_number, *, actor, role, meaning, reason, if_match):
    # The row lock serialises signers of one decision: two last approvers
    # racing must not both see "policy not yet met" and leave the decision
    # submitted, nor both approve it.
    decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=SIGNING_ROLES,
                             action="sign")
    require_role(actor, decision.team_id, [role], f"sign as {role!r}")
    version = get_version(decision, version_number)
    current = decision.current_version()
    if version.pk != current.pk:
        raise ConflictError(f"version {version.number}: superseded by version {current.number}; "
                            f"only the current version can be signed", location="number")
    if decision.status != Status.SUBMITTED:
        raise ConflictError(f"decision: only a submitted decision can be signed, "
                            f"not {decision.status}", location="status")
    if version.author_id == actor.pk:
        raise ForbiddenError("the author of a version cannot sign it", location="signer")
    if version.signoffs.filter(signer=actor).exists():
        raise ConflictError(f"you have already signed version {version.number}",
                            location="signer")
    progress = policy_progress(decision, version)
    needed = progress["roles"].get(role)
    if needed is None:
        raise ConflictError(f"the sign-off policy does not ask for {role!r}", location="role")
    if meaning == Meaning.APPROVE and needed["signed"] >= needed["required"]:
        raise ConflictError(f"the policy's {needed['required']} {role!r} sign-off(s) are "
                            f"already given", location="role")
    now = timezone.now()
    signoff = SignOff.objects.create(
        version=version, signer=actor, signer_printed_name=printed_name(actor), role=role,
        meaning=meaning, reason=reason, signed_at=now, bound_sha256=version.content_sha256,
    )
    status_before = decision.status
    if meaning == Meaning.REJECT:
        decision.status = Status.DRAFT
    elif policy_progress(decision, version)["met"]:
        decision.status = Status.APPROVED
    _touch(decision, now)
    append_event(actor=actor, action=f"signoff.{meaning}", object_type="decision",
                 object_id=decision.pk,
                 payload={"version": version.number, "signoff_id": signoff.pk,
                          "printed_name": signoff.signer_printed_name, "role": role,
                          "meaning": meaning, "reason": reason,
                          "signed_at": now.isoformat(), "bound_sha256": signoff.bound_sha256,
                          "status_before": status_before, "status_after": decision.status})
    return signoff


def reject(decision_id, version_number, *, actor, password: str, role: str, reason: str,
           if_match: str | None) -> SignOff:
    """A reject sign-off: the decision goes back to draft and needs a new version."""
    return sign(decision_id, version_number, actor=actor, password=password, role=role,
                meaning=Meaning.REJECT, reason=reason, if_match=if_match)
