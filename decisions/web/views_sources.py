"""Study sources in the browser: the list, a source's calibration and record, CSV import,
and the decision page's "take this study's likelihoods from a source" form.

Reads are scoped to the user's teams (``sources.visible_sources``: another
team's source is a 404); every change is one service call, which checks the
role again. A CSV upload is checked first (the service's dry run) and its bytes
kept in the session, never on disk under the client's name; the confirm step
imports exactly those bytes, after checking their SHA-256 against the preview.
"""

from __future__ import annotations

import base64
import hashlib
import io

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.db.models import Count
from django.http import Http404
from django.shortcuts import redirect, render
from django.urls import reverse
from django.views.decorators.csrf import csrf_exempt, csrf_protect
from django.views.decorators.http import require_POST

from decisions.models import Role
from decisions.services import sources as svc
from decisions.services.access import role_of
from decisions.services.errors import DomainError, ForbiddenError, NotFoundError
from decisions.web import queries, views_decision
from decisions.web.forms import add_problems
from decisions.web.forms_sources import (
    WEB_IMPORT_MAX_BYTES,
    ClaimGrid,
    RecordForm,
    SourceCreateForm,
    UploadForm,
    as_number,
    split_names,
)
from decisions.web.panels import apply_form_for
from decisions.web.presenters_sources import accuracy_rows, score_rows, trend_rows
from valuation.records_csv import read_records_csv
from valuation.reliability import DEFAULT_WINDOW

__all__ = ["apply_source", "source_detail", "source_import", "source_list", "source_record"]

PENDING = "pending-import"  # session key of the upload waiting for its confirm step
PREVIEW_ROWS = 200
RECORD_ROWS = 100
#: Room for the multipart envelope and the other fields around a file at the limit.
MULTIPART_OVERHEAD = 64 * 1024


def _source(request, pk):
    try:
        return svc.get_source(request.user, pk)
    except NotFoundError:
        raise Http404("no such source among your teams") from None


# ---- list and create ------------------------------------------------------------------------

@login_required
def source_list(request):
    teams = queries.teams_where_analyst(request.user)
    rows = list(svc.visible_sources(request.user).select_related("team", "created_by")
                .annotate(record_count=Count("records")).order_by("team__name", "name"))
    form = SourceCreateForm(request.POST or None, teams=teams,
                            initial={"prior_strength": "10"})
    status = 200
    states = split_names(request.POST.get("states", ""))
    signals = split_names(request.POST.get("signals", ""))
    grid = ClaimGrid(states, signals, request.POST if request.method == "POST" else None)
    if request.method == "POST":
        if not teams:
            return render(request, "web/forbidden.html", {
                "reason": "Only an analyst of a team creates study sources; you are not an "
                          "analyst of any team."}, status=403)
        status = 400
        if request.POST.get("action") == "create" and form.is_valid():
            for name, values in (("states", states), ("signals", signals)):
                if len(set(values)) != len(values):
                    form.add_error(name, f"{name}: names must be distinct, got "
                                         f"{', '.join(values)}")
            if not form.errors:
                data = form.cleaned_data
                try:
                    source = svc.create_source(
                        actor=request.user, team=data["team"], name=data["name"],
                        claimed=grid.table(), prior_strength=as_number(data["prior_strength"]))
                except DomainError as exc:
                    add_problems(form, grid.attach(exc.problems))
                    status = exc.status
                else:
                    messages.success(request, f"Source “{source.name}” created. Add its track "
                                              "record by hand or from a CSV file.")
                    return redirect(reverse("web-source", args=[source.pk]))
        elif request.POST.get("action") != "create":
            status = 200  # "lay out the table": nothing was submitted yet
    return render(request, "web/sources.html", {
        "sources": rows, "form": form, "grid": grid, "grid_rows": grid.rows(),
        "can_create": bool(teams),
    }, status=status)


# ---- one source ----------------------------------------------------------------------------

