"""Who may do what: every endpoint, every role, and another team's objects (404)."""

import pytest

from decisions.models import AuditEvent
from tests.personas import PASSWORD, small_table

pytestmark = pytest.mark.django_db

READS = [
    "/api/decisions/{pk}/",
    "/api/decisions/{pk}/versions/",
    "/api/decisions/{pk}/versions/1/",
    "/api/decisions/{pk}/versions/1/diff/1/",
    "/api/decisions/{pk}/versions/1/signoffs/",
    "/api/decisions/{pk}/strategy/",
    "/api/decisions/{pk}/policy/",
    "/api/decisions/{pk}/audit/",
]

WRITES = [
    ("patch", "/api/decisions/{pk}/", {"title": "renamed"}),
    ("post", "/api/decisions/{pk}/versions/", {"document": small_table()}),
    ("post", "/api/decisions/{pk}/submit/", {}),
    ("post", "/api/decisions/{pk}/versions/1/signoffs/",
     {"role": "financial review", "meaning": "approve", "password": PASSWORD}),
    ("post", "/api/decisions/{pk}/strategy/", {"recommended": True}),
    ("post", "/api/decisions/{pk}/commit/", {}),
    ("post", "/api/decisions/{pk}/close/", {}),
    ("put", "/api/decisions/{pk}/policy/", {"requirements": {"operations": 1}}),
]


@pytest.mark.parametrize("url", READS)
@pytest.mark.parametrize("who", ["ana", "fred", "olga", "bea", "vic"])
def test_every_member_of_the_team_can_read(draft, people, client_for, who, url):
    response = client_for(getattr(people, who)).get(url.format(pk=draft.pk))
    assert response.status_code == 200, response.data


@pytest.mark.parametrize("url", READS)
def test_another_team_gets_404_and_no_data(draft, people, client_for, url):
    response = client_for(people.omar).get(url.format(pk=draft.pk))
    assert response.status_code == 404
    assert draft.title not in response.content.decode()


@pytest.mark.parametrize("url", ["/api/decisions/{pk}/", "/api/decisions/999999/"])
def test_a_guessed_id_looks_the_same_as_a_missing_one(draft, people, client_for, url):
    response = client_for(people.omar).get(url.format(pk=draft.pk))
    assert response.status_code == 404
    assert response.data == {"errors": [{"location": "", "message": "Not found."}],
                             "code": "not_found"}


@pytest.mark.parametrize(("method", "url", "body"), WRITES)
def test_another_team_cannot_change_anything(draft, people, client_for, method, url, body):
    before = AuditEvent.objects.count()
    response = getattr(client_for(people.omar), method)(
        url.format(pk=draft.pk), body, format="json", HTTP_IF_MATCH=draft.etag)
    assert response.status_code == 404
    assert AuditEvent.objects.count() == before


@pytest.mark.parametrize(("method", "url", "body"), WRITES)
def test_a_viewer_cannot_change_anything(draft, people, client_for, method, url, body):
    response = getattr(client_for(people.vic), method)(
        url.format(pk=draft.pk), body, format="json", HTTP_IF_MATCH=draft.etag)
    assert response.status_code == 403
    assert "you are 'viewer'" in response.data["errors"][0]["message"]


@pytest.mark.parametrize("url", [*READS, "/api/decisions/", "/api/teams/", "/api/audit/verify/"])
def test_anonymous_requests_are_refused(draft, client_for, url):
    response = client_for(None).get(url.format(pk=draft.pk))
    assert response.status_code in (401, 403)
    assert response.data["code"] == "not_authenticated"


@pytest.mark.parametrize("who", ["fred", "olga", "bea"])
def test_reviewers_cannot_submit_or_commit(draft, people, client_for, who):
    client = client_for(getattr(people, who))
    for url in ("/api/decisions/{pk}/submit/", "/api/decisions/{pk}/commit/"):
        response = client.post(url.format(pk=draft.pk), HTTP_IF_MATCH=draft.etag)
        assert response.status_code == 403


def test_an_analyst_cannot_sign(submitted, people, client_for):
    response = client_for(people.ana).post(
        f"/api/decisions/{submitted.pk}/versions/1/signoffs/",
        {"role": "financial review", "meaning": "approve", "password": PASSWORD},
        format="json", HTTP_IF_MATCH=submitted.etag)
    assert response.status_code == 403


def test_a_reviewer_can_only_sign_in_their_own_role(submitted, people, client_for):
    response = client_for(people.olga).post(
        f"/api/decisions/{submitted.pk}/versions/1/signoffs/",
        {"role": "financial review", "meaning": "approve", "password": PASSWORD},
        format="json", HTTP_IF_MATCH=submitted.etag)
    assert response.status_code == 403
    assert response.data["errors"][0]["message"] == (
        "sign as 'financial review': needs the role 'financial review' in this team; "
        "you are 'operations'")


def test_lists_hold_only_the_users_teams(draft, people, client_for):
    from decisions.services import decisions as svc

    svc.create_decision(actor=people.omar, team=people.other_team, title="Intake (invented)")
    mine = client_for(people.vic).get("/api/decisions/").data["results"]
    theirs = client_for(people.omar).get("/api/decisions/").data["results"]
    assert [d["title"] for d in mine] == ["Heat source (invented)"]
    assert [d["title"] for d in theirs] == ["Intake (invented)"]
    teams = client_for(people.omar).get("/api/teams/").data["results"]
    assert [t["name"] for t in teams] == ["Eastmoor Water Board (invented)"]
    assert client_for(people.omar).get(f"/api/teams/{people.team.pk}/").status_code == 404


def test_an_outsider_cannot_create_a_decision_in_another_team(people, client_for):
    response = client_for(people.omar).post(
        "/api/decisions/", {"team": people.team.pk, "title": "x"}, format="json")
    assert response.status_code == 404


def test_token_authentication_works(people, client_for):
    from rest_framework.test import APIClient

    anonymous = APIClient()
    token = anonymous.post("/api/token/", {"username": "vic", "password": PASSWORD},
                           format="json").data["token"]
    anonymous.credentials(HTTP_AUTHORIZATION=f"Token {token}")
    assert anonymous.get("/api/decisions/").status_code == 200



def test_a_refusal_names_roles_by_their_names_not_their_enum_members(monkeypatch):
    from decisions.models import Role
    from decisions.services import access
    from decisions.services.errors import ForbiddenError

    monkeypatch.setattr(access, "role_of", lambda user, team_id: Role.VIEWER)
    with pytest.raises(ForbiddenError) as info:
        access.require_role(object(), 1, (Role.ANALYST,), "submit")
    assert str(info.value) == "submit: needs the role 'analyst' in this team; you are 'viewer'"


@pytest.mark.parametrize("who", ["ana", "fred", "vic", "omar"])
def test_only_staff_may_walk_the_whole_audit_chain(draft, people, client_for, who):
    # The chain and its problem reports span every team.
    assert client_for(getattr(people, who)).get("/api/audit/verify/").status_code == 403
    response = client_for(people.sam).get("/api/audit/verify/")
    assert response.status_code == 200 and response.data["ok"] is True
