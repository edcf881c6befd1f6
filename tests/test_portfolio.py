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

import datetime as dt
import math
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
from valuation.reliability import brier_decomposition, brier_score, calibration_table

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


# ---- the figures against a plain recomputation ----------------------------------------------
#
# An invented team: six outcomes in force in two currencies, recorded a day apart, and one
# earlier outcome that a correction superseded (it must count nowhere). Each outcome's
# forecasts are (probability as written, happened). The reference below recomputes every
# figure from these rows with exact fractions of the probabilities as written, straight
# from the definitions: Brier 1950 (one-category form), Murphy 1973 (partition by distinct
# value), equal-width bins [lower, upper) with 1 in the last (common practice).

INVENTED = [  # currency, expected, realised, path probability, day, forecasts
    ("EUR", 100.0, 130.0, 0.3, 1, [("0.3", 1), ("0.7", 0)]),
    ("EUR", 200.0, 150.5, 0.2, 2, [("0.2", 1), ("0.8", 0), ("0.25", 0), ("0.75", 1)]),
    ("GBP", 50.0, 40.0, 0.5, 3, [("0.5", 1), ("0.5", 0)]),
    ("EUR", -80.0, -100.0, 1.0, 4, [("1", 1), ("0", 0)]),  # the correction
    ("GBP", 75.25, 90.0, 0.1, 5, [("0.1", 1), ("0.9", 0)]),
    ("EUR", 10.0, 0.0, 0.45, 6, [("0.45", 0), ("0.55", 1)]),
]
SUPERSEDED = ("EUR", 999.0, 999.0, 0.6, 0, [("0.6", 1), ("0.4", 0)])


def _row(template: Outcome, decision, spec, *, supersedes=None) -> Outcome:
    currency, expected, realised, path_p, day, forecasts = spec
    when = template.recorded_at + dt.timedelta(days=day)
    outcome = Outcome.objects.create(
        decision=decision, version=template.version, supersedes=supersedes,
        recorded_by=template.recorded_by, recorded_at=when, path=template.path,
        study_signal=template.study_signal, realised_value=realised, currency=currency,
        objective="max", expected_value=expected, path_probability=path_p, walk=template.walk)
    OutcomeForecast.objects.bulk_create(
        OutcomeForecast(outcome=outcome, node="n", branch=str(i), probability=float(p),
                        happened=float(o)) for i, (p, o) in enumerate(forecasts))
    return outcome


@pytest.fixture
def invented_team(people):
    """The invented rows above, in the other team (alone there, so nothing else counts)."""
    template = _record(people, committed(people), A_PATH, -1_300_000)
    outcomes_in_force = []
    for spec in INVENTED:
        decision = Decision.objects.create(
            title=f"Invented day {spec[4]}", team=people.other_team, owner=people.omar,
            status=Status.COMMITTED, created_at=template.recorded_at,
            updated_at=template.recorded_at)
        first = _row(template, decision, SUPERSEDED) if spec[4] == 4 else None
        outcomes_in_force.append(_row(template, decision, spec, supersedes=first))
    return outcomes_in_force


def _reference_calibration(forecasts: list[tuple[str, int]], bins: int) -> dict:
    p = [Fraction(text) for text, _ in forecasts]
    o = [happened for _, happened in forecasts]
    n = len(p)
    base = Fraction(sum(o), n)
    by_value: dict[Fraction, list[int]] = {}
    for pi, oi in zip(p, o, strict=True):
        by_value.setdefault(pi, []).append(oi)
    table = []
    for b in range(bins):
        members = [(pi, oi) for pi, oi in zip(p, o, strict=True)
                   if min(math.floor(pi * bins), bins - 1) == b]
        table.append((len(members),
                      sum(pi for pi, _ in members) / len(members) if members else None,
                      Fraction(sum(oi for _, oi in members), len(members)) if members else None))
    return {
        "forecasts": n,
        "brier": sum((pi - oi) ** 2 for pi, oi in zip(p, o, strict=True)) / n,
        "reliability": sum(len(v) * (f - Fraction(sum(v), len(v))) ** 2
                           for f, v in by_value.items()) / n,
        "resolution": sum(len(v) * (Fraction(sum(v), len(v)) - base) ** 2
                          for v in by_value.values()) / n,
        "uncertainty": base * (1 - base),
        "table": table,
    }


def _check_calibration(cal: dict, forecasts: list[tuple[str, int]], bins: int) -> None:
    ref = _reference_calibration(forecasts, bins)
    assert cal["forecasts"] == ref["forecasts"]
    for key in ("brier", "reliability", "resolution", "uncertainty"):
        assert cal[key] == pytest.approx(float(ref[key]), abs=1e-12), key
    assert len(cal["table"]) == bins
    for b, (row, (count, mean, observed)) in enumerate(zip(cal["table"], ref["table"],
                                                           strict=True)):
        assert (row["lower"], row["upper"], row["count"]) == (b / bins, (b + 1) / bins, count)
        if count:
            assert row["mean_forecast"] == pytest.approx(float(mean), abs=1e-12)
            assert row["observed_frequency"] == pytest.approx(float(observed), abs=1e-12)
        else:
            assert row["mean_forecast"] is None and row["observed_frequency"] is None


