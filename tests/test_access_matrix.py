"""Every API operation of the schema, tried on another team's objects and anonymously.

T4.1 (BOLA/BFLA matrix) and T4.2 (mass assignment) of the reliability notes, and
the CSV-injection defence of the one CSV export. The operations come from our
own OpenAPI schema, so a new endpoint is covered the day it is added.
"""

import csv
import io
import re

import pytest
from django.core.cache import cache
from drf_spectacular.generators import SchemaGenerator
from rest_framework.test import APIClient

from decisions.models import Decision
from decisions.services import sources
from tests.personas import PASSWORD

pytestmark = pytest.mark.django_db

CLAIM = {"hot": {"good": 0.9, "poor": 0.1}, "cold": {"good": 0.2, "poor": 0.8}}
METHODS = ("get", "post", "put", "patch", "delete")
# Operations about no particular object: another team's user gets only their own
# view of them (checked below by content), anonymous gets 401.
UNSCOPED = {"/api/decisions/", "/api/evaluate/", "/api/portfolio/", "/api/sources/",
            "/api/teams/", "/api/audit/verify/", "/api/token/"}


def _operations():
    schema = SchemaGenerator().get_schema(request=None, public=True)
    return [(path, method) for path, item in schema["paths"].items()
            for method in item if method in METHODS]


@pytest.fixture
def world(people, draft):
    cache.clear()
    source = sources.create_source(actor=people.ana, team=people.team,
                                   name="Tellurion-like survey (invented)", claimed=CLAIM)
    return {"decision_pk": draft.pk, "id": None, "number": 1, "other": 1,
            "username": "vic", "source": source, "draft": draft}


def _url(path, world):
    def fill(match):
        name = match.group(1)
        if name == "id":
            if path.startswith("/api/sources/"):
                return str(world["source"].pk)
            if path.startswith("/api/teams/"):
                return str(world["draft"].team_id)
            return str(world["draft"].pk)
        return str(world[name])
    return re.sub(r"\{(\w+)\}", fill, path)


def test_the_matrix_covers_every_operation():
    ops = _operations()
    assert len(ops) >= 35
    assert all(p.startswith("/api/") for p, _ in ops)


def test_anonymous_clients_get_401_everywhere_but_the_token_endpoint(world):
    client = APIClient()
    for path, method in _operations():
        if path == "/api/token/":
            continue
        r = getattr(client, method)(_url(path, world), {}, format="json")
        assert r.status_code in (401, 403), (method, path, r.status_code)
        assert r.json()["errors"], (method, path)


def test_another_teams_user_gets_no_2xx_on_any_object_and_sees_none_of_its_data(world, people):
    omar = APIClient()
    omar.force_authenticate(people.omar)
    secret_texts = [world["draft"].title, world["source"].name, people.team.name]
    for path, method in _operations():
        url = _url(path, world)
        r = getattr(omar, method)(url, {}, format="json", HTTP_IF_MATCH=world["draft"].etag)
        assert r.status_code < 500, (method, url, r.status_code)
        body = r.content.decode(errors="replace")
        if path in UNSCOPED:
            for text in secret_texts:
                assert text not in body, (method, url, text)
            continue
        assert not 200 <= r.status_code < 300, (method, url, r.status_code, body[:200])
        assert r.status_code in (403, 404), (method, url, r.status_code)
        for text in secret_texts:
            assert text not in body, (method, url, text)
    # and nothing about ana's team changed
    d = Decision.objects.get(pk=world["draft"].pk)
    assert (d.title, d.status, d.lock_version) == (world["draft"].title, "draft",
                                                   world["draft"].lock_version)


@pytest.mark.parametrize("extra", [
    {"owner": "omar"}, {"status": "approved"}, {"lock_version": 99}, {"id": 12345},
    {"etag": '"forged"'}, {"created_at": "2001-01-01T00:00:00Z"},
])
def test_server_owned_fields_cannot_be_mass_assigned_on_create(people, extra):
    ana = APIClient()
    ana.force_authenticate(people.ana)
    r = ana.post("/api/decisions/", {"team": people.team.pk, "title": "mass", **extra},
                 format="json")
    assert r.status_code in (201, 400), r.content
    if r.status_code == 201:
        d = Decision.objects.get(pk=r.json()["id"])
        assert (d.owner, d.status) == (people.ana, "draft")
        assert d.pk != 12345 and d.created_at.year != 2001 and d.lock_version != 99


def test_hashes_and_signer_cannot_be_set_by_a_signing_client(world, people):
    from decisions.services import decisions as svc
    from decisions.services.locking import IF_MATCH_ANY

    svc.submit_version(world["draft"].pk, actor=people.ana, if_match=IF_MATCH_ANY)
    d = Decision.objects.get(pk=world["draft"].pk)
    fred = APIClient()
    fred.force_authenticate(people.fred)
    r = fred.post(f"/api/decisions/{d.pk}/versions/1/signoffs/",
                  {"password": PASSWORD, "role": "financial review", "meaning": "approve",
                   "bound_sha256": "0" * 64, "signer": people.olga.pk,
                   "signer_printed_name": "Someone Else"}, format="json", HTTP_IF_MATCH=d.etag)
    assert r.status_code in (201, 400), r.content
    if r.status_code == 201:
        body = r.json()
        version = d.versions.get(number=1)
        assert body["signer_printed_name"] == "Fred Finance"
        assert version.signoffs.get().bound_sha256 == version.content_sha256
        assert version.signoffs.get().signer == people.fred


def test_the_records_csv_export_neutralises_formula_cells(world, people):
    for note in ["=HYPERLINK(\"http://evil.example\")", "+1+1", "-2+3", "@SUM(A1)", "plain"]:
        sources.add_record(actor=people.ana, source=world["source"], date="2020-01-01",
                           signal="good", state="hot", note=note)
    ana = APIClient()
    ana.force_authenticate(people.ana)
    r = ana.get(f"/api/sources/{world['source'].pk}/records.csv")
    assert r.status_code == 200
    rows = list(csv.reader(io.StringIO(r.content.decode())))
    notes = [row[-1] for row in rows[1:]]
    assert notes == ["'=HYPERLINK(\"http://evil.example\")", "'+1+1", "'-2+3", "'@SUM(A1)", "plain"]
    assert all(not cell or cell[0] not in "=+-@" for row in rows[1:] for cell in row)
