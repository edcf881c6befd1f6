"""Create a decision and edit its model: the payoff-table form and the JSON editor.

The valuation core validates (through ``decisions.services.evaluation``); its
messages are placed beside the fields they name. Saving calls
``save_version``, which makes a new immutable version; on any problem the page
comes back with everything typed still in place.
"""

from __future__ import annotations

import json

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.http import HttpResponseForbidden, JsonResponse
from django.shortcuts import redirect, render
from django.urls import reverse
from django.views.decorators.http import require_POST

from decisions.models import SIGNING_ROLES, Role, Status
from decisions.services import decisions as svc
from decisions.services.access import role_of
from decisions.services.errors import DomainError
from decisions.services.evaluation import evaluate_document
from decisions.web import editor, queries
from decisions.web.forms import DecisionCreateForm, add_problems
from decisions.web.presenters import money

__all__ = ["decision_new", "edit_json", "edit_table", "validate"]

_AUTHOR_ROLES = (Role.ANALYST, *SIGNING_ROLES)
_EXAMPLE_TREE = {
    "kind": "tree", "title": "", "currency": "EUR", "objective": "max", "root": "choose",
    "nodes": [
        {"id": "choose", "kind": "decision", "name": "Choice",
         "branches": [{"label": "Option A", "to": "a-outcome"}, {"label": "Option B", "to": "b"}]},
        {"id": "a-outcome", "kind": "chance", "name": "Outcome of A",
         "branches": [{"label": "good", "probability": 0.5, "to": "a-good"},
                      {"label": "poor", "probability": 0.5, "to": "a-poor"}]},
        {"id": "a-good", "kind": "end", "payoff": 0},
        {"id": "a-poor", "kind": "end", "payoff": 0},
        {"id": "b", "kind": "end", "payoff": 0},
    ],
}


@login_required
def decision_new(request):
    teams = queries.teams_where_analyst(request.user)
    if not teams:
        return render(request, "web/forbidden.html", {
            "reason": "Only an analyst of a team creates decisions; you are not an analyst of any team."
        }, status=403)
    form = DecisionCreateForm(request.POST or None, teams=teams,
                              initial={"policy_financial_review": 1, "policy_operations": 1})
    if request.method == "POST" and form.is_valid():
        data = form.cleaned_data
        try:
            decision = svc.create_decision(actor=request.user, team=data["team"],
                                           title=data["title"], policy=form.requirements())
        except DomainError as exc:
            add_problems(form, exc.problems)
        else:
            messages.success(request, "Decision created. Build its model next.")
            target = "web-edit-json" if data["kind"] == "tree" else "web-edit-table"
            return redirect(reverse(target, args=[decision.pk]))
    return render(request, "web/decision_new.html", {"form": form},
                  status=400 if form.is_bound else 200)


def _editable(request, pk):
    """(decision, None) when the user may save a version now, else (decision, refusal)."""
    decision = queries.decision_for(request.user, pk)
    role = role_of(request.user, decision.team_id)
    if role not in _AUTHOR_ROLES:
        return decision, render(request, "web/forbidden.html", {
            "decision": decision,
            "reason": f"Your role in this team is {role!r}; analysts and reviewers edit models."},
            status=403)
    if decision.status not in (Status.DRAFT, Status.SUBMITTED):
        messages.error(request, f"A new version can only be saved in draft or submitted, "
                                f"not {decision.status}.")
        return decision, redirect(reverse("web-decision", args=[decision.pk]))
    return decision, None


def _save(request, decision, document, note: str):
    """Save a version; returns the located problems (empty when saved)."""
    try:
        version = svc.save_version(decision.pk, actor=request.user, document=document,
                                   if_match=request.POST.get("etag"), change_note=note)
    except DomainError as exc:
        return exc.problems
    messages.success(request, f"Saved as version {version.number}.")
    return []


@login_required
def edit_table(request, pk):
    decision, refusal = _editable(request, pk)
    if refusal:
        return refusal
    current = decision.current_version()
    errors: dict[str, list[str]] = {}
    general: list[str] = []
    note = ""
    status = 200
    if request.method == "POST":
        raw = editor.raw_from_post(request.POST)
        note = request.POST.get("change_note", "")
        action = request.POST.get("action", "save")
        if action != "save":
            raw = editor.apply_action(raw, action)
        else:
            document, fields = editor.document_from_raw(raw)
            problems = _save(request, decision, document, note)
            if not problems:
                return redirect(reverse("web-decision", args=[decision.pk]))
            errors, general = editor.locate_problems(problems, fields)
            status = 400
    elif current is not None:
        document = json.loads(current.canonical_json)
        if document.get("kind") != "payoff_table":
            messages.info(request, "This model is a general tree: it is edited as JSON.")
            return redirect(reverse("web-edit-json", args=[decision.pk]))
        raw = editor.raw_from_document(document)
    else:
        raw = editor.blank_raw()
        raw["title"] = decision.title
    return render(request, "web/edit_table.html", {
        "decision": decision, "current": current, "f": editor.layout(raw, errors),
        "general": general, "change_note": note, "etag": request.POST.get("etag", decision.etag),
    }, status=status)


@login_required
def edit_json(request, pk):
    decision, refusal = _editable(request, pk)
    if refusal:
        return refusal
    current = decision.current_version()
    problems: list[tuple[str, str]] = []
    note = ""
    status = 200
    if request.method == "POST":
        text = request.POST.get("document", "")
        note = request.POST.get("change_note", "")
        document, problems = editor.parse_json_text(text)
        if not problems:
            problems = _save(request, decision, document, note)
            if not problems:
                return redirect(reverse("web-decision", args=[decision.pk]))
        status = 400
    elif current is not None:
        text = json.dumps(json.loads(current.canonical_json), indent=2, ensure_ascii=False)
    else:
        text = json.dumps({**_EXAMPLE_TREE, "title": decision.title}, indent=2, ensure_ascii=False)
    _, general = editor.locate_problems(problems, {})
    return render(request, "web/edit_json.html", {
        "decision": decision, "current": current, "text": text, "problems": general,
        "change_note": note, "etag": request.POST.get("etag", decision.etag),
    }, status=status)


@login_required
@require_POST
def validate(request, pk):
    """Live check while typing: the core's messages by field, and the value if valid.

    Nothing is saved. Same scoping as the editor: an outsider gets 404, a viewer 403.
    """
    decision = queries.decision_for(request.user, pk)
    if role_of(request.user, decision.team_id) not in _AUTHOR_ROLES:
        return HttpResponseForbidden("your role in this team does not edit models")
    if request.POST.get("mode") == "json":
        document, problems = editor.parse_json_text(request.POST.get("document", ""))
        fields: dict[str, str] = {}
    else:
        document, fields = editor.document_from_raw(editor.raw_from_post(request.POST))
        problems = []
    value = None
    if not problems:
        try:
            results = evaluate_document(document)
        except DomainError as exc:
            problems = exc.problems
        else:
            value = money(results.get("expected_value"), results.get("currency") or "")
            plan = (results.get("policy") or {}).get("text", "")
    by_field, general = editor.locate_problems(problems, fields)
    body = {"ok": not problems, "errors": by_field, "general": general}
    if value is not None:
        body.update({"expected_value": value, "plan": plan})
    return JsonResponse(body)
