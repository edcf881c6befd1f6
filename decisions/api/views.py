"""REST face of the register: read through scoped querysets, change through services.

Every change to a decision needs ``If-Match`` with the ETag of the decision
(428 without it, 412 when stale); every response about a decision carries its
current ``ETag``. Creating a decision takes an optional ``Idempotency-Key`` that
makes it safe to retry (``decisions.services.idempotency``).
"""

from __future__ import annotations

import json

from django.db.models import Prefetch
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework import mixins, status, viewsets
from rest_framework.decorators import action
from rest_framework.exceptions import NotFound
from rest_framework.permissions import IsAuthenticated
from rest_framework.response import Response

from decisions.api import serializers as s
from decisions.api.permissions import TeamRolePermission
from decisions.models import AuditEvent, ChosenStrategy, Decision, ModelVersion, SignOff
from decisions.services import decisions as svc
from decisions.services import idempotency
from decisions.services import signoff as signing
from decisions.services.access import visible_decisions
from valuation.diff import diff_documents

IF_MATCH = OpenApiParameter("If-Match", OpenApiTypes.STR, OpenApiParameter.HEADER, required=True,
                            description="the decision's ETag as last read")
# The IETF draft "The Idempotency-Key HTTP Header Field"
# (draft-ietf-httpapi-idempotency-key-header); decisions/services/idempotency.py follows it.
IDEMPOTENCY_KEY = OpenApiParameter(
    idempotency.KEY_HEADER, OpenApiTypes.STR, OpenApiParameter.HEADER, required=False,
    description=(
        "Optional; makes the request safe to retry. A key of 1 to 255 printable ASCII "
        "characters, new for each new request (a random UUID), sent as a quoted string "
        "(`\"8e03978e-40d5-43e8-bc93-6894a57f9324\"`) or bare. Resending the same body with the "
        "same key within IDEMPOTENCY_KEY_TTL_HOURS (default 24 hours) creates nothing and "
        "answers 201 with the decision the key created, as it is now, and the header "
        "`Idempotent-Replayed: true`. The same key with another body: 422; while the first "
        "request with the key is still being processed: 409; a malformed key: 400. A "
        "refused request records nothing. Keys belong to the user who sent them."))
#: Response header marking an answer to a retry (the draft names none; ours, documented).
REPLAYED_HEADER = "Idempotent-Replayed"


def _decision_response(decision: Decision, code=status.HTTP_200_OK, data=None) -> Response:
    decision.refresh_from_db()
    body = data if data is not None else s.DecisionSerializer(decision).data
    return Response(body, status=code, headers={"ETag": decision.etag})


def _valid(serializer_class, request):
    serializer = serializer_class(data=request.data)
    serializer.is_valid(raise_exception=True)
    return serializer.validated_data


