"""What happened after a committed decision, and the post-hoc review.

:func:`record_outcome` stores which branch each chance node on the path took,
the study signal if a study was bought, and the money actually made or lost.
:func:`review` then keeps two questions apart:

- *Was the decision sound given what was known?* The chosen plan's expected
  value at approval against the best plan's (the expected value given up).
- *How did it turn out?* Expected vs realised, the probability the model gave
  to what happened, and the regret with hindsight: the value of the best plan
  had the realised states been known, minus the chosen plan's value under
  those same states (both from the model's payoffs, so the gap is about the
  plan, not about payoffs the model got wrong; that gap is expected vs realised).

A good outcome does not prove a sound decision, nor a bad one an unsound
decision; the review says so beside the figures.

Paths are recorded against the node ids of the version's general tree
(``valuation.expand``: a payoff table becomes ``study-choice`` ->
``study0/signal`` -> ``study0/g0/decide`` -> ``study0/g0/a1`` -> states; without
a study ``decide`` -> ``a1`` -> states). Decisions taken along the path are
inferred from the chance nodes recorded below them; where nothing recorded
tells, the chosen strategy's alternative, else the model's best branch.
"""

from __future__ import annotations

import copy
import json
import math
import re
from typing import Any

from django.db import IntegrityError, transaction
from django.utils import timezone

import valuation
from decisions.models import (
    ChosenStrategy,
    Decision,
    ModelVersion,
    Outcome,
    OutcomeForecast,
    RecordOrigin,
    Role,
    Status,
    StudyRecord,
    StudySource,
)
from decisions.services.access import visible_decisions
from decisions.services.audit import append_event
from decisions.services.decisions import _touch, clean_amount
from decisions.services.errors import ConflictError, InvalidInput, NotFoundError
from decisions.services.locking import lock_decision
from valuation.errors import ModelValidationError, ValuationError

__all__ = ["current_outcome", "outcome_history", "record_outcome", "review", "walk_path"]

_EDITORS = (Role.ANALYST.value,)
_STUDY_SIGNAL = re.compile(r"^study([0-9]+)/signal$")
_STATE_NODE = re.compile(r"(^|/)a[0-9]+$")
MAX_NOTE = 5000


# ---- the path -----------------------------------------------------------------------------

def _tree_of(version: ModelVersion) -> tuple[dict, dict]:
    """The version's document and its general tree, whose node ids an outcome's path names.

    A payoff table whose equivalent tree is too large to write out (it is evaluated as a
    table) has no such ids: its outcome cannot be recorded by path, and the caller is
    told so instead of meeting the core's error.
    """
    doc = json.loads(version.canonical_json)
    try:
        return doc, valuation.expand(doc)
    except ModelValidationError as exc:
        raise InvalidInput(f"an outcome cannot be recorded for this model: "
                           f"{exc.problems[0].message}", location="path") from None


def _chance_below(nodes: dict[str, dict], root: str) -> dict[str, set[str]]:
    """For every node, the ids of the chance nodes in its subtree (itself included)."""
    below: dict[str, set[str]] = {}
    order, stack, seen = [], [root], set()
    while stack:  # iterative post-order: trees may be deep
        nid = stack.pop()
        if nid in seen:
            continue
        seen.add(nid)
        order.append(nid)
        stack.extend(b["to"] for b in nodes[nid].get("branches", []))
    for nid in reversed(order):
        node = nodes[nid]
        acc = {nid} if node["kind"] == "chance" else set()
        for b in node.get("branches", []):
            acc |= below.get(b["to"], set())
        below[nid] = acc
    return below


