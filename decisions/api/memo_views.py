"""The decision memo as a PDF download: ``GET /api/decisions/{id}/versions/{n}/memo.pdf``.

Readable by every member of the decision's team (as the decision itself); a
decision of another team is not found (404). Each user may fetch ``API_MEMO_RATE``
memos (default 30 a minute); beyond that the answer is 429 with ``Retry-After``.
"""

from __future__ import annotations

from django.http import HttpResponse
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import extend_schema
from rest_framework.permissions import IsAuthenticated
from rest_framework.renderers import JSONRenderer
from rest_framework.throttling import ScopedRateThrottle
from rest_framework.views import APIView

from decisions.services.memo import memo_filename, memo_for_version

__all__ = ["VersionMemoView"]


class VersionMemoView(APIView):
    """The decision memo of one version (PDF): figures, tree, charts, sign-offs."""

    permission_classes = (IsAuthenticated,)
    # A memo costs about half a second of CPU (evaluation, sensitivity, drawing): a
    # fairness limit per user keeps one client from holding every worker.
    throttle_scope = "memo"
    throttle_classes = (ScopedRateThrottle,)

    def perform_content_negotiation(self, request, force=False):
        # The answer is a PDF written directly; errors are JSON whatever the client's
        # Accept says, rather than a 406 for a client that asked for application/pdf.
        renderer = JSONRenderer()
        return renderer, renderer.media_type

    @extend_schema(responses={(200, "application/pdf"): OpenApiTypes.BINARY})
    def get(self, request, decision_pk: int, number: int):
        pdf = memo_for_version(request.user, decision_pk, number)
        response = HttpResponse(pdf, content_type="application/pdf")
        response["Content-Disposition"] = (
            f'attachment; filename="{memo_filename(decision_pk, number)}"')
        response["Cache-Control"] = "private, no-store"
        return response
