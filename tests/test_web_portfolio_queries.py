"""The portfolio page reads a constant number of queries, whatever the number of decisions.

The service's own count is checked in tests/test_portfolio.py; this checks the whole
page (session, team lookup, service figures, the outcomes listed over time) with 5
and then 50 decisions with outcomes (invented copies of one recorded outcome).
"""

from __future__ import annotations

import re

import pytest
from django.db import connection
from django.test import Client
from django.test.utils import CaptureQueriesContext

from decisions.services import outcomes
from decisions.services.locking import IF_MATCH_ANY
from tests.benchmarks.portfolio_data import clone_outcomes
from tests.source_helpers import committed

pytestmark = pytest.mark.django_db


def test_the_page_reads_the_same_number_of_queries_for_5_and_50_decisions(people):
    decision = committed(people)
    template = outcomes.record_outcome(
        decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
        path={"study0/signal": "good", "study0/g0/a0": "cold"}, realised_value=-1_300_000)
    clone_outcomes(template, 4)
    client = Client()
    client.force_login(people.ana)
    # Counted at once: the next request's request_started signal empties the query log.
    with CaptureQueriesContext(connection) as queries:
        small = client.get("/portfolio/")
    five = [q["sql"] for q in queries.captured_queries]
    clone_outcomes(template, 45)
    with CaptureQueriesContext(connection) as queries:
        large = client.get("/portfolio/")
    fifty = [q["sql"] for q in queries.captured_queries]
    assert small.status_code == large.status_code == 200
    # every copied decision is listed (the table names each; the chart repeats some)
    assert len(set(re.findall(r"Clone \d+ \(invented\)", small.content.decode()))) == 4
    assert len(set(re.findall(r"Clone \d+ \(invented\)", large.content.decode()))) == 45
    assert 0 < len(fifty) == len(five), fifty
