"""REST face of study sources, outcomes, the post-hoc review and the portfolio.

Reads go through querysets scoped to the user's teams (another team's source
or decision is a 404); every change goes through one service function, which
checks the role again. Changes to a decision (record an outcome, apply a
source) need ``If-Match`` with the decision's ETag, like the rest of the API.
"""

from __future__ import annotations

import csv
import io

from django.db.models import Count
from django.http import HttpResponse
from django.urls import path
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework import status
from rest_framework.generics import GenericAPIView
from rest_framework.parsers import MultiPartParser
from rest_framework.permissions import IsAuthenticated
from rest_framework.response import Response

from decisions.api import sources_serializers as ss
from decisions.api.serializers import MAX_ROW_ID
from decisions.services import outcomes, portfolio, sources
from decisions.services.access import visible_decisions
from decisions.services.decisions import get_version
from decisions.services.errors import InvalidInput, NotFoundError
from valuation.records_csv import MAX_BYTES, neutralise_csv_cell

IF_MATCH = OpenApiParameter("If-Match", OpenApiTypes.STR, OpenApiParameter.HEADER, required=True,
                            description="the decision's ETag as last read")
#: Room for the multipart envelope around a file of at most MAX_BYTES.
MULTIPART_OVERHEAD = 64 * 1024
_TRUE, _FALSE = {"1", "true", "yes", "on"}, {"", "0", "false", "no", "off"}


def _valid(serializer_class, request):
    serializer = serializer_class(data=request.data)
    serializer.is_valid(raise_exception=True)
    return serializer.validated_data


def _flag(request, name: str) -> bool:
    value = request.query_params.get(name, "").strip().lower()
    if value in _TRUE:
        return True
    if value in _FALSE:
        return False
    raise InvalidInput(f"must be 1 or 0 (true or false), got {value!r}", location=name)


def _int_param(request, name: str, default: int, low: int, high: int) -> int:
    raw = request.query_params.get(name)
    if raw in (None, ""):
        return default
    try:
        value = int(raw)
    except ValueError:
        raise InvalidInput(f"must be a whole number, got {raw!r}", location=name) from None
    if not low <= value <= high:
        raise InvalidInput(f"must be within [{low}, {high}], got {value}", location=name)
    return value


def _decision(request, decision_pk):
    decision = visible_decisions(request.user).filter(pk=decision_pk).first()
    if decision is None:
        raise NotFoundError("decision: not found")
    return decision


class SourceListView(GenericAPIView):
    """Study sources of your teams (filter ``team``); analysts create them."""

    permission_classes = (IsAuthenticated,)
    serializer_class = ss.StudySourceSerializer

    @extend_schema(operation_id="sources_list", parameters=[OpenApiParameter("team", int)])
    def get(self, request):
        qs = sources.visible_sources(request.user).annotate(record_count=Count("records"))
        team = request.query_params.get("team")
        if team:
            try:
                team_id = int(team)
            except ValueError:
                raise InvalidInput(f"must be a team id, got {team!r}", location="team") from None
            if not 1 <= team_id <= MAX_ROW_ID:
                raise InvalidInput(f"must be a team id from 1 to {MAX_ROW_ID}, got {team[:30]}"
                                   f"{'…' if len(team) > 30 else ''}", location="team")
            qs = qs.filter(team_id=team_id)
        page = self.paginate_queryset(qs.select_related("created_by").order_by("name", "id"))
        return self.get_paginated_response(ss.StudySourceSerializer(page, many=True).data)

    @extend_schema(request=ss.StudySourceCreateSerializer, responses={201: ss.StudySourceSerializer})
    def post(self, request):
        data = _valid(ss.StudySourceCreateSerializer, request)
        source = sources.create_source(actor=request.user, team=data["team"], name=data["name"],
                                       claimed=data["claimed"],
                                       prior_strength=data.get("prior_strength"))
        return Response(ss.StudySourceSerializer(source).data, status=status.HTTP_201_CREATED)


