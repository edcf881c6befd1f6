"""Optimistic concurrency: ETag on every decision response, 428 without If-Match, 412 stale."""

import threading

import pytest
from django.db import connection

from decisions.models import AuditEvent, Decision
from decisions.services.audit import verify_chain
from tests.dbutil import purge_register

pytestmark = pytest.mark.django_db


def test_responses_carry_the_etag(draft, people, client_for):
    response = client_for(people.vic).get(f"/api/decisions/{draft.pk}/")
    assert response["ETag"] == draft.etag == response.data["etag"]


def test_a_change_without_if_match_gets_428(draft, people, client_for):
    response = client_for(people.ana).post(f"/api/decisions/{draft.pk}/submit/")
    assert response.status_code == 428
    assert response.data["errors"][0]["location"] == "If-Match"
    assert response.data["errors"][0]["message"].startswith("If-Match: required for submit;")


def test_a_stale_if_match_gets_412_and_changes_nothing(draft, people, client_for):
    ana = client_for(people.ana)
    stale = draft.etag
    r = ana.patch(f"/api/decisions/{draft.pk}/", {"title": "first"}, format="json",
                  HTTP_IF_MATCH=stale)
    assert r.status_code == 200 and r["ETag"] != stale
    before = AuditEvent.objects.count()
    r = ana.patch(f"/api/decisions/{draft.pk}/", {"title": "second"}, format="json",
                  HTTP_IF_MATCH=stale)
    assert r.status_code == 412
    assert r.data["code"] == "precondition_failed"
    assert Decision.objects.get(pk=draft.pk).title == "first"
    assert AuditEvent.objects.count() == before


def test_a_weak_etag_never_matches(draft, people, client_for):
    r = client_for(people.ana).post(f"/api/decisions/{draft.pk}/submit/",
                                    HTTP_IF_MATCH=f"W/{draft.etag}")
    assert r.status_code == 412


def test_an_illegal_transition_gets_409_with_the_reason(draft, people, client_for):
    r = client_for(people.ana).post(f"/api/decisions/{draft.pk}/commit/",
                                    HTTP_IF_MATCH=draft.etag)
    assert r.status_code == 409
    assert r.data == {"errors": [{"location": "status", "message":
                      "decision: only an approved decision can be committed, not draft"}],
                      "code": "conflict"}


@pytest.mark.postgres
@pytest.mark.django_db(transaction=True)
def test_twenty_writers_with_one_etag_make_exactly_one_change(people):
    """T3.1 of the reliability notes: 1 success, 19 × 412, one audit event."""
    from rest_framework.test import APIClient

    from decisions.services import decisions as svc

    decision = svc.create_decision(actor=people.ana, team=people.team, title="race")
    etag = decision.etag
    before = AuditEvent.objects.count()
    codes, barrier = [], threading.Barrier(20)

    def writer(i):
        client = APIClient()
        client.force_authenticate(people.ana)
        barrier.wait()
        r = client.patch(f"/api/decisions/{decision.pk}/", {"title": f"t{i}"}, format="json",
                         HTTP_IF_MATCH=etag)
        codes.append(r.status_code)
        connection.close()

    threads = [threading.Thread(target=writer, args=(i,)) for i in range(20)]
    try:
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert sorted(codes) == [200] + [412] * 19
        assert AuditEvent.objects.count() == before + 1
        assert verify_chain().ok
    finally:
        purge_register()
