"""Take the row lock on a decision and check the client's ``If-Match`` under it."""

from __future__ import annotations

from decisions.models import Decision
from decisions.services.access import require_role, visible_decisions
from decisions.services.errors import NotFoundError, PreconditionFailed, PreconditionRequired

__all__ = ["IF_MATCH_ANY", "lock_decision"]

#: ``If-Match: *`` (RFC 9110 §13.1.1) matches whatever the current state is; the
#: command-line tools and the demo loader use it, the API passes the client's header.
IF_MATCH_ANY = "*"


def _etag_matches(if_match: str, etag: str) -> bool:
    """Strong comparison (RFC 9110 §8.8.3.2): weak tags never match."""
    candidates = [part.strip() for part in if_match.split(",")]
    return "*" in candidates or etag in candidates


def lock_decision(decision_id, *, actor, if_match: str | None, roles, action: str,
                  staff_ok: bool = False) -> Decision:
    """Lock the decision row for this transaction, then check role and ETag.

    ``staff_ok`` lets a staff user act without a team role (the admin site's
    policy editing); everyone else must be a member with one of ``roles``.

    The ETag is compared here, inside the transaction and under the lock, not
    before: two clients holding the same ETag queue on the lock, the first one
    changes ``lock_version``, and the second then sees the new value and gets
    412 instead of silently overwriting (a lost update).
    """
    as_staff = staff_ok and actor is not None and actor.is_active and actor.is_staff
    scope = Decision.objects.all() if as_staff else visible_decisions(actor)
    try:
        decision = scope.select_for_update().get(pk=decision_id)
    except (Decision.DoesNotExist, ValueError, TypeError):
        raise NotFoundError("decision: not found") from None
    if not as_staff:
        require_role(actor, decision.team_id, roles, action)
    if if_match is None or not if_match.strip():
        raise PreconditionRequired(
            f"If-Match: required for {action}; read the decision first and send its ETag "
            f"(currently {decision.etag}) in an If-Match header",
            location="If-Match",
        )
    if not _etag_matches(if_match, decision.etag):
        raise PreconditionFailed(
            f"If-Match: the decision has changed since you read it (sent {if_match.strip()}, "
            f"current {decision.etag}); read it again and resend",
            location="If-Match",
        )
    return decision