@pytest.mark.parametrize("bins", [1, 3, 10, 100])
def test_calibration_equals_a_recomputation_from_the_definitions(people, invented_team, bins):
    cal = portfolio.portfolio(people.omar, people.other_team, bins=bins)["calibration"]
    _check_calibration(cal, [f for spec in INVENTED for f in spec[5]], bins)


def test_totals_equal_a_recomputation_over_the_outcomes_in_force(people, invented_team):
    totals = portfolio.portfolio(people.omar, people.other_team)["totals"]
    assert [t["currency"] for t in totals] == ["EUR", "GBP"]
    for t in totals:
        mine = [s for s in INVENTED if s[0] == t["currency"]]
        assert t["decisions"] == len(mine)
        assert t["expected"] == pytest.approx(sum(s[1] for s in mine), abs=1e-9)
        assert t["realised"] == pytest.approx(sum(s[2] for s in mine), abs=1e-9)
        assert t["realised_minus_expected"] == pytest.approx(
            sum(s[2] - s[1] for s in mine), abs=1e-9)
        assert t["mean_probability_of_what_happened"] == pytest.approx(
            sum(s[3] for s in mine) / len(mine), abs=1e-12)


@pytest.mark.parametrize("limit", [1, 2, 4, 6, 50])
def test_recent_outcomes_and_the_sums_of_the_earlier_ones(people, invented_team, limit):
    out = portfolio.portfolio(people.omar, people.other_team, recent=limit)["recent"]
    listed, earlier_specs = INVENTED[-limit:], INVENTED[:-limit]
    assert [o.pk for o in out["outcomes"]] == [o.pk for o in invented_team[-limit:]]
    assert [(o.currency, o.expected_value, o.realised_value) for o in out["outcomes"]] == \
        [(s[0], s[1], s[2]) for s in listed]
    assert out["earlier_count"] == len(earlier_specs)
    expected_earlier = {}
    for currency in sorted({s[0] for s in earlier_specs}):
        mine = [s for s in earlier_specs if s[0] == currency]
        expected_earlier[currency] = (sum(s[1] for s in mine), sum(s[2] for s in mine))
    assert out["earlier"].keys() == expected_earlier.keys()
    for currency, (expected, realised) in expected_earlier.items():
        assert out["earlier"][currency] == (pytest.approx(expected, abs=1e-9),
                                            pytest.approx(realised, abs=1e-9))


def test_recent_is_only_given_when_asked_and_must_be_a_small_whole_number(people, two_outcomes):
    assert "recent" not in portfolio.portfolio(people.ana, people.team)
    for bad in (-1, portfolio.MAX_RECENT + 1, True, 2.0, "5"):
        with pytest.raises(InvalidInput) as caught:
            portfolio.portfolio(people.ana, people.team, recent=bad)
        assert caught.value.problems[0][0] == "recent"


def test_grouped_calibration_equals_the_cores_scores_forecast_by_forecast():
    # The core's numpy implementation of the same definitions (valuation.forecast_scores),
    # fed every forecast one by one; the service sees only (p, count, happened) per value.
    forecasts = [(0.3, 1), (0.3, 0), (0.7, 0), (0.1, 1), (0.1, 0), (0.1, 0), (1.0, 1),
                 (0.0, 0), (0.45, 1), (0.55, 0), (0.2, 1), (0.8, 0)]
    groups: dict[float, list[int]] = {}
    for p, o in forecasts:
        groups.setdefault(p, []).append(o)
    rows = [(p, len(v), float(sum(v))) for p, v in groups.items()]
    probs, happened = [p for p, _ in forecasts], [o for _, o in forecasts]
    parts = brier_decomposition(probs, happened)
    for bins in (1, 4, 10, 20):
        cal = portfolio.calibration_from_groups(rows, bins)
        assert cal["forecasts"] == len(forecasts)
        assert cal["brier"] == pytest.approx(brier_score(probs, happened), abs=1e-12)
        for key in ("reliability", "resolution", "uncertainty"):
            assert cal[key] == pytest.approx(parts[key], abs=1e-12)
        for mine, ref in zip(cal["table"], calibration_table(probs, happened, bins=bins),
                             strict=True):
            assert mine["count"] == ref["count"]
            assert mine["mean_forecast"] == pytest.approx(ref["mean_forecast"], abs=1e-12)
            assert mine["observed_frequency"] == pytest.approx(ref["observed_frequency"],
                                                               abs=1e-12)
    empty = portfolio.calibration_from_groups([], 10)
    assert empty["forecasts"] == 0 and empty["brier"] is None and "reliability" not in empty
