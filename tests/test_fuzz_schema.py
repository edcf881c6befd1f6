"""Property-based fuzzing of every API operation from our own OpenAPI schema (schemathesis).

T4.4 of the reliability notes, in-process against the WSGI application (no
server, no network): for every operation, generated requests (valid and
invalid, including path ids, query strings, If-Match headers and bodies) are
sent with the tokens of two users of different teams and without any token.
Every answer must be below 500, and every 4xx must carry our JSON error body
``{"errors": [{"location", "message"}], "code"}``.

Examples per operation: ``FUZZ_EXAMPLES`` (default 6, derandomized so that a run
is repeatable). Marked slow (out of the default run); run it with
``pytest -m slow tests/test_fuzz_schema.py`` (deeper: ``FUZZ_EXAMPLES=100``).
"""

import json
import os

import pytest
from django.core.cache import cache
from django.core.signals import request_finished, request_started
from django.db import close_old_connections
from hypothesis import HealthCheck, settings
from rest_framework.authtoken.models import Token

schemathesis = pytest.importorskip("schemathesis")

from drf_spectacular.generators import SchemaGenerator  # noqa: E402

from decisions.wsgi import application  # noqa: E402

EXAMPLES = int(os.environ.get("FUZZ_EXAMPLES", "6"))
STATS = {"operations": set(), "requests": 0, "by_status": {}}

schema = schemathesis.openapi.from_dict(SchemaGenerator().get_schema(request=None, public=True))
schema.app = application


@pytest.fixture
def fuzz_tokens(people, draft, settings):
    # Throttles would answer 429 to a fuzzer, which is right but hides everything else.
    settings.REST_FRAMEWORK = {**settings.REST_FRAMEWORK, "DEFAULT_THROTTLE_RATES": {
        "token": "100000/min", "evaluate": "100000/min"}}
    cache.clear()
    # The WSGI handler closes connections at the end of each request; the test's
    # transaction must survive the whole run (Django's own test client does the same).
    request_started.disconnect(close_old_connections)
    request_finished.disconnect(close_old_connections)
    try:
        yield {"ana": Token.objects.create(user=people.ana).key,
               "omar": Token.objects.create(user=people.omar).key, "anonymous": None}
    finally:
        request_started.connect(close_old_connections)
        request_finished.connect(close_old_connections)


@pytest.mark.slow  # 45-130 s for 6 examples x 40 operations x 3 callers on 2 cores
@pytest.mark.django_db
@schema.parametrize()
@settings(max_examples=EXAMPLES, deadline=None, derandomize=True, database=None,
          suppress_health_check=list(HealthCheck))
def test_no_operation_answers_500_and_every_4xx_is_a_json_error(case, fuzz_tokens):
    for who, token in fuzz_tokens.items():
        headers = {"Authorization": f"Token {token}"} if token else {}
        response = case.call(headers=headers)
        STATS["operations"].add(f"{case.method} {case.path}")
        STATS["requests"] += 1
        STATS["by_status"][response.status_code] = STATS["by_status"].get(
            response.status_code, 0) + 1
        where = f"{who}: {case.method} {case.formatted_path} -> {response.status_code}"
        assert response.status_code < 500, f"{where}\n{case.as_curl_command()}"
        if 400 <= response.status_code < 500:
            content_type = (response.headers.get("content-type") or [""])[0]
            assert content_type.startswith("application/json"), \
                f"{where}: {content_type} {response.content[:200]!r}"
            body = json.loads(response.content)
            assert isinstance(body.get("errors"), list) and body["errors"], where
            assert all(set(e) == {"location", "message"} for e in body["errors"]), where
            assert isinstance(body.get("code"), str), where


def test_the_fuzzer_covers_every_operation_of_the_schema():
    raw = schema.raw_schema["paths"]
    methods = {"get", "post", "put", "patch", "delete"}
    total = sum(1 for item in raw.values() for m in item if m in methods)
    ops = [r.ok() for r in schema.get_all_operations()]
    assert len(ops) == total >= 25
