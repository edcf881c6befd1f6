"""The team's portfolio: sums, the calibration of its probabilities, sources vs claims,
computed by the database with a number of queries that does not grow with decisions.

Two invented committed decisions on tests/source_helpers.SURVEY_TABLE (worked
by hand in tests/test_outcomes.py):

- A: the survey said "good" (model P 12/25), the well found "cold" (P 1/4);
- B: the survey said "poor" (P 13/25), gas was kept, the state was "cold"
  (P(cold | poor) = 12/13).

Each branch of each chance node on a realised path is one forecast, 8 in all;
the Brier score (Brier 1950, one-category form) is worked with exact fractions
here, and the binned table and Murphy's partition (Murphy 1973) are compared
with the core's numpy implementation of the same definitions.
"""

from __future__ import annotations

from fractions import Fraction

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.utils import timezone

from decisions.models import Decision, ModelVersion, Outcome, OutcomeForecast, Status
from decisions.services import outcomes, portfolio
from decisions.services.errors import InvalidInput, NotFoundError
from decisions.services.locking import IF_MATCH_ANY
from tests.source_helpers import committed, tellurion_source
from valuation.reliability import brier_decomposition, calibration_table

pytestmark = pytest.mark.django_db

A_PATH = {"study0/signal": "good", "study0/g0/a0": "cold"}
B_PATH = {"study0/signal": "poor", "study0/g1/a1": "cold"}
F = Fraction
FORECASTS = [  # (probability, happened) of A then B
    (F(12, 25), 1), (F(13, 25), 0), (F(3, 4), 0), (F(1, 4), 1),
    (F(13, 25), 1), (F(12, 25), 0), (F(1, 13), 0), (F(12, 13), 1),
]


def _record(people, decision, path, value):
    return outcomes.record_outcome(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                                   path=path, realised_value=value)


@pytest.fixture
def two_outcomes(people):
    a, b = committed(people), committed(people)
    _record(people, a, A_PATH, -1_300_000)
    _record(people, a, A_PATH, -1_200_000)  # a correction: only this one counts
    _record(people, b, B_PATH, 2_450_000)
    return a, b


def test_sums_are_of_the_outcomes_in_force(people, two_outcomes):
    out = portfolio.portfolio(people.vic, people.team)
    (eur,) = out["totals"]
    assert eur["currency"] == "EUR" and eur["decisions"] == 2
    assert eur["expected"] == pytest.approx(2 * 4_320_000)
    assert eur["realised"] == pytest.approx(-1_200_000 + 2_450_000)
    assert eur["realised_minus_expected"] == pytest.approx(1_250_000 - 8_640_000)
    # Mean probability of what happened: (3/25 + 12/25) / 2 = 3/10.
    assert eur["mean_probability_of_what_happened"] == pytest.approx(0.3)
    assert "professional judgment" in out["caution"]


def test_brier_score_and_binned_table_of_the_teams_probabilities(people, two_outcomes):
    cal = portfolio.portfolio(people.ana, people.team)["calibration"]
    assert cal["forecasts"] == 8
    exact = sum((p - o) ** 2 for p, o in FORECASTS) / len(FORECASTS)
    assert cal["brier"] == pytest.approx(float(exact), abs=1e-12)
    probs = [float(p) for p, _ in FORECASTS]
    happened = [o for _, o in FORECASTS]
    core = calibration_table(probs, happened, bins=10)
    assert [row["count"] for row in cal["table"]] == [row["count"] for row in core] \
        == [1, 0, 1, 0, 2, 2, 0, 1, 0, 1]
    for mine, ref in zip(cal["table"], core, strict=True):
        assert mine["lower"] == ref["lower"] and mine["upper"] == ref["upper"]
        assert mine["mean_forecast"] == pytest.approx(ref["mean_forecast"])
        assert mine["observed_frequency"] == pytest.approx(ref["observed_frequency"])
    parts = brier_decomposition(probs, happened)
    for key in ("reliability", "resolution", "uncertainty"):
        assert cal[key] == pytest.approx(parts[key], abs=1e-12)


def test_sources_show_their_calibrated_accuracy_against_the_claim(people):
    tellurion_source(people)
    (src,) = portfolio.portfolio(people.ana, people.team)["sources"]
    hot = src["states"]["hot reservoir"]
    assert src["records"] == 30
    assert (hot["signal"], hot["claimed"]) == ("favourable", 0.85)
    assert hot["observed"] == pytest.approx(8 / 13)
    assert hot["posterior_mean"] == pytest.approx(33 / 46)  # (8.5 + 8) / (10 + 13)
    assert hot["interval_90"][0] < hot["posterior_mean"] < hot["interval_90"][1]


def test_another_team_sees_nothing_and_an_outsider_is_refused(people, two_outcomes):
    other = portfolio.portfolio(people.omar, people.other_team)
    assert other["totals"] == [] and other["calibration"]["forecasts"] == 0
    assert other["calibration"]["brier"] is None
    with pytest.raises(NotFoundError):
        portfolio.portfolio(people.omar, people.team)
    with pytest.raises(NotFoundError):
        portfolio.resolve_team(people.omar, people.team.pk)
    assert portfolio.resolve_team(people.ana, None) == people.team
    with pytest.raises(InvalidInput):
        portfolio.portfolio(people.ana, people.team, bins=0)


def _clone_outcomes(template: Outcome, n: int) -> None:
    """n more committed decisions with outcomes, built directly (the figures only read rows)."""
    version = template.version
    now = timezone.now()
    for i in range(n):
        d = Decision.objects.create(title=f"Clone {i} (invented)", team=template.decision.team,
                                    owner=template.decision.owner, status=Status.COMMITTED,
                                    created_at=now, updated_at=now)
        v = ModelVersion.objects.create(
            decision=d, number=1, canonical_json=version.canonical_json,
            content_sha256=version.content_sha256, results=version.results,
            results_sha256=version.results_sha256, author=version.author, created_at=now)
        o = Outcome.objects.create(
            decision=d, version=v, recorded_by=template.recorded_by, recorded_at=now,
            path=template.path, study_signal=template.study_signal,
            realised_value=template.realised_value, currency=template.currency,
            objective=template.objective, expected_value=template.expected_value,
            path_probability=template.path_probability, walk=template.walk)
        OutcomeForecast.objects.bulk_create(
            OutcomeForecast(outcome=o, node=f.node, branch=f.branch, probability=f.probability,
                            happened=f.happened) for f in template.forecasts.all())


def test_the_number_of_queries_does_not_grow_with_the_number_of_decisions(people):
    tellurion_source(people)
    template = _record(people, committed(people), A_PATH, -1_300_000)
    _clone_outcomes(template, 4)
    with CaptureQueriesContext(connection) as five:
        small = portfolio.portfolio(people.ana, people.team)
    _clone_outcomes(template, 45)
    with CaptureQueriesContext(connection) as fifty:
        large = portfolio.portfolio(people.ana, people.team)
    assert small["totals"][0]["decisions"] == 5 and large["totals"][0]["decisions"] == 50
    assert large["totals"][0]["expected"] == pytest.approx(50 * 4_320_000)
    assert large["calibration"]["forecasts"] == 200
    assert len(fifty.captured_queries) == len(five.captured_queries) <= 8
