"""The decision page, the version diff and the buttons that move a decision along.

Every POST carries the decision's ETag as it was when the page was drawn: two
people acting on one decision from stale pages get "the decision has changed
since you read it" from the service instead of a silent overwrite.
"""

from __future__ import annotations

import json

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.shortcuts import redirect, render
from django.urls import NoReverseMatch, reverse
from django.views.decorators.http import require_POST

from decisions.models import SIGNING_ROLES, Meaning, Role, Status
from decisions.services import decisions as svc
from decisions.services import signoff as signing
from decisions.services.access import role_of
from decisions.services.errors import DomainError
from decisions.web import queries
from decisions.web.figures import figures
from decisions.web.forms import CloseForm, PolicyForm, SignForm, StrategyForm
from decisions.web.panels import decision_panels
from decisions.web.presenters import diff_rows, money, results_view, tree_rows
from valuation import expand
from valuation.diff import diff_documents
from valuation.errors import ModelValidationError

__all__ = ["close", "commit", "detail", "diff", "policy", "sign", "strategy", "submit"]


def _show_problems(request, exc: DomainError) -> None:
    for location, message in exc.problems:
        messages.error(request, f"{location}: {message}" if location else message)


def _memo_url(decision, version) -> str | None:
    """The memo of the version shown (the API's ``version-memo`` route; none: no link)."""
    if version is None:
        return None
    try:
        return reverse("version-memo", kwargs={"decision_pk": decision.pk,
                                               "number": version.number})
    except NoReverseMatch:
        return None


def _as_tree(document: dict) -> tuple[dict | None, str | None]:
    """The model as the general tree the page draws and lists, once for both; or None and
    the reason, for a payoff table whose equivalent tree is too large to write out (its
    figures are complete all the same: the core evaluates the table itself)."""
    try:
        return expand(document), None
    except ModelValidationError as exc:
        return None, exc.problems[0].message


def _version_choice(request, decision, current):
    number = request.GET.get("v")
    if number and current is not None:
        try:
            return svc.get_version(decision, number)
        except DomainError:
            return current
    return current


def detail(request, pk, *, sign_form=None, strategy_form=None, source_form=None, status=200):
    if not request.user.is_authenticated:
        return redirect(f"{reverse('login')}?next={request.path}")
    decision = queries.decision_for(request.user, pk)
    role = role_of(request.user, decision.team_id)
    current = decision.current_version()
    version = _version_choice(request, decision, current)
    versions = list(decision.versions.select_related("author").order_by("-number"))
    progress = signing.policy_progress(decision, current)
    state = queries.sign_state(request.user, decision, current, progress)
    results = version.results if version else None
    document = json.loads(version.canonical_json) if version else None
    tree_doc, tree_note = _as_tree(document) if version else (None, None)
    tree, tree_truncated = tree_rows(tree_doc, results) if tree_doc else ([], False)
    strategies = list(current.strategies.select_related("chosen_by").order_by("-chosen_at", "-id")) \
        if current else []
    is_analyst = role == Role.ANALYST
    alternatives = [a.get("name") for a in (current.results.get("alternatives") or [])] \
        if current else []
    if sign_form is None and state.can_sign:
        sign_form = SignForm(initial={"etag": decision.etag, "version": current.number,
                                      "meaning": Meaning.APPROVE})
    if strategy_form is None and is_analyst and decision.status == Status.APPROVED:
        strategy_form = StrategyForm(initial={"etag": decision.etag}, alternatives=alternatives)
    rejection = queries.rejection_of(current)
    drawn = figures(document, results, tree=tree_doc,
                    chosen_input=request.GET.get("input")) if version else {}
    context = {
        **drawn,
        "decision": decision, "role": role, "version": version, "current": current,
        "is_current": version is not None and current is not None and version.pk == current.pk,
        "versions": versions, "progress": progress, "sign_state": state, "sign_form": sign_form,
        "signoffs": list(current.signoffs.order_by("signed_at", "id")) if current else [],
        "earlier_signoffs": [
            s for v in versions[1:] for s in v.signoffs.order_by("signed_at", "id")
        ],
        "r": results_view(results) if results else None,
        "document_kind": (document or {}).get("kind"),
        "tree": tree, "tree_truncated": tree_truncated, "tree_note": tree_note,
        "strategies": strategies,
        "strategy_rows": [{"s": s, "given_up": money(s.value_given_up,
                                                     current.results.get("currency", ""))}
                          for s in strategies],
        "strategy_form": strategy_form, "close_form": CloseForm(initial={"etag": decision.etag}),
        "policy_form": PolicyForm(initial={"etag": decision.etag, **{
            "policy_" + r.replace(" ", "_"): n for r, n in progress_requirements(decision).items()}}),
        "events": list(queries.audit_events(decision)),
        "memo_url": _memo_url(decision, version),
        "can_edit": role in (Role.ANALYST, *SIGNING_ROLES)
        and decision.status in (Status.DRAFT, Status.SUBMITTED),
        "can_submit": is_analyst and decision.status == Status.DRAFT and current is not None
        and rejection is None,
        "rejection": rejection,
        "is_analyst": is_analyst,
        "diff_a": versions[1].number if len(versions) > 1 else None,
        "diff_b": versions[0].number if versions else None,
    }
    context.update(decision_panels(request.user, decision, role, version,
                                   source_form=source_form))
    return render(request, "web/decision.html", context, status=status)


