"""Records of the decision register.

Split by concern: teams and roles, the decision register itself (decisions,
immutable model versions, sign-off policies, sign-offs, chosen strategies) and
the audit chain. Outcomes and study sources live in their own module, added
later beside these, and so do the idempotency keys of decision creation.
"""

from decisions.models.audit import GENESIS_HASH, AuditEvent, ChainHead
from decisions.models.idempotency import IdempotencyKey
from decisions.models.register import (
    ChosenStrategy,
    Decision,
    Meaning,
    ModelVersion,
    PolicyRequirement,
    SignOff,
    SignOffPolicy,
    Status,
)
from decisions.models.sources import (
    Outcome,
    OutcomeForecast,
    RecordOrigin,
    StudyRecord,
    StudySource,
)
from decisions.models.teams import SIGNING_ROLES, Membership, Role, Team

__all__ = [
    "GENESIS_HASH",
    "SIGNING_ROLES",
    "AuditEvent",
    "ChainHead",
    "ChosenStrategy",
    "Decision",
    "IdempotencyKey",
    "Meaning",
    "Membership",
    "ModelVersion",
    "Outcome",
    "OutcomeForecast",
    "PolicyRequirement",
    "RecordOrigin",
    "Role",
    "SignOff",
    "SignOffPolicy",
    "Status",
    "StudyRecord",
    "StudySource",
    "Team",
]