class DecisionViewSet(mixins.ListModelMixin, mixins.RetrieveModelMixin, viewsets.GenericViewSet):
    """Decisions of your teams. Filters: ``status``, ``team``, ``owner`` (username),
    ``created_after`` / ``created_before`` (dates, inclusive).

    Lifecycle: draft -> (submit) submitted -> (the last sign-off the policy asks for)
    approved -> (strategy recorded, commit) committed -> (close) closed. A reject
    sign-off, or a new version saved while submitted, sends it back to draft; after a
    reject it can be submitted again only once a new version is saved. Any other move
    is refused with 409.
    """

    serializer_class = s.DecisionSerializer
    permission_classes = (IsAuthenticated, TeamRolePermission)

    def get_queryset(self):
        qs = visible_decisions(self.request.user).select_related("team", "owner")
        if self.action != "list":
            return qs
        # A page of decisions in a fixed number of queries: versions newest first
        # without their results (the list does not show them; the model text stays,
        # since each sign-off re-hashes it), with their sign-offs and strategies and
        # the people on them, and each policy's requirements.
        versions = (ModelVersion.objects.defer("results").select_related("author")
                    .prefetch_related(
                        Prefetch("signoffs", queryset=SignOff.objects.select_related("signer")),
                        Prefetch("strategies",
                                 queryset=ChosenStrategy.objects.select_related("chosen_by")))
                    .order_by("-number"))
        qs = qs.select_related("policy").prefetch_related(
            Prefetch("versions", queryset=versions, to_attr="versions_newest_first"),
            "policy__requirements",
        )
        filters = s.DecisionFilterSerializer(data=self.request.query_params)
        filters.is_valid(raise_exception=True)
        f = filters.validated_data
        if "status" in f:
            qs = qs.filter(status=f["status"])
        if "team" in f:
            qs = qs.filter(team_id=f["team"])
        if "owner" in f:
            qs = qs.filter(owner__username=f["owner"])
        if "created_after" in f:
            qs = qs.filter(created_at__date__gte=f["created_after"])
        if "created_before" in f:
            qs = qs.filter(created_at__date__lte=f["created_before"])
        return qs

    @extend_schema(parameters=[
        OpenApiParameter("status", str, enum=["draft", "submitted", "approved", "committed",
                                               "closed"]),
        OpenApiParameter("team", int), OpenApiParameter("owner", str),
        OpenApiParameter("created_after", OpenApiTypes.DATE),
        OpenApiParameter("created_before", OpenApiTypes.DATE)])
    def list(self, request, *args, **kwargs):
        return super().list(request, *args, **kwargs)

    def retrieve(self, request, *args, **kwargs):
        return _decision_response(self.get_object())

    @extend_schema(request=s.DecisionCreateSerializer, responses={201: s.DecisionSerializer},
                   parameters=[IDEMPOTENCY_KEY, OpenApiParameter(
                       REPLAYED_HEADER, OpenApiTypes.STR, OpenApiParameter.HEADER, enum=["true"],
                       response=[201], description="present on the answer to a retry with an "
                       "Idempotency-Key: nothing was created this time")])
    def create(self, request):
        """A new draft decision; send ``Idempotency-Key`` to make the request safe to retry."""
        key = idempotency.parse_key(request.headers.get(idempotency.KEY_HEADER))
        data = _valid(s.DecisionCreateSerializer, request)
        created = idempotency.create_decision_once(
            actor=request.user, key=key, body=request.data, team=data["team"],
            title=data["title"], policy=data.get("policy"))
        response = _decision_response(created.decision, status.HTTP_201_CREATED)
        if created.replayed:
            response[REPLAYED_HEADER] = "true"
        return response

    @extend_schema(request=s.DecisionUpdateSerializer, parameters=[IF_MATCH])
    def partial_update(self, request, pk=None):
        decision = self.get_object()
        data = _valid(s.DecisionUpdateSerializer, request)
        svc.update_decision(decision.pk, actor=request.user, if_match=request.headers.get("If-Match"),
                            title=data.get("title"), owner_username=data.get("owner"))
        return _decision_response(decision)

    def _transition(self, request, service, serializer_class=s.EmptySerializer, **extra):
        decision = self.get_object()
        data = _valid(serializer_class, request)
        service(decision.pk, actor=request.user, if_match=request.headers.get("If-Match"),
                **extra, **data)
        return _decision_response(decision)

    @extend_schema(request=None, parameters=[IF_MATCH], responses=s.DecisionSerializer)
    @action(detail=True, methods=["post"])
    def submit(self, request, pk=None):
        """draft -> submitted: send the current version for sign-off."""
        return self._transition(request, svc.submit_version)

    @extend_schema(request=None, parameters=[IF_MATCH], responses=s.DecisionSerializer)
    @action(detail=True, methods=["post"])
    def commit(self, request, pk=None):
        """approved -> committed (a strategy must be recorded first)."""
        return self._transition(request, svc.commit_decision)

    @extend_schema(request=s.CloseSerializer, parameters=[IF_MATCH], responses=s.DecisionSerializer)
    @action(detail=True, methods=["post"])
    def close(self, request, pk=None):
        """committed -> closed."""
        return self._transition(request, svc.close_decision, s.CloseSerializer)

    @extend_schema(methods=["GET"], request=None, responses=s.StrategySerializer(many=True))
    @extend_schema(methods=["POST"], request=s.StrategyCreateSerializer, parameters=[IF_MATCH],
                   responses={201: s.StrategySerializer})
    @action(detail=True, methods=["get", "post"])
    def strategy(self, request, pk=None):
        """The chosen plan: the recommended policy, or the team's own with a justification."""
        decision = self.get_object()
        if request.method == "GET":
            rows = ChosenStrategy.objects.filter(version__decision=decision).select_related(
                "version", "chosen_by").order_by("-chosen_at", "-id")
            return Response(s.StrategySerializer(rows, many=True).data,
                            headers={"ETag": decision.etag})
        data = _valid(s.StrategyCreateSerializer, request)
        strategy = svc.record_strategy(decision.pk, actor=request.user,
                                       if_match=request.headers.get("If-Match"), **data)
        decision.refresh_from_db()
        return Response(s.StrategySerializer(strategy).data, status=status.HTTP_201_CREATED,
                        headers={"ETag": decision.etag})

    @extend_schema(methods=["GET"], request=None, responses=OpenApiTypes.OBJECT)
    @extend_schema(methods=["PUT"], request=s.PolicySerializer, parameters=[IF_MATCH],
                   responses=OpenApiTypes.OBJECT)
    @action(detail=True, methods=["get", "put"])
    def policy(self, request, pk=None):
        """The sign-off policy (roles and counts) and its progress on the current version."""
        decision = self.get_object()
        if request.method == "PUT":
            data = _valid(s.PolicySerializer, request)
            svc.set_policy(decision.pk, actor=request.user,
                           if_match=request.headers.get("If-Match"),
                           requirements=data.get("requirements", {}))
            decision.refresh_from_db()
        return Response(signing.policy_progress(decision, decision.current_version()),
                        headers={"ETag": decision.etag})

    @extend_schema(request=None, responses=s.AuditEventSerializer(many=True))
    @action(detail=True, methods=["get"])
    def audit(self, request, pk=None):
        """The audit events about this decision, oldest first."""
        decision = self.get_object()
        events = AuditEvent.objects.filter(object_type="decision", object_id=str(decision.pk))
        page = self.paginate_queryset(events.order_by("seq"))
        return self.get_paginated_response(s.AuditEventSerializer(page, many=True).data)