def walk_path(tree: dict, path: Any, *, preferred: dict[str, str] | None = None) -> list[dict]:
    """Follow ``path`` ({chance node id: branch label}) from the root to an end node.

    Returns the steps in order, ``{"node", "kind", "name", "branch",
    "probability"}`` (probability for chance steps only). Raises
    :class:`InvalidInput` naming every problem: unknown node ids, unknown
    labels, a chance node on the way with no recorded branch, recorded nodes
    off the path, or records under two branches of one decision.
    """
    if not isinstance(path, dict) or not path:
        raise InvalidInput("must be an object mapping chance node ids to the branch taken",
                           location="path")
    nodes = {n["id"]: n for n in tree["nodes"]}
    chance_ids = [n["id"] for n in tree["nodes"] if n["kind"] == "chance"]
    problems = []
    for key, label in path.items():
        node = nodes.get(key)
        if node is None or node["kind"] != "chance":
            shown = ", ".join(chance_ids[:8]) + (", …" if len(chance_ids) > 8 else "")
            problems.append((f"path.{key}", f"no chance node with this id (chance nodes: {shown})"))
            continue
        labels = [b["label"] for b in node["branches"]]
        if label not in labels:
            problems.append((f"path.{key}", f"unknown branch {label!r} (branches: "
                                            f"{', '.join(labels)})"))
    if problems:
        raise InvalidInput(problems=problems)
    below = _chance_below(nodes, tree["root"])
    recorded = set(path)
    steps: list[dict] = []
    nid = tree["root"]
    preferred = preferred or {}
    while True:
        node = nodes[nid]
        if node["kind"] == "end":
            break
        if node["kind"] == "chance":
            if nid not in path:
                labels = ", ".join(b["label"] for b in node["branches"])
                problems.append((f"path.{nid}", f"the path passes the chance node "
                                                f"'{node.get('name', nid)}'; record which branch it "
                                                f"took (branches: {labels})"))
                break
            branch = next(b for b in node["branches"] if b["label"] == path[nid])
            steps.append({"node": nid, "kind": "chance", "name": node.get("name", ""),
                          "branch": branch["label"], "probability": float(branch["probability"])})
        else:
            hits = [b for b in node["branches"] if recorded & below.get(b["to"], set())]
            if len(hits) > 1:
                problems.append(("path", f"records chance nodes under more than one branch of "
                                         f"the decision '{node.get('name', nid)}' "
                                         f"({', '.join(b['label'] for b in hits)}); record only "
                                         "the path actually taken"))
                break
            if hits:
                branch = hits[0]
            else:
                want = preferred.get(nid)
                branch = next((b for b in node["branches"] if b["label"] == want),
                              node["branches"][0])
            steps.append({"node": nid, "kind": "decision", "name": node.get("name", ""),
                          "branch": branch["label"]})
        nid = branch["to"]
    visited = {s["node"] for s in steps}
    for key in sorted(recorded - visited):
        if not problems:
            problems.append((f"path.{key}", "is not on the path the other recorded nodes "
                                            "describe"))
    if problems:
        raise InvalidInput(problems=problems)
    return steps


def _preferred(version: ModelVersion, strategy: ChosenStrategy | None, tree: dict) -> dict:
    """Decision branches to take where the recorded chance nodes do not tell."""
    out = {nid: info.get("best_branch") for nid, info in (version.results.get("nodes") or {}).items()
           if info.get("best_branch")}
    alternative = (strategy.plan or {}).get("alternative") if strategy else None
    if alternative:
        for node in tree["nodes"]:
            if node["kind"] == "decision" and alternative in [b["label"] for b in node["branches"]]:
                out[node["id"]] = alternative
    return out


def _chosen_expected_value(version: ModelVersion, strategy: ChosenStrategy | None) -> float:
    results = version.results
    best = float(results["expected_value"])
    if strategy is None or strategy.recommended:
        return best
    gap = float(strategy.value_given_up or 0.0)
    return best - gap if results.get("objective", "max") == "max" else best + gap


# ---- recording ----------------------------------------------------------------------------

def current_outcome(decision: Decision) -> Outcome | None:
    """The outcome in force: the one no later row supersedes."""
    return (Outcome.objects.filter(decision=decision, superseded_by__isnull=True)
            .select_related("version", "recorded_by").first())


def _clean_value(value: Any) -> float:
    """The realised amount, held to the core's amount limit so that sums, differences and
    chart axes built from it stay finite (the review and the portfolio add it up)."""
    return clean_amount(value, "realised_value", "money actually made or lost")


def _study_bought(doc: dict, steps: list[dict]) -> tuple[dict | None, str, str]:
    """(study, signal, realised state) for a payoff table whose path bought a study."""
    if doc.get("kind") != "payoff_table":
        return None, "", ""
    study, signal, state = None, "", ""
    for step in steps:
        m = _STUDY_SIGNAL.match(step["node"])
        if m and step["kind"] == "chance":
            study, signal = doc["studies"][int(m.group(1))], step["branch"]
        if step["kind"] == "chance" and _STATE_NODE.search(step["node"]):
            state = step["branch"]
    return study, signal, state


