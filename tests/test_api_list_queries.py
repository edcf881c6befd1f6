"""The decision list answers a page in a fixed number of queries, however many decisions."""

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from decisions.services import decisions as svc
from decisions.services import signoff
from decisions.services.locking import IF_MATCH_ANY
from tests.personas import PASSWORD, small_table

pytestmark = pytest.mark.django_db


def _make_decisions(people, count):
    for i in range(count):
        decision = svc.create_decision(actor=people.ana, team=people.team, title=f"D{i}",
                                       policy={"financial review": 1, "operations": 1})
        svc.save_version(decision.pk, actor=people.ana, document=small_table(),
                         change_note="v1", if_match=IF_MATCH_ANY)
        svc.submit_version(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY)
        signoff.sign(decision.pk, 1, actor=people.fred, password=PASSWORD,
                     role="financial review", meaning="approve", if_match=IF_MATCH_ANY)


def _list_queries(client):
    with CaptureQueriesContext(connection) as captured:
        response = client.get("/api/decisions/")
    assert response.status_code == 200
    return len(captured.captured_queries), response


def test_list_query_count_does_not_grow_with_the_number_of_decisions(people, client_for):
    client = client_for(people.ana)
    _make_decisions(people, 2)
    few, _ = _list_queries(client)
    _make_decisions(people, 8)
    many, response = _list_queries(client)
    assert many == few
    first = response.data["results"][0]
    assert first["current_version"]["signoffs"][0]["signer_printed_name"] == "Fred Finance"
    assert first["policy"]["roles"]["financial review"]["signed"] == 1
    assert first["policy"]["met"] is False
