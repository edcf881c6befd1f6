"""Settings for the decision register, read from the environment only.

Variables (all optional unless stated):

- ``DEBUG``: ``true`` for local use only. Off by default.
- ``SECRET_KEY``: required when DEBUG is off; at least 32 characters.
- ``DATABASE_URL``: e.g. ``postgres://user@host:5432/name``. Default: an SQLite
  file ``register.sqlite3`` in the data folder.
- ``DECISIONS_DATA_DIR``: the data folder (default ``./data`` beside manage.py).
- ``ALLOWED_HOSTS``: comma-separated; default ``localhost,127.0.0.1`` (plus
  ``testserver`` when DEBUG is on).
- ``CSRF_TRUSTED_ORIGINS``: comma-separated origins behind a proxy.
- ``SECURE_SSL``: ``true`` behind HTTPS (secure cookies, HSTS, redirect).
- ``MAX_REQUEST_BYTES``: largest request body accepted (default 2,621,440).
- ``CACHE_URL``: ``locmem://`` (default, per process) or ``db://TABLE`` (shared by
  every app server; run ``manage.py createcachetable``). Holds the login throttle.
- ``LOGIN_FAILURE_LIMIT`` / ``LOGIN_LOCKOUT_SECONDS``: failed sign-ins per
  username and address before a lockout, and its length (default 5 and 900).
- ``API_TOKEN_RATE`` / ``API_EVALUATE_RATE``: DRF throttle rates for ``/api/token/``
  and ``/api/evaluate/`` (default ``20/min`` and ``120/min``; fairness, not security).
- ``API_MEMO_RATE``: memo PDFs per user (default ``30/min``; each costs about 0.5 s of CPU).
- ``IDEMPOTENCY_KEY_TTL_HOURS``: how long an ``Idempotency-Key`` of ``POST /api/decisions/``
  is remembered (default 24, at least 1); older keys are ignored, and purged by
  ``manage.py purge_idempotency_keys``.
"""

from __future__ import annotations

import os
from pathlib import Path

import dj_database_url
from django.core.exceptions import ImproperlyConfigured

from decisions.envconfig import env_bool, env_int, env_list, env_rate, secret_key

BASE_DIR = Path(__file__).resolve().parent.parent
DATA_DIR = Path(os.environ.get("DECISIONS_DATA_DIR", BASE_DIR / "data")).resolve()

DEBUG = env_bool("DEBUG", default=False)
SECRET_KEY = secret_key(DATA_DIR, DEBUG)
_LOCAL_HOSTS = ["localhost", "127.0.0.1"]
ALLOWED_HOSTS = env_list("ALLOWED_HOSTS", [*_LOCAL_HOSTS, "testserver"] if DEBUG else _LOCAL_HOSTS)
CSRF_TRUSTED_ORIGINS = env_list("CSRF_TRUSTED_ORIGINS", [])

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "whitenoise.runserver_nostatic",
    "django.contrib.staticfiles",
    "rest_framework",
    "rest_framework.authtoken",
    "drf_spectacular",
    "decisions",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "decisions.middleware.SecurityHeadersMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    # Innermost, so that a view's database failure becomes 503 + Retry-After.
    "decisions.middleware.DatabaseUnavailableMiddleware",
]

ROOT_URLCONF = "decisions.urls"
WSGI_APPLICATION = "decisions.wsgi.application"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
            ],
        },
    },
]


def _database() -> dict:
    default_sqlite = f"sqlite:///{DATA_DIR / 'register.sqlite3'}"
    url = os.environ.get("DATABASE_URL", "").strip() or default_sqlite
    config = dj_database_url.parse(url, conn_max_age=env_int("DB_CONN_MAX_AGE", 0))
    if config["ENGINE"] == "django.db.backends.sqlite3":
        if config["NAME"] and config["NAME"] != ":memory:":
            Path(config["NAME"]).parent.mkdir(parents=True, exist_ok=True)
        # IMMEDIATE takes the write lock at BEGIN, so two writers queue on the
        # busy timeout instead of failing at once on a read-to-write upgrade.
        config.setdefault("OPTIONS", {}).update(
            {"transaction_mode": "IMMEDIATE", "timeout": 20,
             "init_command": "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL;"}
        )
    return config


DATABASES = {"default": _database()}
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

# The model backend behind a per-(username, address) lockout (decisions/throttle.py).
AUTHENTICATION_BACKENDS = ["decisions.throttle.ThrottledModelBackend"]

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.UserAttributeSimilarityValidator"},
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
    {"NAME": "django.contrib.auth.password_validation.NumericPasswordValidator"},
]

LANGUAGE_CODE = "en-gb"
TIME_ZONE = "UTC"
USE_I18N = True
USE_TZ = True

STATIC_URL = "/static/"
STATIC_ROOT = DATA_DIR / "static"
STATIC_ROOT.mkdir(parents=True, exist_ok=True)  # whitenoise warns on a missing root
STORAGES = {
    "default": {"BACKEND": "django.core.files.storage.FileSystemStorage"},
    "staticfiles": {"BACKEND": "whitenoise.storage.CompressedStaticFilesStorage"},
}
# Serve app static files straight from the packages when collectstatic has not run.
WHITENOISE_USE_FINDERS = True