def record_outcome(decision_id, *, actor, if_match: str | None, path: Any,
                   study_signal: str | None = None, realised_value: Any, note: str = "") -> Outcome:
    """Record what happened after a committed (or since closed) decision.

    A second call records a correction: a new row superseding the previous
    one. The decision's status does not change (the lifecycle in
    ``decisions.models.register`` moves committed -> closed by ``close`` only).
    When the path bought a study whose version names a source, the study's
    signal and the realised state are added to that source's record (origin
    ``outcome``), once per decision.
    """
    value = _clean_value(realised_value)
    note = (note or "").strip()
    if len(note) > MAX_NOTE:
        raise InvalidInput(f"must be at most {MAX_NOTE} characters, got {len(note)}",
                           location="note")
    study_signal = (study_signal or "").strip()
    try:
        with transaction.atomic():
            decision = lock_decision(decision_id, actor=actor, if_match=if_match, roles=_EDITORS,
                                     action="record an outcome")
            if decision.status not in (Status.COMMITTED, Status.CLOSED):
                raise ConflictError(f"decision: an outcome is recorded for a committed decision, "
                                    f"not a {decision.status} one", location="status")
            version = decision.current_version()
            strategy = version.strategies.order_by("-chosen_at", "-id").first()
            doc, tree = _tree_of(version)
            steps = walk_path(tree, path, preferred=_preferred(version, strategy, tree))
            study, signal, state = _study_bought(doc, steps)
            if study_signal and study is None:
                raise InvalidInput("no study was bought on the recorded path; leave it empty",
                                   location="study_signal")
            if study_signal and study_signal != signal:
                raise InvalidInput(f"the path records the signal {signal!r}, not "
                                   f"{study_signal!r}", location="study_signal")
            # No lock of its own: the decision row locked above already makes two
            # outcomes of one decision take turns (the race: both would supersede the
            # same row; the unique one-to-one would then refuse the second).
            previous = Outcome.objects.filter(decision=decision, superseded_by__isnull=True).first()
            probability = math.prod(s["probability"] for s in steps if s["kind"] == "chance")
            now = timezone.now()
            outcome = Outcome.objects.create(
                decision=decision, version=version, supersedes=previous, recorded_by=actor,
                recorded_at=now, path=dict(path), study_signal=signal, realised_value=value,
                note=note, currency=str(doc.get("currency", "")),
                objective=str(doc.get("objective", "max")),
                expected_value=_chosen_expected_value(version, strategy),
                path_probability=probability, walk=steps)
            nodes = {n["id"]: n for n in tree["nodes"]}
            # Inside the outcome's transaction and covered by its audit event (the path).
            OutcomeForecast.objects.bulk_create([
                OutcomeForecast(outcome=outcome, node=s["node"], branch=b["label"],
                                probability=float(b["probability"]),
                                happened=1.0 if b["label"] == s["branch"] else 0.0)
                for s in steps if s["kind"] == "chance" for b in nodes[s["node"]]["branches"]])
            record_id = _record_study(actor, decision, study, signal, state, now)
            _touch(decision, now)
            append_event(actor=actor, action="outcome.record", object_type="decision",
                         object_id=decision.pk,
                         payload={"outcome_id": outcome.pk, "version": version.number,
                                  "supersedes": previous.pk if previous else None,
                                  "path": dict(path), "study_signal": signal,
                                  "realised_value": value, "note": note,
                                  "path_probability": probability,
                                  "study_record_id": record_id})
    except IntegrityError:
        # The lock makes this unreachable on PostgreSQL; kept so a racing first
        # outcome can never surface as a 500 on a database without row locks.
        raise ConflictError("decision: another outcome was recorded at the same moment; "
                            "read it and record a correction if needed") from None
    return outcome


def _record_study(actor, decision, study, signal, state, now) -> int | None:
    info = (study or {}).get("source")
    if not isinstance(info, dict) or not signal or not state:
        return None
    source = StudySource.objects.filter(pk=info.get("id"), team_id=decision.team_id).first()
    if source is None or signal not in source.signals or state not in source.states:
        return None
    if StudyRecord.objects.filter(source=source, decision=decision,
                                  origin=RecordOrigin.OUTCOME).exists():
        return None  # a correction: the first outcome's record stands (records are facts)
    row = StudyRecord.objects.create(
        source=source, date=timezone.localdate(now), signal=signal, state=state,
        decision=decision, origin=RecordOrigin.OUTCOME, created_by=actor, created_at=now,
        note=f"recorded with the outcome of decision #{decision.pk}")
    return row.pk


# ---- review -------------------------------------------------------------------------------

def _reachable(nodes: dict[str, dict], root: str) -> list[dict]:
    seen, stack, out = set(), [root], []
    while stack:
        nid = stack.pop()
        if nid in seen:
            continue
        seen.add(nid)
        out.append(nodes[nid])
        stack.extend(b["to"] for b in nodes[nid].get("branches", []))
    return out


def _hindsight_tree(doc: dict, tree: dict, steps: list[dict]) -> dict:
    """The tree with every realised chance outcome made certain.

    For a payoff table the true state is one fact seen from every alternative,
    so every state node is fixed to it; for a general tree only the chance
    nodes on the path are known, the others keep their probabilities.
    """
    fixed = {s["node"]: s["branch"] for s in steps if s["kind"] == "chance"}
    state = next((b for n, b in fixed.items() if _STATE_NODE.search(n)), None)
    hind = copy.deepcopy(tree)
    for node in hind["nodes"]:
        if node["kind"] != "chance":
            continue
        want = fixed.get(node["id"])
        if want is None and doc.get("kind") == "payoff_table" and _STATE_NODE.search(node["id"]):
            want = state
        if want is not None:
            for b in node["branches"]:
                b["probability"] = 1.0 if b["label"] == want else 0.0
    return hind


