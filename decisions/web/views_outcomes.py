"""Record what happened after a committed decision, and the review that follows.

The outcome form offers one select per chance node of the version's expanded
tree (the same node ids ``record_outcome`` walks): the nodes the recorded plan
can reach come first, any others below, for a path that left the plan. The
service walks the path and names every problem by node id; each message lands
beside that node's select. The review keeps "sound given what was known"
apart from "how it turned out" (regret with hindsight), as the service does.
"""

from __future__ import annotations

import json

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.shortcuts import redirect, render
from django.urls import reverse

from decisions.models import Role, Status
from decisions.services import outcomes as svc
from decisions.services.access import role_of
from decisions.services.errors import DomainError, NotFoundError
from decisions.web import queries
from decisions.web.forms_sources import OutcomeForm, as_number
from decisions.web.presenters import money, prob
from decisions.web.presenters_sources import review_view
from valuation import expand
from valuation.errors import ModelValidationError

__all__ = ["outcome", "review"]

_AFTER_COMMIT = (Status.COMMITTED, Status.CLOSED)
MAX_NODES = 300  # selects on one page; a larger tree is recorded through the API


def chance_nodes(version, strategy) -> tuple[list[dict], int]:
    """Chance nodes of the version's tree, those on the recorded plan first (at most
    ``MAX_NODES``), and how many the tree has in all.

    At a decision node the plan follows the chosen strategy's alternative when
    it names one of the branches (or the branch leading straight to it), else
    the branch the valuation found best.
    """
    tree = expand(json.loads(version.canonical_json))
    nodes = {n["id"]: n for n in tree["nodes"]}
    best = {nid: info.get("best_branch")
            for nid, info in (version.results.get("nodes") or {}).items()}
    alternative = (strategy.plan or {}).get("alternative") if strategy else None
    on_plan: list[str] = []
    stack, seen = [tree["root"]], set()
    while stack:  # pre-order, iterative: trees may be deep
        nid = stack.pop()
        if nid in seen:
            continue
        seen.add(nid)
        node = nodes[nid]
        branches = node.get("branches") or []
        if node["kind"] == "decision":
            labels = [b["label"] for b in branches]
            if alternative in labels:
                picked = [b for b in branches if b["label"] == alternative]
            elif alternative:
                # e.g. "buy a study first?": the branch that reaches the alternative
                # without an uncertainty on the way (no study) is the team's plan.
                picked = [b for b in branches if _offers(nodes, b["to"], alternative)][:1]
            else:
                picked = []
            branches = picked or [b for b in branches if b["label"] == best.get(nid)] or branches
        elif node["kind"] == "chance":
            on_plan.append(nid)
        stack.extend(b["to"] for b in reversed(branches))
    planned = set(on_plan)
    others = [n["id"] for n in tree["nodes"] if n["kind"] == "chance" and n["id"] not in planned]
    out = []
    total = len(on_plan) + len(others)
    for nid in (on_plan + others)[:MAX_NODES]:
        node = nodes[nid]
        name = node.get("name") or nid
        out.append({"id": nid, "on_plan": nid in planned,
                    "label": f"{name} [{nid}]" if name != nid else nid,
                    "branches": [(b["label"], f"{b['label']} (p = {prob(b['probability'])})")
                                 for b in node["branches"]]})
    return out, total


def _offers(nodes: dict, nid: str, alternative: str) -> bool:
    """Whether decisions alone (no chance node) lead from ``nid`` to a choice of ``alternative``."""
    stack, seen = [nid], set()
    while stack:
        current = stack.pop()
        node = nodes[current]
        if current in seen or node["kind"] != "decision":
            continue
        seen.add(current)
        if any(b["label"] == alternative for b in node["branches"]):
            return True
        stack.extend(b["to"] for b in node["branches"])
    return False


def _signals(version) -> list[str]:
    doc = json.loads(version.canonical_json)
    seen: list[str] = []
    for study in doc.get("studies") or []:
        seen += [s for s in study.get("signals") or [] if s not in seen]
    return seen