LOGIN_URL = "/login/"
LOGIN_REDIRECT_URL = "/"
LOGOUT_REDIRECT_URL = "/login/"

DATA_UPLOAD_MAX_MEMORY_SIZE = env_int("MAX_REQUEST_BYTES", 2_621_440, minimum=1024)
FILE_UPLOAD_MAX_MEMORY_SIZE = DATA_UPLOAD_MAX_MEMORY_SIZE

REST_FRAMEWORK = {
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "rest_framework.authentication.SessionAuthentication",
        # DRF's token rules in one raw query instead of an ORM join built per request.
        "decisions.api.authentication.TokenAuthentication",
    ],
    "DEFAULT_PERMISSION_CLASSES": ["rest_framework.permissions.IsAuthenticated"],
    "DEFAULT_SCHEMA_CLASS": "drf_spectacular.openapi.AutoSchema",
    "DEFAULT_PAGINATION_CLASS": "rest_framework.pagination.PageNumberPagination",
    "PAGE_SIZE": 50,
    # JSON only, through our strict parser (size, depth, NaN, duplicate keys, U+0000).
    "DEFAULT_PARSER_CLASSES": ["decisions.api.parsers.StrictJSONParser"],
    "EXCEPTION_HANDLER": "decisions.api.exceptions.api_exception_handler",
    # No OPTIONS self-description (the OpenAPI schema is the description): 405,
    # instead of DRF's metadata probe, which fails on views without a serializer.
    "DEFAULT_METADATA_CLASS": None,
    # Fairness limits, not a security boundary (enforce hard limits at the proxy).
    "DEFAULT_THROTTLE_RATES": {
        "token": env_rate("API_TOKEN_RATE", "20/min"),
        "evaluate": env_rate("API_EVALUATE_RATE", "120/min"),
        "memo": env_rate("API_MEMO_RATE", "30/min"),
    },
}

SPECTACULAR_SETTINGS = {
    "TITLE": "Decision register API",
    "DESCRIPTION": "Model, value, register and sign off capital decisions under uncertainty.",
    "VERSION": "1",
    "SERVE_INCLUDE_SCHEMA": False,
    # Two serializers offer the signing roles and the team roles; name both enums.
    "ENUM_NAME_OVERRIDES": {"SigningRoleEnum": "decisions.models.teams.SIGNING_ROLES",
                            "TeamRoleEnum": "decisions.models.teams.Role"},
}

SECURE_SSL = env_bool("SECURE_SSL", default=False)
SESSION_COOKIE_SECURE = SECURE_SSL
CSRF_COOKIE_SECURE = SECURE_SSL
SECURE_SSL_REDIRECT = SECURE_SSL
# The load balancer probes over plain HTTP inside the private network.
SECURE_REDIRECT_EXEMPT = [r"^healthz$"]
SECURE_HSTS_SECONDS = 31_536_000 if SECURE_SSL else 0
SECURE_HSTS_INCLUDE_SUBDOMAINS = SECURE_SSL
SECURE_HSTS_PRELOAD = SECURE_SSL
if SECURE_SSL:
    SECURE_PROXY_SSL_HEADER = ("HTTP_X_FORWARDED_PROTO", "https")
SECURE_CONTENT_TYPE_NOSNIFF = True
SECURE_REFERRER_POLICY = "same-origin"
SECURE_CROSS_ORIGIN_OPENER_POLICY = "same-origin"
CSRF_COOKIE_HTTPONLY = True
SESSION_COOKIE_HTTPONLY = True
X_FRAME_OPTIONS = "DENY"

# Shared state for the login throttle (decisions/throttle.py). The default is
# per process; with several app servers set CACHE_URL=db://register_cache (then
# run `manage.py createcachetable`) so that every server counts the same attempts.
_CACHE_URL = os.environ.get("CACHE_URL", "locmem://").strip()
if _CACHE_URL.startswith("db://") and _CACHE_URL[5:]:
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.db.DatabaseCache",
                          "LOCATION": _CACHE_URL[5:]}}
elif _CACHE_URL == "locmem://":
    CACHES = {"default": {"BACKEND": "django.core.cache.backends.locmem.LocMemCache"}}
else:
    raise ImproperlyConfigured(f"CACHE_URL: must be locmem:// or db://TABLE, got {_CACHE_URL!r}")
LOGIN_FAILURE_LIMIT = env_int("LOGIN_FAILURE_LIMIT", 5, minimum=1)
LOGIN_LOCKOUT_SECONDS = env_int("LOGIN_LOCKOUT_SECONDS", 900, minimum=1)

# A retry with the same Idempotency-Key within this many hours replays the first answer
# (decisions/services/idempotency.py); the expiry policy the IETF draft asks servers to publish.
IDEMPOTENCY_KEY_TTL_HOURS = env_int("IDEMPOTENCY_KEY_TTL_HOURS", 24, minimum=1)

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": os.environ.get("LOG_LEVEL", "INFO")},
}