class VersionViewSet(viewsets.GenericViewSet):
    """Immutable model versions of one decision."""

    permission_classes = (IsAuthenticated, TeamRolePermission)
    serializer_class = s.VersionSerializer
    lookup_field = "number"

    def get_decision(self) -> Decision:
        decision = visible_decisions(self.request.user).filter(pk=self.kwargs["decision_pk"]).first()
        if decision is None:
            raise NotFound()
        self.action = "versions"
        self.check_object_permissions(self.request, decision)
        return decision

    def get_queryset(self):
        return self.get_decision().versions.select_related("author").order_by("number")

    @extend_schema(responses=s.VersionSummarySerializer(many=True))
    def list(self, request, decision_pk=None):
        page = self.paginate_queryset(self.get_queryset())
        return self.get_paginated_response(s.VersionSummarySerializer(page, many=True).data)

    @extend_schema(request=s.VersionCreateSerializer, parameters=[IF_MATCH],
                   responses={201: s.VersionSerializer})
    def create(self, request, decision_pk=None):
        decision = self.get_decision()
        data = _valid(s.VersionCreateSerializer, request)
        version = svc.save_version(decision.pk, actor=request.user,
                                   if_match=request.headers.get("If-Match"), **data)
        decision.refresh_from_db()
        return Response(s.VersionSerializer(version).data, status=status.HTTP_201_CREATED,
                        headers={"ETag": decision.etag})

    def retrieve(self, request, decision_pk=None, number=None):
        decision = self.get_decision()
        version = svc.get_version(decision, number)
        return Response(s.VersionSerializer(version).data, headers={"ETag": decision.etag})

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def diff(self, request, decision_pk=None, number=None, other=None):
        """What changed from version ``number`` to version ``other`` (nodes, probabilities,
        payoffs), and how the expected value moved."""
        decision = self.get_decision()
        old, new = svc.get_version(decision, number), svc.get_version(decision, other)
        result = diff_documents(json.loads(old.canonical_json), json.loads(new.canonical_json))
        result["from"], result["to"] = old.number, new.number
        result["expected_value"] = {"from": old.results.get("expected_value"),
                                    "to": new.results.get("expected_value")}
        return Response(result)


class SignOffViewSet(viewsets.GenericViewSet):
    """Sign-offs of one version; signing asks for your password again."""

    permission_classes = (IsAuthenticated, TeamRolePermission)
    serializer_class = s.SignOffSerializer

    def _decision(self):
        decision = visible_decisions(self.request.user).filter(pk=self.kwargs["decision_pk"]).first()
        if decision is None:
            raise NotFound()
        return decision

    def list(self, request, decision_pk=None, number=None):
        decision = self._decision()
        version = svc.get_version(decision, number)
        rows = version.signoffs.select_related("signer", "version")
        return Response(s.SignOffSerializer(rows, many=True).data, headers={"ETag": decision.etag})

    @extend_schema(request=s.SignOffCreateSerializer, parameters=[IF_MATCH],
                   responses={201: s.SignOffSerializer})
    def create(self, request, decision_pk=None, number=None):
        decision = self._decision()
        self.action = "signoffs"
        self.check_object_permissions(request, decision)
        data = _valid(s.SignOffCreateSerializer, request)
        signoff = signing.sign(decision.pk, number, actor=request.user,
                               password=data["password"], role=data["role"],
                               meaning=data["meaning"], reason=data.get("reason", ""),
                               if_match=request.headers.get("If-Match"))
        decision.refresh_from_db()
        return Response(s.SignOffSerializer(signoff).data, status=status.HTTP_201_CREATED,
                        headers={"ETag": decision.etag})

