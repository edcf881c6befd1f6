"""Recording outcomes and the post-hoc review, on a hand-worked invented example.

The example (tests/source_helpers.SURVEY_TABLE, invented), worked by hand with
exact fractions:

- prior P(hot) = 2/5; Deep well pays 9,000,000 (hot) or -1,000,000 (cold);
  Stay on gas 2,500,000 either way; the Survey costs 100,000 and reads
  "good" with P = 9/10 (hot), 1/5 (cold).
- P(good) = 2/5 * 9/10 + 3/5 * 1/5 = 12/25; P(hot | good) = (9/25) / (12/25) = 3/4,
  so after "good" the well is worth 3/4 * 9M - 1/4 * 1M = 6,500,000 > 2,500,000;
  after "poor" (P = 13/25, P(hot | poor) = 1/13) the well is worth -3M/13 < gas.
- With the survey: 12/25 * 6.5M + 13/25 * 2.5M - 0.1M = 4,320,000; without:
  max(3,000,000, 2,500,000) = 3,000,000. The recommended plan buys the survey.
- What happened (invented): the survey said "good", the well was drilled, the
  reservoir was cold. The model gave this path P = 12/25 * 1/4 = 3/25.
- Hindsight (cold known): best plan is gas, 2,500,000; the chosen plan under
  "cold" is -1,000,000 - 100,000 = -1,100,000; regret 3,600,000.
"""

from __future__ import annotations

from fractions import Fraction

import pytest
from django.db import DatabaseError, transaction

from decisions.models import AuditEvent, Outcome, StudyRecord
from decisions.services import outcomes, sources
from decisions.services.errors import ConflictError, ForbiddenError, InvalidInput, NotFoundError
from decisions.services.locking import IF_MATCH_ANY
from tests.source_helpers import approve_and_commit, committed, draft_with, survey_source, survey_table

pytestmark = pytest.mark.django_db

GOOD_THEN_COLD = {"study0/signal": "good", "study0/g0/a0": "cold"}


def _record(people, decision, path=GOOD_THEN_COLD, value=-1_300_000, **kw):
    return outcomes.record_outcome(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                                   path=path, realised_value=value, **kw)


def test_review_figures_match_the_hand_worked_example(people):
    decision = committed(people)
    _record(people, decision, note="invented: cold reservoir")
    r = outcomes.review(decision)
    expected = Fraction(12, 25) * Fraction(13, 2) * 10**6 + Fraction(13, 25) * Fraction(5, 2) * 10**6 \
        - 100_000  # hand-worked, see the module notes
    assert r["expected_at_approval"] == pytest.approx(float(expected)) == pytest.approx(4_320_000)
    assert r["realised"] == -1_300_000
    assert r["realised_minus_expected"] == pytest.approx(-1_300_000 - 4_320_000)
    assert r["probability_of_what_happened"] == pytest.approx(float(Fraction(3, 25)), abs=1e-12)
    h = r["hindsight"]
    assert h["best_plan_value"] == pytest.approx(2_500_000)
    assert h["chosen_plan_value"] == pytest.approx(-1_100_000)
    assert h["regret"] == pytest.approx(3_600_000)
    assert "Stay on gas" in h["best_plan"]
    sound = r["sound_given_what_was_known"]
    assert sound["recommended_plan_taken"] is True
    assert sound["value_given_up_at_approval"] == 0
    assert sound["statement"].startswith("Given what was known at approval, the chosen plan had "
                                         "the best expected value (4,320,000 EUR)")
    assert [s["node"] for s in r["path"]] == ["study-choice", "study0/signal", "study0/g0/decide",
                                              "study0/g0/a0"]
    assert "professional judgment" in r["caution"]


def test_team_plan_is_judged_by_the_value_it_gave_up(people):
    decision = committed(people, recommended=False, alternative="Stay on gas",
                         justification="invented: the board keeps the capital")
    _record(people, decision, path={"a1": "hot"}, value=2_400_000)
    r = outcomes.review(decision)
    # Chosen plan at approval: gas, 2,500,000; the best plan 4,320,000 gave up 1,820,000.
    assert r["expected_at_approval"] == pytest.approx(2_500_000)
    assert r["sound_given_what_was_known"]["value_given_up_at_approval"] == pytest.approx(1_820_000)
    assert "gave up 1,820,000 EUR" in r["sound_given_what_was_known"]["statement"]
    assert r["probability_of_what_happened"] == pytest.approx(0.4)
    # Hindsight "hot": the well (9,000,000) beats gas (2,500,000) by 6,500,000.
    assert r["hindsight"]["regret"] == pytest.approx(6_500_000)