def _window(request) -> int:
    try:
        value = int(request.GET.get("window", DEFAULT_WINDOW))
    except ValueError:
        return DEFAULT_WINDOW
    return min(max(value, 1), 1000)


def _detail(request, source, *, record_form=None, upload_form=None, import_problems=(),
            status=200):
    role = role_of(request.user, source.team_id)
    is_analyst = role == Role.ANALYST
    window = _window(request)
    context = {"source": source, "role": role, "is_analyst": is_analyst, "window": window,
               "record_form": record_form or RecordForm(source=source),
               "upload_form": upload_form or UploadForm(), "import_problems": import_problems,
               "calibration_error": None}
    try:
        figures = svc.calibration(source, window=window)
    except DomainError as exc:
        context["calibration_error"] = "; ".join(f"{loc}: {msg}" if loc else msg
                                                 for loc, msg in exc.problems)
    else:
        rows, chart = accuracy_rows(figures["calibration"])
        trend, left_out, heads = trend_rows(figures["trend"], source.states)
        context.update({"accuracy": rows, "accuracy_svg": chart, "trend_heads": heads,
                        "scores": score_rows(figures["scores"]),
                        "prior_source": figures["scores"]["claimed"].get("prior_source", ""),
                        "trend": trend, "trend_left_out": left_out,
                        "trend_step_note": figures["trend"].get("step_note", ""),
                        "non_finite": (figures.get("non_finite") or {}).get("meaning", ""),
                        "records_total": figures["calibration"]["records"],
                        "floored": figures["calibration"].get("floored_cells") or []})
    records = source.records.select_related("created_by", "decision").order_by("-date", "-id")
    context["records"] = list(records[:RECORD_ROWS])
    context["records_count"] = records.count()
    return render(request, "web/source.html", context, status=status)


@login_required
def source_detail(request, pk):
    return _detail(request, _source(request, pk))


@login_required
@require_POST
def source_record(request, pk):
    source = _source(request, pk)
    form = RecordForm(request.POST, source=source)
    if not form.is_valid():
        return _detail(request, source, record_form=form, status=400)
    data = form.cleaned_data
    try:
        svc.add_record(actor=request.user, source=source, date=data["date"],
                       signal=data["signal"], state=data["state"], note=data["note"])
    except DomainError as exc:
        add_problems(form, exc.problems)
        return _detail(request, source, record_form=form, status=exc.status)
    messages.success(request, f"Record of {data['date']} added.")
    return redirect(reverse("web-source", args=[source.pk]) + "#records")


def _problem_lines(exc: DomainError) -> list[str]:
    return [f"{loc}: {msg}" if loc else msg for loc, msg in exc.problems]


@login_required
@csrf_exempt  # checked by csrf_protect below, once the body is known to be small enough
@require_POST
def source_import(request, pk):
    """Step 1 (``step=preview``, a file): dry run and preview. Step 2 (``step=confirm``): import.

    The CSRF check reads the multipart body, which streams a large file to a
    temporary file; so a body far above the limit is refused from its declared
    length first, before anything reads it (Django's documented pattern for
    changing upload handling: ``csrf_exempt`` outside, ``csrf_protect`` inside).
    """
    try:
        length = int(request.META.get("CONTENT_LENGTH") or 0)
    except ValueError:
        length = 0
    if length > WEB_IMPORT_MAX_BYTES + MULTIPART_OVERHEAD:
        source = _source(request, pk)
        return _detail(request, source, status=400, import_problems=[
            f"file: larger than {WEB_IMPORT_MAX_BYTES:,} bytes ({length:,} bytes sent); import "
            "a larger file through the API or the import_records command"])
    return _import(request, pk)


