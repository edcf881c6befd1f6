"""Domain exceptions of the services: each carries an HTTP status, a message and a code.

Faces translate them: the API's exception handler answers with
``{"errors": [{"location", "message"}], "code"}`` and the status; web pages show
the message beside the field named by ``location``.
"""

from __future__ import annotations

from collections.abc import Iterable

__all__ = [
    "ConflictError",
    "DomainError",
    "ForbiddenError",
    "IdempotencyKeyInProgress",
    "IdempotencyKeyReused",
    "InvalidInput",
    "NotFoundError",
    "PreconditionFailed",
    "PreconditionRequired",
    "ReauthenticationFailed",
]


class DomainError(Exception):
    """Base class: ``status``, ``code`` and a list of ``(location, message)`` problems."""

    status = 400
    code = "invalid"

    def __init__(self, message: str = "", *, location: str = "",
                 problems: Iterable[tuple[str, str]] | None = None):
        self.problems = list(problems) if problems is not None else [(location, message)]
        super().__init__(
            "; ".join(f"{loc}: {msg}" if loc else msg for loc, msg in self.problems)
        )

    def as_list(self) -> list[dict[str, str]]:
        return [{"location": loc, "message": msg} for loc, msg in self.problems]


class InvalidInput(DomainError):
    """The request broke a rule about its content (400)."""


class ForbiddenError(DomainError):
    """The actor's role in the team does not allow this action (403)."""

    status = 403
    code = "forbidden"


class ReauthenticationFailed(ForbiddenError):
    """The password given again at the moment of signing is wrong (403)."""

    code = "reauthentication_failed"


class NotFoundError(DomainError):
    """No such object among those the actor may see (404; never a foreign object's data)."""

    status = 404
    code = "not_found"


class ConflictError(DomainError):
    """The decision's status does not allow this action now (409)."""

    status = 409
    code = "conflict"


class PreconditionFailed(DomainError):
    """``If-Match`` named a state that is no longer current (412)."""

    status = 412
    code = "precondition_failed"


class PreconditionRequired(DomainError):
    """A change to a decision came without ``If-Match`` (428)."""

    status = 428
    code = "precondition_required"


class IdempotencyKeyReused(DomainError):
    """An ``Idempotency-Key`` came back with a different request body (422).

    Status from the IETF draft "The Idempotency-Key HTTP Header Field", §2.7.
    """

    status = 422
    code = "idempotency_key_reused"


class IdempotencyKeyInProgress(ConflictError):
    """Another request with the same ``Idempotency-Key`` is being processed (409, draft §2.7)."""

    code = "idempotency_key_in_progress"