def test_recording_an_outcome_writes_one_audit_event_and_forecast_rows(people):
    decision = committed(people)
    before = AuditEvent.objects.count()
    outcome = _record(people, decision)
    assert AuditEvent.objects.count() == before + 1
    event = AuditEvent.objects.latest("seq")
    assert event.action == "outcome.record" and event.payload["outcome_id"] == outcome.pk
    forecasts = {(f.node, f.branch): (f.probability, f.happened) for f in outcome.forecasts.all()}
    assert forecasts == {
        ("study0/signal", "good"): (pytest.approx(0.48), 1.0),
        ("study0/signal", "poor"): (pytest.approx(0.52), 0.0),
        ("study0/g0/a0", "hot"): (pytest.approx(0.75), 0.0),
        ("study0/g0/a0", "cold"): (pytest.approx(0.25), 1.0),
    }
    assert outcome.study_signal == "good"
    decision.refresh_from_db()
    assert decision.status == "committed"  # the lifecycle has no outcome transition


def test_outcome_of_a_sourced_study_adds_one_record_to_the_source(people):
    source = survey_source(people)
    decision = draft_with(people, survey_table())
    sources.apply_source_to_study(actor=people.ana, decision=decision, study_name="Survey",
                                  source=source, mode="claimed", if_match=IF_MATCH_ANY)
    approve_and_commit(people, decision)
    _record(people, decision)
    (record,) = StudyRecord.objects.filter(source=source)
    assert (record.signal, record.state, record.origin, record.decision_id) == (
        "good", "cold", "outcome", decision.pk)
    _record(people, decision, value=-1_250_000, note="correction")  # a correction adds none
    assert StudyRecord.objects.filter(source=source).count() == 1


def test_a_correction_supersedes_the_outcome_and_both_stay_on_record(people):
    decision = committed(people)
    first = _record(people, decision)
    second = _record(people, decision, value=-1_250_000, note="final accounts")
    assert second.supersedes_id == first.pk
    assert outcomes.current_outcome(decision).pk == second.pk
    assert outcomes.review(decision)["realised"] == -1_250_000
    assert outcomes.review(decision)["outcome"]["corrections"] == 1
    assert Outcome.objects.filter(decision=decision).count() == 2


def test_the_database_refuses_to_change_an_outcome(people):
    decision = committed(people)
    outcome = _record(people, decision)
    with pytest.raises(DatabaseError), transaction.atomic():
        Outcome.objects.filter(pk=outcome.pk).update(realised_value=0)


def test_outcome_is_refused_before_the_decision_is_committed(people):
    decision = draft_with(people, survey_table())
    with pytest.raises(ConflictError) as err:
        _record(people, decision)
    assert str(err.value) == ("status: decision: an outcome is recorded for a committed decision, "
                              "not a draft one")


@pytest.mark.parametrize(("path", "problems"), [
    ({"nowhere": "hot"}, [("path.nowhere", "no chance node with this id (chance nodes: "
                                           "study0/signal, study0/g1/a1, study0/g1/a0, study0/g0/a1, "
                                           "study0/g0/a0, a1, a0)")]),
    ({"study0/signal": "excellent"}, [("path.study0/signal",
                                       "unknown branch 'excellent' (branches: good, poor)")]),
    ({"study0/signal": "good"}, [("path.study0/g0/a0", "the path passes the chance node 'State'; "
                                                       "record which branch it took (branches: hot, cold)")]),
    ({"study0/signal": "good", "study0/g0/a0": "cold", "a0": "hot"},
     [("path", "records chance nodes under more than one branch of the decision 'Study' "
               "(No study, Survey); record only the path actually taken")]),
    ({"study0/signal": "good", "study0/g0/a0": "cold", "study0/g1/a1": "hot"},
     [("path.study0/g1/a1", "is not on the path the other recorded nodes describe")]),
    ([], [("path", "must be an object mapping chance node ids to the branch taken")]),
], ids=["unknown node", "unknown branch", "missing step", "two branches", "off the path",
        "not a mapping"])
