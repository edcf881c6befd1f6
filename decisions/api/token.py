"""``POST /api/token/``: a username and password for an API token, throttled twice.

DRF's scoped rate limit (``API_TOKEN_RATE``) bounds requests per client; the
lockout of :mod:`decisions.throttle` bounds failed passwords per (username,
address) and answers 429 with ``Retry-After`` while it lasts.
"""

from __future__ import annotations

from rest_framework.authtoken.views import ObtainAuthToken
from rest_framework.parsers import FormParser
from rest_framework.response import Response
from rest_framework.throttling import ScopedRateThrottle

from decisions.api.parsers import StrictJSONParser
from decisions.throttle import client_address, lockout_remaining

__all__ = ["TokenView"]


class TokenView(ObtainAuthToken):
    """Exchange a username and password for an API token (rate-limited, lockout on failures)."""

    throttle_scope = "token"
    throttle_classes = (ScopedRateThrottle,)
    # DRF's own view takes plain JSONParser, which has no depth limit (a deeply
    # nested body would raise RecursionError, a 500); ours is bounded and strict.
    parser_classes = (StrictJSONParser, FormParser)

    def post(self, request, *args, **kwargs):
        username = request.data.get("username") if isinstance(request.data, dict) else None
        remaining = (lockout_remaining(str(username), client_address(request))
                     if isinstance(username, str) and username else 0)
        if remaining:
            return Response(
                {"errors": [{"location": "username", "message":
                             f"too many failed sign-ins from this address; try again in "
                             f"{remaining} seconds"}], "code": "locked_out"},
                status=429, headers={"Retry-After": str(remaining)})
        return super().post(request, *args, **kwargs)
