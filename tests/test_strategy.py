"""The chosen strategy: recommended plan, or the team's own with justification and value given up."""

import pytest

from decisions.models import Decision
from decisions.services import decisions as svc
from decisions.services import signoff
from decisions.services.errors import ConflictError, InvalidInput
from decisions.services.locking import IF_MATCH_ANY
from tests.personas import PASSWORD, small_table

pytestmark = pytest.mark.django_db


@pytest.fixture
def approved(submitted, people):
    for user, role in [(people.fred, "financial review"), (people.olga, "operations")]:
        signoff.sign(submitted.pk, 1, actor=user, password=PASSWORD, role=role,
                     meaning="approve", if_match=IF_MATCH_ANY)
    submitted.refresh_from_db()
    assert submitted.status == "approved"
    return submitted


def _record(decision, people, **kwargs):
    return svc.record_strategy(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY, **kwargs)


def test_the_recommended_plan_is_the_valuations_policy(approved, people):
    strategy = _record(approved, people, recommended=True)
    assert strategy.plan["policy"] == approved.current_version().results["policy"]
    assert strategy.value_given_up == 0.0


def test_another_alternative_gives_up_the_difference_in_expected_value(approved, people):
    strategy = _record(approved, people, recommended=False, alternative="Stay on gas",
                       justification="keeps the capital free")
    # SMALL_TABLE: Deep well 0.4*9e6 + 0.6*(-1e6) = 3.0e6; Stay on gas 2.5e6 (by hand).
    assert strategy.value_given_up == pytest.approx(500_000.0)


@pytest.mark.parametrize(("kwargs", "errors"), [
    ({"alternative": "Stay on gas"},
     [("justification", "is required when the recommended plan is not taken")]),
    ({"justification": "why not"},
     [("plan_text", "must describe the plan (or name an alternative) when the recommended "
                    "plan is not taken")]),
    ({"plan_text": "phase the well", "justification": "grant timing"},
     [("value_given_up", "is required for a plan that is not one of the model's alternatives")]),
    ({"alternative": "Heat pumps", "justification": "x"},
     [("alternative", "'Heat pumps' is not an alternative of version 1; give value_given_up")]),
    ({"plan_text": "p", "justification": "j", "value_given_up": -1.0},
     [("value_given_up", "must be a finite number >= 0, got -1.0")]),
])
def test_a_team_plan_needs_its_reasons(approved, people, kwargs, errors):
    with pytest.raises(InvalidInput) as info:
        _record(approved, people, recommended=False, **kwargs)
    assert info.value.problems == errors


def test_commit_needs_a_strategy_then_close_finishes(approved, people):
    with pytest.raises(ConflictError, match="record the chosen strategy before committing"):
        svc.commit_decision(approved.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    _record(approved, people, recommended=True)
    svc.commit_decision(approved.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    with pytest.raises(ConflictError, match="a new version can only be saved in draft or "
                                            "submitted, not committed"):
        svc.save_version(approved.pk, actor=people.ana, document=small_table(),
                         if_match=IF_MATCH_ANY)
    svc.close_decision(approved.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    assert Decision.objects.get(pk=approved.pk).status == "closed"


def test_a_strategy_needs_an_approved_decision(submitted, people):
    with pytest.raises(ConflictError, match="recorded on an approved decision, not submitted"):
        _record(submitted, people, recommended=True)
