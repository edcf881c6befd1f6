"""Answer 503 (not 500) when the database is unreachable, and set the security headers
that Django's own settings do not cover.

A dropped connection, a failover in progress, a PostgreSQL backend terminated by
an operator, or SQLite's "database is locked" after the busy timeout all surface
as ``django.db.OperationalError`` or ``InterfaceError``. None of them is a bug
in the request: the client should retry. The transaction the request had open
is rolled back by the database when the connection dies (or by ``atomic()`` on
the way out), so no half-written state is left; the answer says so with 503 and
``Retry-After``.

Two hooks are needed because Django turns an exception into a response at every
middleware layer: :class:`DatabaseUnavailableMiddleware` catches what a view
raises (API and web pages alike; DRF re-raises exceptions its handler does not
know), and :func:`server_error` (``handler500``) catches what the session or
authentication middleware raise before any view runs.
"""

from __future__ import annotations

import logging
import re
import sys

from django.db import InterfaceError, OperationalError
from django.http import HttpResponse, JsonResponse
from django.views import defaults

__all__ = [
    "CONTENT_SECURITY_POLICY",
    "RETRY_AFTER_SECONDS",
    "DatabaseUnavailableMiddleware",
    "SecurityHeadersMiddleware",
    "bad_request",
    "database_unavailable",
    "page_not_found",
    "permission_denied",
    "server_error",
]

logger = logging.getLogger("decisions.database")

RETRY_AFTER_SECONDS = 5
DATABASE_ERRORS = (OperationalError, InterfaceError)

# Scripts only from our own origin (the pages load static/decisions/editor.js with
# ``src=``); inline style attributes are used by the templates for indentation, so
# styles keep 'unsafe-inline', which cannot run code.
CONTENT_SECURITY_POLICY = (
    "default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
    "img-src 'self' data:; object-src 'none'; base-uri 'self'; form-action 'self'; "
    "frame-ancestors 'none'"
)

# Connection strings and libpq messages can carry credentials: never log them.
_SECRETS = [
    (re.compile(r"(\w+://[^:/@\s]*:)[^@\s]*@"), r"\1***@"),
    (re.compile(r"(password\s*=\s*)\S+", re.IGNORECASE), r"\1***"),
]


def _redact(text: str) -> str:
    for pattern, replacement in _SECRETS:
        text = pattern.sub(replacement, text)
    return text


def _wants_json(request) -> bool:
    return request.path.startswith("/api/") or "application/json" in request.headers.get(
        "Accept", "")


def database_unavailable(request, exc: BaseException) -> HttpResponse:
    """The 503 answer for ``exc``, logged once without credentials or a traceback."""
    sqlstate = getattr(getattr(exc, "__cause__", None), "sqlstate", None) or ""
    first_line = _redact(str(exc).strip().splitlines()[0] if str(exc).strip() else "")
    logger.error("database unavailable during %s %s: %s %s %s", request.method, request.path,
                 type(exc).__name__, sqlstate, first_line[:200])
    message = ("the database is unavailable; nothing was saved by this request. "
               f"Retry in {RETRY_AFTER_SECONDS} seconds")
    if _wants_json(request):
        response = JsonResponse({"errors": [{"location": "", "message": message}],
                                 "code": "database_unavailable"}, status=503)
    else:
        response = HttpResponse(
            "<!doctype html><title>Service unavailable</title><h1>Service unavailable</h1>"
            f"<p>{message}.</p>", status=503, content_type="text/html; charset=utf-8")
    response["Retry-After"] = str(RETRY_AFTER_SECONDS)
    return response


class DatabaseUnavailableMiddleware:
    """Turn a database connection failure raised by a view into 503 + Retry-After."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        return self.get_response(request)

    def process_exception(self, request, exception):
        if isinstance(exception, DATABASE_ERRORS):
            return database_unavailable(request, exception)
        return None


class SecurityHeadersMiddleware:
    """Add a Content-Security-Policy to every response that does not set its own."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        response = self.get_response(request)
        response.headers.setdefault("Content-Security-Policy", CONTENT_SECURITY_POLICY)
        return response


def server_error(request, *args, **kwargs):
    """``handler500``: 503 for a database failure outside a view, else a plain 500.

    Django calls this inside the ``except`` block that caught the error, so
    ``sys.exc_info()`` still holds it. The body never carries a traceback.
    """
    exc = sys.exc_info()[1]
    if isinstance(exc, DATABASE_ERRORS):
        return database_unavailable(request, exc)
    message = "internal error; it has been logged"
    if _wants_json(request):
        return JsonResponse({"errors": [{"location": "", "message": message}],
                             "code": "server_error"}, status=500)
    return HttpResponse(f"<!doctype html><title>Server error</title><h1>Server error</h1>"
                        f"<p>{message}.</p>", status=500, content_type="text/html; charset=utf-8")


def _api_error(status: int, code: str, message: str) -> JsonResponse:
    return JsonResponse({"errors": [{"location": "", "message": message}], "code": code},
                        status=status)


# Requests that never reach a DRF view (a path no route matches, a body Django
# itself refuses) still get the API's JSON error shape under /api/.

def page_not_found(request, exception=None):
    """``handler404``."""
    if _wants_json(request):
        return _api_error(404, "not_found", "not found")
    return defaults.page_not_found(request, exception)


def bad_request(request, exception=None):
    """``handler400`` (e.g. an oversized form body, a host not in ALLOWED_HOSTS)."""
    if _wants_json(request):
        return _api_error(400, "bad_request", "the request was refused as malformed")
    return defaults.bad_request(request, exception)


def permission_denied(request, exception=None):
    """``handler403``."""
    if _wants_json(request):
        return _api_error(403, "permission_denied", "you do not have permission to do this")
    return defaults.permission_denied(request, exception)
