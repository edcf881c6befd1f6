"""Shared fixtures: the personas, API clients, a draft decision, database helpers."""

from __future__ import annotations

import os

import pytest
from django.db import connection
from hypothesis import settings as hypothesis_settings
from rest_framework.test import APIClient

from decisions.services import decisions as svc
from decisions.services.locking import IF_MATCH_ANY
from tests.personas import SMALL_TABLE, build_personas

# CI sets HYPOTHESIS_PROFILE=ci: the same examples on every run, so that a landing is not
# decided by which examples a random seed drew. A local run explores new examples each
# time (the default profile); what it finds belongs in an issue, not in a red CI.
hypothesis_settings.register_profile("ci", derandomize=True)
hypothesis_settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "default"))


# The test process is no app server: importing decisions.wsgi (tests/test_fuzz_schema.py)
# must not freeze the garbage collector's objects for the rest of the run
# (decisions/serving.py; tests/test_serving.py turns it back on where it is the subject).
os.environ["GC_FREEZE"] = "false"

@pytest.fixture(autouse=True)
def _skip_postgres_only(request):
    if request.node.get_closest_marker("postgres") and connection.vendor != "postgresql":
        pytest.skip("needs PostgreSQL (set DATABASE_URL)")


@pytest.fixture(autouse=True)
def _fast_password_hashing(settings):
    # The default hasher is deliberately slow; tests only need it to work.
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]


@pytest.fixture(autouse=True)
def _fresh_throttle_counters():
    # Fairness throttles count in the per-process cache; each test starts from zero
    # so that one test's requests never spend another's allowance.
    from django.core.cache import caches
    from django.core.cache.backends.locmem import LocMemCache

    backend = caches["default"]
    if isinstance(backend, LocMemCache):  # a database cache is emptied with the database
        backend.clear()


@pytest.fixture
def people(db):
    return build_personas()


@pytest.fixture
def client_for():
    """``client_for(user)``: an API client authenticated as ``user`` (None: anonymous)."""

    def make(user=None):
        client = APIClient()
        if user is not None:
            client.force_authenticate(user)
        return client

    return make


@pytest.fixture
def draft(people):
    """A draft decision of ana's team with a two-role policy and version 1 saved."""
    decision = svc.create_decision(actor=people.ana, team=people.team,
                                   title="Heat source (invented)",
                                   policy={"financial review": 1, "operations": 1})
    svc.save_version(decision.pk, actor=people.ana, document=SMALL_TABLE,
                     change_note="first model", if_match=IF_MATCH_ANY)
    decision.refresh_from_db()
    return decision


@pytest.fixture
def submitted(draft, people):
    svc.submit_version(draft.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    draft.refresh_from_db()
    return draft
