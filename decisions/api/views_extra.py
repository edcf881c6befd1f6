"""Teams, the chain check, the stateless evaluator and the API documentation page."""

from __future__ import annotations

from django.contrib.auth import get_user_model
from django.http import HttpResponse
from django.templatetags.static import static
from django.urls import reverse
from django.utils.html import escape
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import extend_schema
from rest_framework import mixins, viewsets
from rest_framework.decorators import action
from rest_framework.permissions import IsAdminUser, IsAuthenticated
from rest_framework.renderers import BrowsableAPIRenderer
from rest_framework.response import Response
from rest_framework.throttling import ScopedRateThrottle
from rest_framework.views import APIView

from decisions.api import serializers as s
from decisions.api.renderers import CoreResultRenderer
from decisions.models import Team
from decisions.services import teams
from decisions.services.access import visible_teams
from decisions.services.audit import verify_chain, verify_records
from decisions.services.errors import InvalidInput, NotFoundError
from decisions.services.evaluation import evaluate_document


class TeamViewSet(mixins.ListModelMixin, mixins.RetrieveModelMixin, viewsets.GenericViewSet):
    """Your teams and their members' roles; staff add, re-role and remove members."""

    serializer_class = s.TeamSerializer

    def get_queryset(self):
        user = self.request.user
        # Staff administer every team; everyone else sees only their own.
        base = Team.objects.all() if user.is_staff else visible_teams(user)
        return base.prefetch_related("memberships__user")

    @extend_schema(request=s.MemberSerializer, responses={201: s.MembershipSerializer})
    @action(detail=True, methods=["post"])
    def members(self, request, pk=None):
        """Add a member with a role (staff only)."""
        team = self.get_object()
        data = s.MemberSerializer(data=request.data)
        data.is_valid(raise_exception=True)
        user = get_user_model().objects.filter(username=data.validated_data["username"]).first()
        if user is None:
            raise InvalidInput("no such user", location="username")
        membership = teams.add_member(actor=request.user, team=team, user=user,
                                      role=data.validated_data["role"])
        return Response(s.MembershipSerializer(membership).data, status=201)

    def _membership(self, username):
        team = self.get_object()
        membership = team.memberships.filter(user__username=username).first()
        if membership is None:
            raise NotFoundError(f"{username} is not a member of this team", location="username")
        return membership

    @extend_schema(methods=["PATCH"], request=s.RoleSerializer, responses=s.MembershipSerializer)
    @extend_schema(methods=["DELETE"], request=None, responses={204: None})
    @action(detail=True, methods=["patch", "delete"], url_path=r"members/(?P<username>[^/]+)")
    def member(self, request, pk=None, username=None):
        """Change a member's role, or remove the member (staff only)."""
        membership = self._membership(username)
        if request.method == "DELETE":
            teams.remove_member(actor=request.user, membership=membership)
            return Response(status=204)
        data = s.RoleSerializer(data=request.data)
        data.is_valid(raise_exception=True)
        membership = teams.change_role(actor=request.user, membership=membership,
                                       role=data.validated_data["role"])
        return Response(s.MembershipSerializer(membership).data)


class AuditVerifyView(APIView):
    """Walk the whole audit chain and report the first broken link, if any (staff only).

    The chain spans every team, and its problem reports name decisions and signers
    of all of them, so only staff (who administer every team) may run it here.
    """

    permission_classes = (IsAuthenticated, IsAdminUser)

    @extend_schema(responses=OpenApiTypes.OBJECT)
    def get(self, request):
        body = verify_chain().as_dict()
        records = verify_records()
        body["records_ok"], body["record_problems"] = not records, records[:20]
        return Response(body)


class EvaluateView(APIView):
    """Validate and evaluate a model document; nothing is stored.

    Answers the core's result document, the same as ``python -m valuation``'s
    JSON output; a bad document gets 400 with every problem and its location.
    """

    throttle_scope = "evaluate"
    throttle_classes = (ScopedRateThrottle,)
    # The core's result document, whose numbers the core keeps finite (decisions/api/renderers.py).
    renderer_classes = (CoreResultRenderer, BrowsableAPIRenderer)

    @extend_schema(request=s.EvaluateSerializer, responses=OpenApiTypes.OBJECT)
    def post(self, request):
        serializer = s.EvaluateSerializer(data=request.data)
        serializer.is_valid(raise_exception=True)
        data = serializer.validated_data
        return Response(evaluate_document(data["document"], location="document",
                                          risk_tolerance=data.get("risk_tolerance")))


_DOCS_PAGE = """<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{title}</title>
<style>
body{{font-family:system-ui,sans-serif;margin:2rem auto;max-width:60rem;padding:0 1rem;color:#222}}
h2{{border-bottom:1px solid #ccc;margin-top:2rem}} code{{background:#f4f4f4;padding:0 .2em}}
.op{{margin:.8rem 0;padding:.5rem .8rem;border-left:4px solid #999}}
.m{{font-weight:bold;display:inline-block;min-width:4.5em}} pre{{background:#f7f7f7;padding:.5rem;
overflow:auto;font-size:.85em}} .note{{color:#555;font-size:.9em}}
</style></head><body>
<h1>{title}</h1>
<p class="note">Figures the API returns are model outputs resting on the stated assumptions; weigh
them with professional judgment and your organisation's own approval rules.</p>
<p>Machine-readable schema: <a href="{schema}">{schema}</a> (OpenAPI 3). Authenticate with
<code>Authorization: Token …</code> from <code>POST /api/token/</code> or a signed-in session.
Changes to a decision need <code>If-Match</code> with its <code>ETag</code>.</p>
<div id="ops" data-schema="{schema}">Loading the schema…</div>
<script src="{script}"></script></body></html>"""


def docs_page(request):
    """API documentation rendered in the browser from our own schema (no CDN assets)."""
    schema = reverse("api-schema") + "?format=json"
    html = _DOCS_PAGE.format(title="Decision register API", schema=escape(schema),
                             script=escape(static("decisions/api_docs.js")))
    return HttpResponse(html)


__all__ = ["AuditVerifyView", "EvaluateView", "TeamViewSet", "docs_page"]