def test_bad_paths_are_refused_with_the_node_and_rule(people, path, problems):
    decision = committed(people)
    with pytest.raises(InvalidInput) as err:
        _record(people, decision, path=path)
    assert err.value.problems == problems
    assert not Outcome.objects.exists()


def test_study_signal_must_agree_with_the_path(people):
    decision = committed(people)
    with pytest.raises(InvalidInput) as err:
        _record(people, decision, study_signal="poor")
    assert err.value.problems == [("study_signal", "the path records the signal 'good', not 'poor'")]
    with pytest.raises(InvalidInput) as err:
        _record(people, decision, path={"a0": "hot"}, study_signal="good")
    assert err.value.problems == [("study_signal", "no study was bought on the recorded path; "
                                                   "leave it empty")]


@pytest.mark.parametrize("value", [float("nan"), float("inf"), "12", True, None])
def test_realised_value_must_be_a_finite_number(people, value):
    decision = committed(people)
    with pytest.raises(InvalidInput) as err:
        _record(people, decision, value=value)
    assert err.value.problems[0][0] == "realised_value"


def test_only_analysts_of_the_team_record_outcomes(people):
    decision = committed(people)
    with pytest.raises(ForbiddenError):
        outcomes.record_outcome(decision.pk, actor=people.vic, if_match=IF_MATCH_ANY,
                                path=GOOD_THEN_COLD, realised_value=0)
    with pytest.raises(NotFoundError):
        outcomes.record_outcome(decision.pk, actor=people.omar, if_match=IF_MATCH_ANY,
                                path=GOOD_THEN_COLD, realised_value=0)


def test_review_without_an_outcome_is_not_found(people):
    with pytest.raises(NotFoundError) as err:
        outcomes.review(committed(people))
    assert str(err.value) == "outcome: none recorded for this decision yet"


# An invented general tree, worked by hand: Drill costs 100 and then pays 500 (hot, 0.4)
# or 50 (cold, 0.6), expected -100 + 200 + 30 = 130; Wait pays 150. The team drills anyway
# (giving up 20 of expected value).
SMALL_TREE = {
    "kind": "tree", "title": "Drill or wait (invented test tree)", "currency": "EUR",
    "objective": "max", "root": "plan",
    "nodes": [
        {"id": "plan", "kind": "decision", "name": "Plan",
         "branches": [{"label": "Drill", "to": "res", "cash_flow": -100},
                      {"label": "Wait", "to": "wait"}]},
        {"id": "res", "kind": "chance", "name": "Reservoir",
         "branches": [{"label": "hot", "probability": 0.4, "to": "hot"},
                      {"label": "cold", "probability": 0.6, "to": "cold"}]},
        {"id": "hot", "kind": "end", "payoff": 500},
        {"id": "cold", "kind": "end", "payoff": 50},
        {"id": "wait", "kind": "end", "payoff": 150},
    ],
}


@pytest.mark.parametrize(("state", "probability", "regret"), [("hot", 0.4, 0.0),
                                                              ("cold", 0.6, 200.0)])
def test_review_of_a_general_tree_with_the_teams_own_plan(people, state, probability, regret):
    decision = committed(people, SMALL_TREE, recommended=False, alternative="Drill",
                         justification="invented: strategic reasons")
    outcomes.record_outcome(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                            path={"res": state}, realised_value=380)
    r = outcomes.review(decision)
    assert r["expected_at_approval"] == pytest.approx(130)
    assert r["sound_given_what_was_known"]["value_given_up_at_approval"] == pytest.approx(20)
    assert r["probability_of_what_happened"] == pytest.approx(probability)
    # Hindsight: hot -> drilling makes 400 and is best; cold -> drilling makes -50, waiting 150.
    assert r["hindsight"]["chosen_plan_value"] == pytest.approx(400 if state == "hot" else -50)
    assert r["hindsight"]["regret"] == pytest.approx(regret)
    assert [s["branch"] for s in r["path"]] == ["Drill", state]