def _only_taken(tree: dict, steps: list[dict]) -> dict:
    taken = {s["node"]: s["branch"] for s in steps if s["kind"] == "decision"}
    out = copy.deepcopy(tree)
    nodes = {n["id"]: n for n in out["nodes"]}
    for nid, label in taken.items():
        nodes[nid]["branches"] = [b for b in nodes[nid]["branches"] if b["label"] == label]
    out["nodes"] = _reachable(nodes, out["root"])
    return out


def review(decision: Decision) -> dict[str, Any]:
    """Post-hoc review of a decision with a recorded outcome (see the module notes)."""
    outcome = current_outcome(decision)
    if outcome is None:
        raise NotFoundError("none recorded for this decision yet", location="outcome")
    version = outcome.version
    strategy = version.strategies.order_by("-chosen_at", "-id").first()
    doc, tree = _tree_of(version)
    steps = outcome.walk
    maximise = outcome.objective != "min"
    try:
        hind = _hindsight_tree(doc, tree, steps)
        best = valuation.evaluate(hind)
        chosen = valuation.evaluate(_only_taken(hind, steps))
    except ValuationError as exc:
        raise InvalidInput(f"the hindsight tree could not be evaluated: {exc}",
                           location="outcome") from None
    best_value, chosen_value = float(best["expected_value"]), float(chosen["expected_value"])
    regret = best_value - chosen_value if maximise else chosen_value - best_value
    regret = max(regret, 0.0) if abs(regret) > 1e-9 * max(1.0, abs(best_value)) else 0.0
    best_at_approval = float(version.results["expected_value"])
    given_up = float(strategy.value_given_up) if strategy else 0.0
    currency = outcome.currency
    difference = outcome.realised_value - outcome.expected_value
    if given_up <= 0:
        sound = (f"Given what was known at approval, the chosen plan had the best expected value "
                 f"({best_at_approval:,.0f} {currency}); how it turned out does not change that.")
    else:
        sound = (f"Given what was known at approval, the chosen plan gave up {given_up:,.0f} "
                 f"{currency} of expected value against the recommended plan, for the reason "
                 f"recorded: {strategy.justification!r}.")
    hindsight = (f"With hindsight of what happened, the best plan ({best['policy']['text']}) "
                 f"would have been worth {best_value:,.0f} {currency} by the model's payoffs; "
                 f"the chosen plan {chosen_value:,.0f} {currency}: regret {regret:,.0f} {currency}. "
                 "Regret measures luck and information, not the quality of the decision.")
    return {
        "decision": decision.pk, "version": version.number, "currency": currency,
        "objective": outcome.objective,
        "outcome": {"id": outcome.pk, "recorded_at": outcome.recorded_at.isoformat(),
                    "recorded_by": outcome.recorded_by.get_username(),
                    "path": outcome.path, "study_signal": outcome.study_signal or None,
                    "note": outcome.note, "corrections": _corrections(outcome)},
        "expected_at_approval": outcome.expected_value,
        "realised": outcome.realised_value,
        "realised_minus_expected": difference,
        "probability_of_what_happened": outcome.path_probability,
        "path": steps,
        "hindsight": {"best_plan": best["policy"]["text"], "best_plan_value": best_value,
                      "chosen_plan_value": chosen_value, "regret": regret,
                      "statement": hindsight},
        "sound_given_what_was_known": {
            "recommended_plan_taken": bool(strategy.recommended) if strategy else None,
            "best_expected_value_at_approval": best_at_approval,
            "chosen_expected_value_at_approval": outcome.expected_value,
            "value_given_up_at_approval": given_up,
            "statement": sound},
        "caution": ("These figures are model outputs resting on stated assumptions; weigh them "
                    "with professional judgment and your organisation's own rules."),
    }


def _corrections(outcome: Outcome) -> int:
    n, row = 0, outcome
    while row.supersedes_id is not None:
        n += 1
        row = row.supersedes
    return n


def outcome_history(user, decision_id) -> tuple[Decision, list[Outcome]]:
    """The decision (scoped to the user's teams) and all its outcome rows, newest first."""
    decision = visible_decisions(user).filter(pk=decision_id).first()
    if decision is None:
        raise NotFoundError("decision: not found")
    rows = list(Outcome.objects.filter(decision=decision).select_related("version", "recorded_by")
                .order_by("-recorded_at", "-id"))
    return decision, rows