class SourceDetailView(GenericAPIView):
    """A source with its calibration: claimed vs observed, posterior, scores, trend."""

    permission_classes = (IsAuthenticated,)
    serializer_class = ss.StudySourceSerializer

    @extend_schema(parameters=[OpenApiParameter("window", int)], responses=OpenApiTypes.OBJECT)
    def get(self, request, pk):
        source = sources.get_source(request.user, pk)
        window = _int_param(request, "window", 10, 1, 10_000)
        body = dict(ss.StudySourceSerializer(source).data)
        body.update(sources.calibration(source, window=window))
        return Response(body)


class SourceRecordsView(GenericAPIView):
    """The source's track record, oldest first; analysts add a past study by hand."""

    permission_classes = (IsAuthenticated,)
    serializer_class = ss.StudyRecordSerializer

    def get(self, request, pk):
        source = sources.get_source(request.user, pk)
        page = self.paginate_queryset(source.records.select_related("created_by")
                                      .order_by("date", "id"))
        return self.get_paginated_response(ss.StudyRecordSerializer(page, many=True).data)

    @extend_schema(request=ss.StudyRecordCreateSerializer, responses={201: ss.StudyRecordSerializer})
    def post(self, request, pk):
        source = sources.get_source(request.user, pk)
        data = _valid(ss.StudyRecordCreateSerializer, request)
        record = sources.add_record(actor=request.user, source=source, **data)
        return Response(ss.StudyRecordSerializer(record).data, status=status.HTTP_201_CREATED)


class SourceRecordsExportView(GenericAPIView):
    """The track record as a CSV file in the import layout (cells made safe for spreadsheets)."""

    permission_classes = (IsAuthenticated,)

    @extend_schema(responses={(200, "text/csv"): OpenApiTypes.STR})
    def get(self, request, pk):
        source = sources.get_source(request.user, pk)
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\r\n")
        writer.writerow(["date", "signal", "state", "origin", "decision", "note"])
        for row in source.records.order_by("date", "id").values_list(
                "date", "signal", "state", "origin", "decision_id", "note"):
            # A note or a name starting with = + - @ would run as a formula (OWASP).
            writer.writerow([neutralise_csv_cell(v if not hasattr(v, "isoformat") else
                                                 v.isoformat()) for v in row])
        response = HttpResponse(out.getvalue(), content_type="text/csv; charset=utf-8")
        response["Content-Disposition"] = f'attachment; filename="source-{source.pk}-records.csv"'
        return response


class SourceImportView(GenericAPIView):
    """Upload a records CSV (multipart field ``file``); ``?dry_run=1`` checks only.

    All or nothing: every bad line is listed with its number and nothing is
    imported. The file's name is only a label in the audit trail, never a path.
    """

    permission_classes = (IsAuthenticated,)
    parser_classes = (MultiPartParser,)

    @extend_schema(request={"multipart/form-data": {"type": "object", "properties": {
        "file": {"type": "string", "format": "binary"}}}},
        parameters=[OpenApiParameter("dry_run", bool)], responses=OpenApiTypes.OBJECT)
    def post(self, request, pk):
        source = sources.get_source(request.user, pk)
        dry_run = _flag(request, "dry_run")
        # Refuse an oversized upload from its declared length, before Django
        # streams the body to a temporary file.
        try:
            length = int(request.META.get("CONTENT_LENGTH") or 0)
        except ValueError:
            length = 0
        if length > MAX_BYTES + MULTIPART_OVERHEAD:
            raise InvalidInput(f"larger than {MAX_BYTES:,} bytes ({length:,} bytes sent); split "
                               "the file and import it in parts", location="file")
        upload = request.FILES.get("file")
        if upload is None:
            raise InvalidInput("send the CSV as the multipart field 'file'", location="file")
        summary = sources.import_records(actor=request.user, source=source, file=upload,
                                         dry_run=dry_run, filename=upload.name)
        code = status.HTTP_200_OK if dry_run else status.HTTP_201_CREATED
        return Response(summary, status=code)


