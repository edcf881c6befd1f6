"""One error shape everywhere: ``{"errors": [{"location", "message"}], "code"}``."""

from __future__ import annotations

from django.core.exceptions import PermissionDenied
from django.db import IntegrityError, OperationalError
from django.http import Http404
from rest_framework import exceptions as drf
from rest_framework.response import Response
from rest_framework.views import exception_handler as drf_handler

from decisions.api.parsers import BodyProblem
from decisions.services.errors import DomainError

__all__ = ["api_exception_handler", "flatten"]


def flatten(detail, location: str = "") -> list[dict[str, str]]:
    """Turn DRF's nested error detail into a flat list of located messages."""
    if isinstance(detail, dict):
        out = []
        for key, value in detail.items():
            sub = location if key in ("non_field_errors", "detail") else (
                f"{location}.{key}" if location else str(key))
            out.extend(flatten(value, sub))
        return out
    if isinstance(detail, list):
        out = []
        for i, value in enumerate(detail):
            nested = isinstance(value, dict | list)
            out.extend(flatten(value, f"{location}[{i}]" if nested else location))
        return out
    return [{"location": location, "message": str(detail)}]


def api_exception_handler(exc, context):
    if isinstance(exc, IntegrityError):
        # A unique constraint caught a race the locks did not (e.g. two requests
        # adding the same member at once): the loser is told to re-read, not a 500.
        return Response({"errors": [{"location": "", "message": "a concurrent change "
                                     "conflicted with this one; read again and retry"}],
                         "code": "conflict"}, status=409)
    if isinstance(exc, OperationalError) and "database is locked" in str(exc):
        # SQLite's single writer was busy past the timeout: retryable, not a crash.
        return Response({"errors": [{"location": "", "message": "the database is busy; "
                                     "retry shortly"}], "code": "busy"},
                        status=503, headers={"Retry-After": "1"})
    if isinstance(exc, DomainError):
        return Response({"errors": exc.as_list(), "code": exc.code}, status=exc.status)
    if isinstance(exc, BodyProblem):
        return Response({"errors": [{"location": exc.location, "message": str(exc.detail)}],
                         "code": "invalid_body"}, status=400)
    if isinstance(exc, Http404):
        exc = drf.NotFound()
    elif isinstance(exc, PermissionDenied):
        exc = drf.PermissionDenied()
    response = drf_handler(exc, context)
    if response is None:
        return None
    code = getattr(exc, "default_code", "error")
    if isinstance(exc, drf.ValidationError):
        errors = flatten(exc.detail)
    else:
        errors = [{"location": "", "message": str(getattr(exc, "detail", exc))}]
    response.data = {"errors": errors, "code": code}
    return response
