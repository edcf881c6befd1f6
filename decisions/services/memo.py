"""The decision memo of one model version: gather the records, then build the PDF.

Reading only: no state changes, so no transaction or audit event. The memo is
built from committed data after any change has been committed (STYLE.md, habit
1). The PDF itself is built by the pure ``decisions.memo.build.build_memo`` from
the plain dict assembled here, so the same memo can be rebuilt later from the
same records and compared byte for byte (apart from the generation time).

Outcomes and study sources reach the memo as plain data (shapes in
``decisions.memo.build``): by default read here from the outcome in force for
this version (``decisions.services.outcomes.review``) and from the sources its
studies name (``decisions.services.sources``); a caller may pass its own. The
memo prints those sections only when there is something to print.
"""

from __future__ import annotations

import json
import logging
from datetime import UTC, datetime

from django.utils import timezone

from decisions.memo.build import build_memo
from decisions.models import AuditEvent, Decision, ModelVersion, StudySource
from decisions.services.access import visible_decisions
from decisions.services.decisions import get_version
from decisions.services.errors import DomainError, NotFoundError
from decisions.services.outcomes import current_outcome, review
from decisions.services.signoff import policy_progress
from decisions.services.sources import calibration, claimed_vs_calibrated

__all__ = ["memo_data", "memo_filename", "memo_for_version", "memo_for_operator",
           "model_size", "too_large_for_sensitivity", "SENSITIVITY_NODE_LIMIT", "TORNADO_ROWS",
           "SWEEPS"]

log = logging.getLogger(__name__)

#: Sensitivity is computed for models up to this many tree nodes (a table: its cells);
#: beyond it the memo and the decision page say it was not computed rather than holding
#: the request up (the tornado re-evaluates the model once per input: its cost grows
#: with the square of the size)
#: (measured on 2 busy cores: 200 nodes 0.5 s, 1,000 nodes 2.5 s, 3,000 nodes 18 s).
SENSITIVITY_NODE_LIMIT = 1_000
#: Inputs shown in the tornado chart and swept one way for break-even values.
TORNADO_ROWS = 10
SWEEPS = 3


def _utc(value: datetime | None) -> str:
    if value is None:
        return ""
    return value.astimezone(UTC).strftime("%Y-%m-%d %H:%M:%S UTC")


def model_size(document: dict) -> int:
    """Nodes of the model's general tree: a payoff table's counted as its equivalent tree
    holds them (``valuation.expand.expanded_size``: every study signal repeats the whole
    table), so that a table's many likelihoods count too. The measure of
    ``SENSITIVITY_NODE_LIMIT``, shared by the memo and the decision page."""
    if document.get("kind") == "payoff_table":
        studies = document.get("studies") or []
        per_decision = 1 + len(document.get("alternatives") or []) * (
            1 + len(document.get("states") or []))
        signals = sum(len(study.get("signals") or []) for study in studies
                      if isinstance(study, dict))
        return per_decision + len(studies) + signals * per_decision + (1 if studies else 0)
    return len(document.get("nodes", []))


def too_large_for_sensitivity(document: dict, occasion: str) -> str | None:
    """Why the model is not analysed ``occasion`` ("while the memo is generated"), or None
    when it is within ``SENSITIVITY_NODE_LIMIT``: the memo's and the decision page's rule."""
    if model_size(document) <= SENSITIVITY_NODE_LIMIT:
        return None
    return (f"The model has more than {SENSITIVITY_NODE_LIMIT:,} nodes (a payoff table counted "
            f"as the nodes of its equivalent tree), too many to analyse {occasion}; run "
            f"'python -m valuation sensitivity FILE --tornado' on its document.")


def sensitivity_data(document: dict, results: dict) -> dict:
    """Tornado rows and one-way sweeps of the most influential inputs, or a note why not.

    ``valuation.sensitivity`` is the core's; while it is absent or fails on a model
    the memo prints "Sensitivity not computed" with the reason instead.
    """
    note = too_large_for_sensitivity(document, "while the memo is generated")
    if note:
        return {"note": note}
    try:
        from valuation import sensitivity
    except ImportError:
        return {"note": "The sensitivity module of the valuation core is not installed."}
    try:
        rows = sensitivity.tornado(document)[:TORNADO_ROWS]
        sweeps = [sensitivity.one_way(document, row["name"]) for row in rows[:SWEEPS]
                  if row["swing"] > 0]
    except Exception as exc:  # the section is optional; the memo must still be built
        log.warning("sensitivity for the memo failed: %s", exc)
        return {"note": f"The sensitivity analysis failed ({type(exc).__name__}); the other "
                        f"figures are unaffected."}
    return {"tornado": rows, "one_way": sweeps, "base_value": results.get("expected_value"),
            "note": ("Amounts move by 20% of their base and probabilities by 0.1 either way; "
                     "other probabilities of the same node are rescaled to keep the sum 1.")}