def _initial(decision, previous, nodes) -> dict:
    initial = {"etag": decision.etag}
    if previous is not None:  # a correction starts from what was recorded
        index = {n["id"]: i for i, n in enumerate(nodes)}
        for node_id, label in (previous.path or {}).items():
            if node_id in index:
                initial[f"node-{index[node_id]}"] = label
        initial.update({"study_signal": previous.study_signal,
                        "realised_value": f"{previous.realised_value:,.0f}"
                        if float(previous.realised_value).is_integer()
                        else str(previous.realised_value),
                        "note": previous.note})
    return initial


def _place(form: OutcomeForm, problems) -> None:
    for location, message in problems:
        if location.startswith("path.") and form.field_for_node(location[5:]):
            form.add_error(form.field_for_node(location[5:]), f"{location}: {message}")
        elif location in ("realised_value", "study_signal", "note"):
            form.add_error(location, f"{location}: {message}")
        else:
            form.add_error(None, f"{location}: {message}" if location else message)


@login_required
def outcome(request, pk):
    decision = queries.decision_for(request.user, pk)
    role = role_of(request.user, decision.team_id)
    if role != Role.ANALYST:
        return render(request, "web/forbidden.html", {
            "decision": decision,
            "reason": f"Your role in this team is {role!r}; analysts record outcomes."},
            status=403)
    if decision.status not in _AFTER_COMMIT:
        messages.error(request, f"status: an outcome is recorded for a committed decision, "
                                f"not a {decision.status} one")
        return redirect(reverse("web-decision", args=[decision.pk]))
    version = decision.current_version()
    strategy = version.strategies.order_by("-chosen_at", "-id").first()
    try:
        nodes, total = chance_nodes(version, strategy)
    except ModelValidationError as exc:  # a table whose equivalent tree is too large to write
        messages.error(request, f"An outcome cannot be recorded for this model: "
                                f"{exc.problems[0].message}.")
        return redirect(reverse("web-decision", args=[decision.pk]))
    previous = svc.current_outcome(decision)
    form = OutcomeForm(request.POST or None, nodes=nodes, signals=_signals(version),
                       initial=_initial(decision, previous, nodes))
    status = 200
    if request.method == "POST":
        status = 400
        if form.is_valid():
            data = form.cleaned_data
            try:
                svc.record_outcome(decision.pk, actor=request.user, if_match=data["etag"],
                                   path=form.path(), study_signal=data["study_signal"],
                                   realised_value=as_number(data["realised_value"]),
                                   note=data["note"])
            except DomainError as exc:
                _place(form, exc.problems)
                status = exc.status
            else:
                messages.success(request, "Outcome recorded." if previous is None else
                                 "Correction recorded; the earlier outcome is kept in the "
                                 "history.")
                return redirect(reverse("web-review", args=[decision.pk]))
    cur = version.results.get("currency") or ""
    return render(request, "web/outcome.html", {
        "decision": decision, "version": version, "form": form, "previous": previous,
        "plan": (version.results.get("policy") or {}).get("text", ""),
        "expected": money(version.results.get("expected_value"), cur),
        "strategy": strategy, "has_others": any(not n["on_plan"] for n in nodes),
        "has_studies": bool(_signals(version)),
        "left_out": total - len(nodes), "api_url": reverse("decision-outcome", args=[decision.pk]),
    }, status=status)


@login_required
def review(request, pk):
    decision = queries.decision_for(request.user, pk)
    role = role_of(request.user, decision.team_id)
    _, rows = svc.outcome_history(request.user, decision.pk)
    context = {"decision": decision, "role": role, "r": None,
               "can_record": role == Role.ANALYST and decision.status in _AFTER_COMMIT,
               "history": [{"o": o, "realised": money(o.realised_value, o.currency),
                            "expected": money(o.expected_value, o.currency)} for o in rows]}
    try:
        data = svc.review(decision)
    except NotFoundError:
        return render(request, "web/review.html", context)
    except DomainError as exc:
        context["error"] = "; ".join(f"{loc}: {msg}" if loc else msg for loc, msg in exc.problems)
        return render(request, "web/review.html", context)
    context["r"] = review_view(data, decision.title)
    return render(request, "web/review.html", context)
