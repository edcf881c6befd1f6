"""Panels the decision page gains from the source and outcome pages.

- "Study sources": the form that takes a study's likelihoods from a source
  (drafts only; analysts and reviewers, as for any new version) and, for the
  version shown, EVSI and net value with the claimed and with the calibrated
  accuracy, flagged when the calibrated figures flip the recommendation.
- Links to record the outcome and to the review, once the decision is committed.
"""

from __future__ import annotations

import json

from decisions.models import SIGNING_ROLES, Role, Status
from decisions.services import sources
from decisions.services.outcomes import current_outcome
from decisions.web.forms_sources import ApplySourceForm
from decisions.web.presenters_sources import comparison_view

__all__ = ["apply_form_for", "decision_panels"]

_AUTHORS = (Role.ANALYST, *SIGNING_ROLES)
_AFTER_COMMIT = (Status.COMMITTED, Status.CLOSED)


def _document(version) -> dict:
    return json.loads(version.canonical_json) if version is not None else {}


def apply_form_for(user, decision, data=None):
    """The form when the current version is a payoff table with studies and the team has
    sources; None otherwise (the page then shows no form)."""
    document = _document(decision.current_version())
    studies = [s.get("name") for s in document.get("studies") or []] \
        if document.get("kind") == "payoff_table" else []
    if not studies:
        return None
    team_sources = list(sources.visible_sources(user).filter(team_id=decision.team_id)
                        .order_by("name"))
    if not team_sources:
        return None
    return ApplySourceForm(data, studies=studies, sources=team_sources,
                           initial={"etag": decision.etag, "mode": "claimed"})


def decision_panels(user, decision, role, version, *, source_form=None) -> dict:
    can_apply = decision.status == Status.DRAFT and role in _AUTHORS
    if source_form is None and can_apply:
        source_form = apply_form_for(user, decision)
    document = _document(version)
    sourced = any(isinstance(s.get("source"), dict) for s in document.get("studies") or [])
    comparison = (comparison_view(sources.claimed_vs_calibrated(version))
                  if sourced and document.get("kind") == "payoff_table" else None)
    committed = decision.status in _AFTER_COMMIT
    return {
        "source_form": source_form if can_apply else None,
        "comparison": comparison,
        "outcome": current_outcome(decision) if committed else None,
        "can_record_outcome": committed and role == Role.ANALYST,
    }