def outcomes_data(version: ModelVersion) -> dict | None:
    """Expected vs realised and the regret, when an outcome is recorded for this version."""
    outcome = current_outcome(version.decision)
    if outcome is None or outcome.version_id != version.pk:
        return None
    try:
        rv = review(version.decision)
    except DomainError as exc:
        return {"rows": [], "note": f"The review could not be computed: {exc}"}
    hind = rv["hindsight"]
    note = " ".join([rv["sound_given_what_was_known"]["statement"], hind["statement"],
                     f"Recorded by {rv['outcome']['recorded_by']} on "
                     f"{_utc(outcome.recorded_at)}"
                     + (f" (corrected {rv['outcome']['corrections']} times)"
                        if rv["outcome"]["corrections"] else "") + "."])
    return {"rows": [{"label": "Chosen plan", "expected": rv["expected_at_approval"],
                      "realised": rv["realised"], "regret": hind["regret"]}],
            "regret": hind["regret"], "probability": rv["probability_of_what_happened"],
            "note": note}


def sources_data(version: ModelVersion, document: dict) -> list | None:
    """Claimed vs calibrated accuracy of each study source this version's studies name."""
    named = {s["source"]["id"]: s["name"] for s in document.get("studies") or []
             if isinstance(s.get("source"), dict) and isinstance(s["source"].get("id"), int)}
    if not named:
        return None
    sources = StudySource.objects.filter(pk__in=named, team_id=version.decision.team_id)
    try:
        compared = {e["study"]: e for e in claimed_vs_calibrated(version)["studies"]}
    except DomainError:
        compared = {}
    out = []
    for source in sources.order_by("name", "id"):
        study = named[source.pk]
        try:
            cal = calibration(source)["calibration"]
        except DomainError as exc:
            out.append({"name": source.name, "study": study, "message": str(exc)})
            continue
        entry = compared.get(study) or {}
        out.append({"name": source.name, "study": study, "calibration": cal,
                    "message": entry.get("message") or entry.get("note") or ""})
    return out or None


def memo_data(version: ModelVersion, *, generated_at: datetime, sources: list | None = None,
              outcomes: dict | None = None, sensitivity: dict | None = None) -> dict:
    """The plain dict ``build_memo`` takes, read from the records of ``version``.

    ``sources``, ``outcomes`` and ``sensitivity`` default to what the records hold.
    """
    decision: Decision = version.decision
    document = json.loads(version.canonical_json)
    results = version.results
    strategy = version.strategies.select_related("chosen_by").order_by("-chosen_at", "-id").first()
    head = AuditEvent.objects.order_by("-seq").values("seq", "hash").first()
    signoffs = version.signoffs.order_by("signed_at", "id")
    return {
        "decision": {"id": decision.pk, "title": decision.title, "team": decision.team.name,
                     "status": decision.status},
        "version": {"number": version.number, "content_sha256": version.content_sha256,
                    "results_sha256": version.results_sha256,
                    "created_at": _utc(version.created_at),
                    "author": version.author.get_username(), "change_note": version.change_note},
        "generated_at": _utc(generated_at),
        "audit_head": head,
        "document": document,
        "results": results,
        "strategy": None if strategy is None else {
            "recommended": strategy.recommended, "plan": strategy.plan,
            "justification": strategy.justification, "value_given_up": strategy.value_given_up,
            "chosen_by": strategy.chosen_by.get_username(), "chosen_at": _utc(strategy.chosen_at)},
        "signoffs": [{"printed_name": s.signer_printed_name, "role": s.role,
                      "meaning": s.meaning, "signed_at": _utc(s.signed_at),
                      "bound_sha256": s.bound_sha256, "reason": s.reason} for s in signoffs],
        "policy": policy_progress(decision, version),
        "sensitivity": sensitivity if sensitivity is not None
        else sensitivity_data(document, results),
        "sources": sources if sources is not None else sources_data(version, document),
        "outcomes": outcomes if outcomes is not None else outcomes_data(version),
    }


def memo_filename(decision_id: int, number: int) -> str:
    """A download name with nothing a header or a file system could misread."""
    return f"decision-{int(decision_id)}-version-{int(number)}-memo.pdf"


def memo_for_version(user, decision_id, number, *, sources: list | None = None,
                     outcomes: dict | None = None) -> bytes:
    """The memo of version ``number`` of a decision ``user`` may see (any member of its team).

    Raises :class:`NotFoundError` for a decision of another team or a missing version.
    """
    decision = visible_decisions(user).select_related("team").filter(pk=decision_id).first()
    if decision is None:
        raise NotFoundError("decision: not found")
    version = get_version(decision, number)
    return build_memo(memo_data(version, generated_at=timezone.now(), sources=sources,
                                outcomes=outcomes))


def memo_for_operator(decision_id, number: int | None = None) -> tuple[bytes, int]:
    """The memo for the command line, which has the database's own trust: no team scope.

    ``number`` defaults to the current version. Returns the PDF and the version number.
    """
    decision = Decision.objects.select_related("team").filter(pk=decision_id).first()
    if decision is None:
        raise NotFoundError(f"decision {decision_id}: not found", location="decision")
    if number is None:
        current = decision.current_version()
        if current is None:
            raise NotFoundError(f"decision {decision_id}: has no saved version yet",
                                location="version")
        number = current.number
    version = get_version(decision, number)
    return build_memo(memo_data(version, generated_at=timezone.now())), version.number