@csrf_protect
def _import(request, pk):
    source = _source(request, pk)
    if role_of(request.user, source.team_id) != Role.ANALYST:
        exc = ForbiddenError("import: needs the role 'analyst' of the source's team",
                             location="file")
        return _detail(request, source, import_problems=_problem_lines(exc), status=403)
    if request.POST.get("step") == "confirm":
        return _confirm(request, source)
    form = UploadForm(request.POST, request.FILES)
    if not form.is_valid():
        return _detail(request, source, upload_form=form, status=400)
    upload = form.cleaned_data["file"]
    content = upload.read()
    label = svc.safe_upload_name(upload.name)
    try:
        summary = svc.import_records(actor=request.user, source=source,
                                     file=io.BytesIO(content), dry_run=True, filename=label)
    except DomainError as exc:
        request.session.pop(PENDING, None)
        return _detail(request, source, upload_form=form, import_problems=_problem_lines(exc),
                       status=exc.status)
    # Already checked by the service's dry run; read again only to list the rows.
    records = read_records_csv(io.BytesIO(content), known_states=source.states,
                               known_signals=source.signals)
    request.session[PENDING] = {"source": source.pk, "sha256": summary["sha256"], "name": label,
                                "content": base64.b64encode(content).decode("ascii")}
    return render(request, "web/source_import.html", {
        "source": source, "summary": summary, "rows": records[:PREVIEW_ROWS],
        "more": max(0, len(records) - PREVIEW_ROWS),
        "counts": [{"state": s, "cells": [summary["counts"][s][k] for k in source.signals]}
                   for s in source.states],
    })


def _confirm(request, source):
    pending = request.session.get(PENDING) or {}
    token = request.POST.get("sha256", "")
    if pending.get("source") != source.pk or not token or pending.get("sha256") != token:
        messages.error(request, "file: the previewed upload is no longer waiting (it was "
                                "imported, replaced by another preview, or the session ended); "
                                "upload the file again")
        return redirect(reverse("web-source", args=[source.pk]) + "#import")
    content = base64.b64decode(pending["content"])
    # The session is server-side, but check the bytes are the ones previewed anyway.
    if hashlib.sha256(content).hexdigest() != token:
        request.session.pop(PENDING, None)
        messages.error(request, "file: the kept upload does not match its preview; upload it again")
        return redirect(reverse("web-source", args=[source.pk]) + "#import")
    try:
        summary = svc.import_records(actor=request.user, source=source, file=io.BytesIO(content),
                                     filename=pending.get("name", ""))
    except DomainError as exc:
        return _detail(request, source, import_problems=_problem_lines(exc), status=exc.status)
    finally:
        request.session.pop(PENDING, None)
    messages.success(request, f"Imported {summary['records']} records from {summary['file']} "
                              f"(SHA-256 {summary['sha256'][:12]}…).")
    return redirect(reverse("web-source", args=[source.pk]) + "#records")


# ---- the decision page's source form ---------------------------------------------------------

@login_required
@require_POST
def apply_source(request, pk):
    decision = queries.decision_for(request.user, pk)
    form = apply_form_for(request.user, decision, request.POST)
    if form is None:
        messages.error(request, "source: this decision has no draft payoff table with a study, "
                                "or its team has no study source")
        return redirect(reverse("web-decision", args=[decision.pk]))
    if not form.is_valid():
        return views_decision.detail(request, pk, source_form=form, status=400)
    data = form.cleaned_data
    try:
        version = svc.apply_source_to_study(actor=request.user, decision=decision,
                                            study_name=data["study"], source=data["source"],
                                            mode=data["mode"], if_match=data["etag"])
    except DomainError as exc:
        add_problems(form, exc.problems)
        if exc.status == 403:  # the page shows no source form to this user: say it above
            for error in form.non_field_errors():
                messages.error(request, error)
        return views_decision.detail(request, pk, source_form=form, status=exc.status)
    messages.success(request, f"Saved as version {version.number}: study “{data['study']}” takes "
                              f"the {data['mode']} accuracy of its source.")
    return redirect(reverse("web-decision", args=[decision.pk]) + "#sources")

