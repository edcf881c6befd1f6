"""Sign-in throttling: a lockout per username and client address after repeated failures.

Every password check made through ``django.contrib.auth.authenticate`` (the web
sign-in form and ``POST /api/token/``) goes through
:class:`ThrottledModelBackend`. After ``LOGIN_FAILURE_LIMIT`` failures for one
(username, address) pair within ``LOGIN_LOCKOUT_SECONDS``, that pair is locked
out for ``LOGIN_LOCKOUT_SECONDS``: even the right password is refused, and the
faces answer 429 with ``Retry-After``. The lockout itself is written to the
audit trail once (not every failure: that would let anyone fill the chain).

Keyed on username *and* address so that a stranger cannot lock a colleague out
from elsewhere; an attacker spreading guesses over many addresses is the
proxy's job (rate limits there), as the reliability notes say of DRF throttles.
The counter lives in Django's cache: per process by default, shared between app
servers with ``CACHE_URL=db://TABLE``.
"""

from __future__ import annotations

import hashlib
import logging
import math
import time

from django.conf import settings
from django.contrib.auth.backends import ModelBackend
from django.core.exceptions import PermissionDenied
from django.db import transaction

__all__ = ["ThrottledModelBackend", "client_address", "lockout_remaining", "record_failure",
           "reset_failures"]

logger = logging.getLogger("decisions.auth")


def client_address(request) -> str:
    # REMOTE_ADDR is the proxy's address behind a proxy that does not rewrite it;
    # see the deployment notes (the proxy must pass the client address through).
    meta = getattr(request, "META", None) or {}
    return str(meta.get("REMOTE_ADDR") or "unknown")[:64]


def _keys(username: str, address: str) -> tuple[str, str]:
    digest = hashlib.sha256(f"{username.strip().lower()}|{address}".encode()).hexdigest()[:32]
    return f"login-fail:{digest}", f"login-lock:{digest}"


def _cache():
    from django.core.cache import cache

    return cache


def lockout_remaining(username: str, address: str) -> int:
    """Seconds left on this pair's lockout (0: not locked)."""
    _, lock_key = _keys(username or "", address)
    until = _cache().get(lock_key)
    if until is None:
        return 0
    return max(0, math.ceil(until - time.time()))


def reset_failures(username: str, address: str) -> None:
    fail_key, _ = _keys(username or "", address)
    _cache().delete(fail_key)


def record_failure(username: str, address: str) -> int:
    """Count one failure; on reaching the limit, lock the pair and audit the lockout."""
    limit, window = settings.LOGIN_FAILURE_LIMIT, settings.LOGIN_LOCKOUT_SECONDS
    fail_key, lock_key = _keys(username or "", address)
    cache = _cache()
    cache.add(fail_key, 0, window)  # add + incr: no lost count between two processes
    try:
        failures = cache.incr(fail_key)
    except ValueError:  # expired between add and incr
        cache.set(fail_key, 1, window)
        failures = 1
    logger.warning("sign-in failed for %r from %s (%d of %d)",
                   (username or "")[:150], address, failures, limit)
    if failures == limit:
        cache.set(lock_key, time.time() + window, window)
        _audit_lockout(username or "", address, failures, window)
    return failures


def _audit_lockout(username: str, address: str, failures: int, seconds: int) -> None:
    from django.contrib.auth import get_user_model

    from decisions.services.audit import append_event

    name = username.strip()[:150]
    user = get_user_model().objects.filter(username=name).first()
    with transaction.atomic():
        append_event(actor=None, action="auth.lockout", object_type="user",
                     object_id=user.pk if user else name,
                     payload={"username": name, "known_user": user is not None,
                              "address": address, "failures": failures, "seconds": seconds})


class ThrottledModelBackend(ModelBackend):
    """Django's model backend behind the per-(username, address) lockout."""

    def authenticate(self, request, username=None, password=None, **kwargs):
        if username is None:
            username = kwargs.get(self._username_field())
        address = client_address(request)
        if username is not None and lockout_remaining(username, address):
            # PermissionDenied stops authenticate() at once (no other backend is
            # tried) and it fires user_login_failed, like a wrong password.
            raise PermissionDenied("too many failed sign-ins")
        user = super().authenticate(request, username=username, password=password, **kwargs)
        if username is not None and password is not None:
            if user is None:
                record_failure(username, address)
            else:
                reset_failures(username, address)
        return user

    @staticmethod
    def _username_field() -> str:
        from django.contrib.auth import get_user_model

        return get_user_model().USERNAME_FIELD
