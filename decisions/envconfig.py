"""Strict readers for settings taken from the environment.

A typo in a deployment variable should stop the process at start-up, not
silently fall back to a default that weakens security.
"""

from __future__ import annotations

import os
import secrets
from pathlib import Path

from django.core.exceptions import ImproperlyConfigured

_TRUE = {"1", "true", "yes", "on"}
_FALSE = {"0", "false", "no", "off", ""}


def env_bool(name: str, default: bool = False) -> bool:
    """Read a yes/no variable; refuse anything that is not clearly one or the other."""
    raw = os.environ.get(name)
    if raw is None:
        return default
    value = raw.strip().lower()
    if value in _TRUE:
        return True
    if value in _FALSE:
        return False
    raise ImproperlyConfigured(f"{name}: must be one of true/false/1/0/yes/no, got {raw!r}")


def env_list(name: str, default: list[str]) -> list[str]:
    """Read a comma-separated list, dropping blanks."""
    raw = os.environ.get(name)
    if raw is None:
        return list(default)
    return [item.strip() for item in raw.split(",") if item.strip()]


def env_int(name: str, default: int, *, minimum: int = 0) -> int:
    """Read a whole number no smaller than ``minimum``."""
    raw = os.environ.get(name)
    if raw is None:
        return default
    try:
        value = int(raw)
    except ValueError:
        raise ImproperlyConfigured(f"{name}: must be a whole number, got {raw!r}") from None
    if value < minimum:
        raise ImproperlyConfigured(f"{name}: must be at least {minimum}, got {value}")
    return value


_RATE_PERIODS = {"s", "sec", "second", "m", "min", "minute", "h", "hour", "d", "day"}


def env_rate(name: str, default: str) -> str:
    """Read a throttle rate such as ``30/min`` (requests per second, minute, hour or day).

    DRF would only parse it on the first throttled request and answer 500 there.
    """
    raw = os.environ.get(name)
    if raw is None:
        return default
    count, _, period = raw.strip().partition("/")
    if not (count.isdigit() and int(count) >= 1 and period in _RATE_PERIODS):
        raise ImproperlyConfigured(
            f"{name}: must be a number of requests per s, min, hour or day such as "
            f"'30/min', got {raw!r}")
    return raw.strip()


def secret_key(data_dir: Path, debug: bool) -> str:
    """Return SECRET_KEY from the environment, or a local one kept in the data folder.

    A generated key is only acceptable for local use (DEBUG on): a production
    process must be handed its key, so that every app server signs sessions
    with the same one and the key never lives beside the database file.
    """
    from_env = os.environ.get("SECRET_KEY", "").strip()
    if from_env:
        if len(from_env) < 32:
            raise ImproperlyConfigured("SECRET_KEY: must be at least 32 characters long")
        return from_env
    if not debug:
        raise ImproperlyConfigured(
            "SECRET_KEY: must be set in the environment when DEBUG is off "
            "(for local use, set DEBUG=true and a key is generated in the data folder)"
        )
    key_file = data_dir / "secret_key"
    if key_file.exists():
        return key_file.read_text(encoding="utf-8").strip()
    data_dir.mkdir(parents=True, exist_ok=True)
    key = secrets.token_urlsafe(50)
    # Create the file readable by its owner only; the key signs sessions.
    fd = os.open(key_file, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "w", encoding="utf-8") as handle:
        handle.write(key)
    return key
