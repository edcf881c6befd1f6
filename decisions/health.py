"""``GET /healthz``: readiness for a load balancer (the database answers a trivial query).

No authentication, no session, no data: ``{"status": "ok"}`` or 503 with
``Retry-After`` (through :mod:`decisions.middleware`) when the database is gone.
"""

from __future__ import annotations

from django.db import connection
from django.http import JsonResponse
from django.views.decorators.http import require_GET

__all__ = ["healthz"]


@require_GET
def healthz(request):
    with connection.cursor() as cur:
        cur.execute("SELECT 1")
        cur.fetchone()
    return JsonResponse({"status": "ok"})