class OutcomeView(GenericAPIView):
    """The outcome in force and its earlier corrections (GET); record one (POST, analysts)."""

    permission_classes = (IsAuthenticated,)
    serializer_class = ss.OutcomeSerializer

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request, decision_pk):
        decision, rows = outcomes.outcome_history(request.user, decision_pk)
        current = rows[0] if rows else None
        return Response({"current": ss.OutcomeSerializer(current).data if current else None,
                         "history": ss.OutcomeSerializer(rows[1:], many=True).data},
                        headers={"ETag": decision.etag})

    @extend_schema(request=ss.OutcomeCreateSerializer, parameters=[IF_MATCH],
                   responses={201: ss.OutcomeSerializer})
    def post(self, request, decision_pk):
        decision = _decision(request, decision_pk)
        data = _valid(ss.OutcomeCreateSerializer, request)
        outcome = outcomes.record_outcome(decision.pk, actor=request.user,
                                          if_match=request.headers.get("If-Match"), **data)
        decision.refresh_from_db()
        return Response(ss.OutcomeSerializer(outcome).data, status=status.HTTP_201_CREATED,
                        headers={"ETag": decision.etag})


class ReviewView(GenericAPIView):
    """Post-hoc review: expected vs realised, probability of what happened, regret, soundness."""

    permission_classes = (IsAuthenticated,)

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request, decision_pk):
        return Response(outcomes.review(_decision(request, decision_pk)))


class SourcesComparisonView(GenericAPIView):
    """EVSI and net value of each sourced study with the claimed and the calibrated accuracy."""

    permission_classes = (IsAuthenticated,)

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request, decision_pk, number):
        version = get_version(_decision(request, decision_pk), number)
        return Response(sources.claimed_vs_calibrated(version))


class ApplySourceView(GenericAPIView):
    """Save a new version whose study takes a source's claimed or calibrated accuracy."""

    permission_classes = (IsAuthenticated,)

    @extend_schema(request=ss.ApplySourceSerializer, parameters=[IF_MATCH],
                   responses=OpenApiTypes.OBJECT)
    def post(self, request, decision_pk):
        decision = _decision(request, decision_pk)
        data = _valid(ss.ApplySourceSerializer, request)
        version = sources.apply_source_to_study(
            actor=request.user, decision=decision, study_name=data["study"],
            source=data["source"], mode=data["mode"], if_match=request.headers.get("If-Match"))
        decision.refresh_from_db()
        study = next(s for s in version.results["studies"] if s["name"] == data["study"])
        return Response({"decision": decision.pk, "version": version.number,
                         "study": study["name"], "source": study.get("source"),
                         "evsi": study["evsi"], "net_value": study["net_value"],
                         "policy": version.results["policy"]["text"]},
                        status=status.HTTP_201_CREATED, headers={"ETag": decision.etag})


class PortfolioView(GenericAPIView):
    """The team's portfolio: sums, calibration of its probabilities, sources vs claims."""

    permission_classes = (IsAuthenticated,)

    @extend_schema(parameters=[OpenApiParameter("team", int), OpenApiParameter("bins", int)],
                   responses=OpenApiTypes.OBJECT)
    def get(self, request):
        team = portfolio.resolve_team(request.user, request.query_params.get("team"))
        bins = _int_param(request, "bins", portfolio.DEFAULT_BINS, 1, 100)
        return Response(portfolio.portfolio(request.user, team, bins=bins))


#: Included by ``decisions.api.urls`` (kept here so that file needs one line).
urlpatterns = [
    path("sources/", SourceListView.as_view(), name="source-list"),
    path("sources/<int:pk>/", SourceDetailView.as_view(), name="source-detail"),
    path("sources/<int:pk>/records/", SourceRecordsView.as_view(), name="source-records"),
    path("sources/<int:pk>/import/", SourceImportView.as_view(), name="source-import"),
    path("sources/<int:pk>/records.csv", SourceRecordsExportView.as_view(),
         name="source-records-csv"),
    path("decisions/<int:decision_pk>/outcome/", OutcomeView.as_view(), name="decision-outcome"),
    path("decisions/<int:decision_pk>/review/", ReviewView.as_view(), name="decision-review"),
    path("decisions/<int:decision_pk>/apply-source/", ApplySourceView.as_view(),
         name="decision-apply-source"),
    path("decisions/<int:decision_pk>/versions/<int:number>/sources-comparison/",
         SourcesComparisonView.as_view(), name="version-sources-comparison"),
    path("portfolio/", PortfolioView.as_view(), name="portfolio"),
]
