"""Portfolio page in the browser face (Django test client).

One committed decision (tests/source_helpers.SURVEY_TABLE, invented, hand-worked
in tests/test_outcomes.py) with an outcome: the survey said "good" (model
P = 12/25), the well found a cold reservoir (P(cold | good) = 1/4). Four
forecasts on that path: 12/25 (happened), 13/25 (not), 3/4 for hot (not),
1/4 for cold (happened); Brier (Brier 1950, one-category form) checked below
with exact fractions.
"""

from __future__ import annotations

from fractions import Fraction

import pytest
from django.template.defaultfilters import date as date_filter
from django.urls import reverse

from decisions.services import outcomes
from decisions.services.locking import IF_MATCH_ANY
from tests.source_helpers import committed, survey_source
from tests.webutil import client_as, html

pytestmark = pytest.mark.django_db

URL = "/portfolio/"


@pytest.fixture
def reviewed(people):
    decision = committed(people)
    outcomes.record_outcome(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                            path={"study0/signal": "good", "study0/g0/a0": "cold"},
                            realised_value=-1_300_000)
    return decision


def test_the_route_is_named():
    assert reverse("web-portfolio") == URL


def test_anonymous_is_sent_to_sign_in(db):
    response = client_as().get(URL)
    assert response.status_code == 302 and response["Location"].startswith("/login/?next=")


@pytest.mark.parametrize("who", ["ana", "fred", "olga", "bea", "vic"])
def test_every_member_reads_the_portfolio(reviewed, people, who):
    page = html(client_as(getattr(people, who)).get(URL))
    assert reviewed.title in page
    assert "Figures are model outputs resting on the stated assumptions" in page


def test_user_of_another_team_gets_404_for_that_team_and_sees_only_their_own(reviewed, people):
    client = client_as(people.omar)
    assert client.get(f"{URL}?team={people.team.pk}").status_code == 404
    assert client.get(f"{URL}?team=nonsense").status_code == 404
    page = html(client.get(URL))
    assert reviewed.title not in page and people.other_team.name in page


def test_expected_vs_realised_sums_and_the_list_over_time(reviewed, people):
    page = html(client_as(people.vic).get(URL))
    totals = page.split('id="totals-h"')[1].split('id="calib-h"')[0]
    assert "4,320,000 EUR" in totals  # expected at approval (hand-worked)
    assert "−1,300,000 EUR" in totals and "−5,620,000 EUR" in totals
    assert f"{float(Fraction(3, 25)):.3f}" in totals  # P(what happened) = 3/25
    assert reverse("web-review", args=[reviewed.pk]) in totals
    assert "<svg" in totals


def test_calibration_brier_and_table_match_exact_fractions(reviewed, people):
    page = html(client_as(people.vic).get(URL))
    section = page.split('id="calib-h"')[1].split('id="sources-h"')[0]
    forecasts = [(Fraction(12, 25), 1), (Fraction(13, 25), 0), (Fraction(3, 4), 0),
                 (Fraction(1, 4), 1)]
    brier = sum((p - o) ** 2 for p, o in forecasts) / len(forecasts)
    assert f"<dd>{float(brier):.3f}</dd>" in section
    assert "<dd>4</dd>" in section
    # Ten equal bins: 0.25 and 0.48 fall in [0.2, 0.3) and [0.4, 0.5), 0.52 in [0.5, 0.6),
    # 0.75 in [0.7, 0.8): one forecast each; observed 1, 1, 0, 0.
    assert '<td>0.20 – 0.30</td><td class="num">1</td><td class="num">0.250</td>' \
           '<td class="num">1.000</td>' in section
    assert '<td>0.70 – 0.80</td><td class="num">1</td><td class="num">0.750</td>' \
           '<td class="num">0.000</td>' in section
    assert "<svg" in section
    page = html(client_as(people.vic).get(f"{URL}?team={people.team.pk}&bins=2"))
    section = page.split('id="calib-h"')[1].split('id="sources-h"')[0]
    assert '<td>0.00 – 0.50</td><td class="num">2</td>' in section


def test_sources_are_compared_with_their_claims(reviewed, people):
    source = survey_source(people)
    page = html(client_as(people.vic).get(URL))
    section = page.split('id="sources-h"')[1]
    assert reverse("web-source", args=[source.pk]) in section
    # No records: the calibrated accuracy is the claim (0.9 for "good" when hot).
    assert '<td class="num">0.900</td><td class="num">—</td><td class="num">0.900</td>' in section


def test_a_team_without_outcomes_says_so(people):
    page = html(client_as(people.ana).get(URL))
    assert "No outcome recorded yet." in page and "No forecasts yet" in page



def test_the_over_time_table_lists_the_most_recent_outcomes_and_totals_them_all():
    import datetime
    from types import SimpleNamespace

    from decisions.web import presenters_sources as pres

    outcomes = [SimpleNamespace(currency="EUR", expected_value=10.0, realised_value=12.0,
                                recorded_at=datetime.datetime(2026, 1, 1),
                                decision=SimpleNamespace(pk=i, title=f"D{i}"),
                                path_probability=0.5)
                for i in range(pres.HISTORY_ROWS + 5)]
    data = {"totals": [], "calibration": {"forecasts": 0, "table": []}, "sources": []}
    view = pres.portfolio_view(data, outcomes)
    assert len(view["history"]) == pres.HISTORY_ROWS
    assert view["history_hidden"] == 5
    # 105 outcomes of 10 expected each: the last row's running total counts them all.
    assert view["history"][-1]["cum_expected"].startswith("1,050")


def test_running_totals_count_outcomes_too_old_to_be_listed(reviewed, people, monkeypatch):
    from decisions.web import views_portfolio

    second = committed(people)
    outcomes.record_outcome(second.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                            path={"study0/signal": "good", "study0/g0/a0": "cold"},
                            realised_value=-1_000_000)
    monkeypatch.setattr(views_portfolio, "HISTORY_ROWS", 1)
    page = html(client_as(people.vic).get(URL))
    over_time = page.split('class="history"')[1].split("</table>")[0]
    assert "1 earlier outcomes are in the running totals" in over_time
    # Two outcomes of 4,320,000 expected each (hand-worked above): the one listed row
    # carries the running total of both, and realised -1,300,000 - 1,000,000.
    assert "8,640,000 EUR" in over_time and "−2,300,000 EUR" in over_time


def test_an_over_time_row_shows_the_day_recorded_and_links_to_the_review(reviewed, people):
    outcome = reviewed.outcomes.get()
    page = html(client_as(people.vic).get(URL))
    over_time = page.split('class="history"')[1].split("</table>")[0]
    # The day as Django's own date filter shows it in the site's time zone.
    day = date_filter(outcome.recorded_at, "Y-m-d")
    link = reverse("web-review", args=[reviewed.pk])
    assert f'<tr><td>{day}</td><th scope="row"><a href="{link}">{reviewed.title}</a></th>' \
        in over_time