def progress_requirements(decision) -> dict[str, int]:
    return decision.policy.as_dict() if hasattr(decision, "policy") else {}


@login_required
def diff(request, pk):
    decision = queries.decision_for(request.user, pk)
    versions = list(decision.versions.order_by("number"))
    context = {"decision": decision, "versions": versions, "rows": None}
    a, b = request.GET.get("a"), request.GET.get("b")
    if a and b:
        try:
            old, new = svc.get_version(decision, a), svc.get_version(decision, b)
        except DomainError as exc:
            _show_problems(request, exc)
            return render(request, "web/diff.html", context, status=404)
        result = diff_documents(json.loads(old.canonical_json), json.loads(new.canonical_json))
        cur = new.results.get("currency", "")
        context.update({
            "old": old, "new": new, "result": result, "rows": diff_rows(result),
            "ev_old": money(old.results.get("expected_value"), cur),
            "ev_new": money(new.results.get("expected_value"), cur),
            "plan_old": (old.results.get("policy") or {}).get("text", ""),
            "plan_new": (new.results.get("policy") or {}).get("text", ""),
        })
    return render(request, "web/diff.html", context)


def _back(decision, anchor: str = ""):
    return redirect(reverse("web-decision", args=[decision.pk]) + (f"#{anchor}" if anchor else ""))


def _act(request, decision, action, success: str, anchor: str = ""):
    """Run a service action; its refusal shows as messages, its success as ``success``."""
    try:
        action()
    except DomainError as exc:
        _show_problems(request, exc)
    else:
        messages.success(request, success)
    return _back(decision, anchor)


def _attach_problems(form, exc: DomainError) -> None:
    """A service's refusal beside the form field it names (unnamed ones above the form)."""
    for location, message in exc.problems:
        field = location if location in form.fields else None
        form.add_error(field, f"{location}: {message}" if location and not field else message)


@login_required
@require_POST
def submit(request, pk):
    decision = queries.decision_for(request.user, pk)
    return _act(request, decision, lambda: svc.submit_version(
        decision.pk, actor=request.user, if_match=request.POST.get("etag")),
        "Submitted for sign-off.")


@login_required
@require_POST
def sign(request, pk):
    decision = queries.decision_for(request.user, pk)
    form = SignForm(request.POST)
    if not form.is_valid():
        return detail(request, pk, sign_form=form, status=400)
    data = form.cleaned_data
    role = role_of(request.user, decision.team_id) or ""
    try:
        signing.sign(decision.pk, data["version"], actor=request.user, password=data["password"],
                     role=role, meaning=data["meaning"], reason=data["reason"],
                     if_match=data["etag"])
    except DomainError as exc:
        _attach_problems(form, exc)
        return detail(request, pk, sign_form=form, status=exc.status)
    verb = "approved" if data["meaning"] == Meaning.APPROVE else "rejected"
    messages.success(request, f"You {verb} version {data['version']}.")
    return _back(decision, "signoff")


@login_required
@require_POST
def strategy(request, pk):
    decision = queries.decision_for(request.user, pk)
    current = decision.current_version()
    alternatives = [a.get("name") for a in (current.results.get("alternatives") or [])] \
        if current else []
    form = StrategyForm(request.POST, alternatives=alternatives)
    if not form.is_valid():
        return detail(request, pk, strategy_form=form, status=400)
    data = form.cleaned_data
    choice = data["choice"]
    try:
        svc.record_strategy(
            decision.pk, actor=request.user, if_match=data["etag"],
            recommended=choice == "recommended",
            alternative=data["alternative"] if choice == "alternative" else "",
            plan_text=data["plan_text"] if choice == "own" else "",
            justification=data["justification"],
            value_given_up=data["value_given_up"] if choice == "own" else None)
    except DomainError as exc:
        _attach_problems(form, exc)
        return detail(request, pk, strategy_form=form, status=exc.status)
    messages.success(request, "Plan recorded. Commit the decision when the team is ready.")
    return _back(decision, "plan")


@login_required
@require_POST
def commit(request, pk):
    decision = queries.decision_for(request.user, pk)
    return _act(request, decision, lambda: svc.commit_decision(
        decision.pk, actor=request.user, if_match=request.POST.get("etag")),
        "Committed: the recorded plan is now in force.", "plan")


@login_required
@require_POST
def close(request, pk):
    decision = queries.decision_for(request.user, pk)
    form = CloseForm(request.POST)
    form.is_valid()
    return _act(request, decision, lambda: svc.close_decision(
        decision.pk, actor=request.user, if_match=request.POST.get("etag"),
        note=form.cleaned_data.get("note", "")), "Closed.")


@login_required
@require_POST
def policy(request, pk):
    decision = queries.decision_for(request.user, pk)
    form = PolicyForm(request.POST)
    if not form.is_valid():
        for name, errors in form.errors.items():
            for error in errors:
                messages.error(request, f"{name}: {error}")
        return _back(decision, "signoff")
    return _act(request, decision, lambda: svc.set_policy(
        decision.pk, actor=request.user, if_match=form.cleaned_data["etag"],
        requirements=form.requirements()), "Sign-off policy saved.", "signoff")
