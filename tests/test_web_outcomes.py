"""Outcome form and review page in the browser face (Django test client).

The example is tests/source_helpers.SURVEY_TABLE (invented), worked by hand with
exact fractions in tests/test_outcomes.py: the recommended plan buys the
survey (expected 4,320,000 EUR); what happened: the survey said "good", the
well was drilled, the reservoir was cold (model probability 12/25 * 1/4 = 3/25);
with hindsight gas was best (2,500,000 against -1,100,000): regret 3,600,000.
"""

from __future__ import annotations

import re
from fractions import Fraction

import pytest
from django.urls import reverse

from decisions.models import Outcome, Status
from decisions.services import outcomes
from decisions.services.locking import IF_MATCH_ANY
from tests.source_helpers import committed, draft_with, survey_table
from tests.webutil import client_as, html

pytestmark = pytest.mark.django_db

CAUTION = "Figures are model outputs resting on the stated assumptions"


def etag(decision) -> str:
    decision.refresh_from_db()
    return decision.etag


def node_field(page: str, node_id: str) -> str:
    """The name of the select the page offers for a chance node (labels carry the id)."""
    match = re.search(rf'<label for="id_(node-\d+)">[^<]*\[{re.escape(node_id)}\]</label>', page)
    assert match, f"no select for {node_id}"
    return match.group(1)


def outcome_post(page: str, decision, **overrides) -> dict:
    data = {"etag": etag(decision), node_field(page, "study0/signal"): "good",
            node_field(page, "study0/g0/a0"): "cold", "study_signal": "good",
            "realised_value": "−1,300,000", "note": "invented: cold reservoir"}
    data.update(overrides)
    return data


@pytest.fixture
def decision(people):
    return committed(people)


def _urls(decision) -> dict[str, str]:
    return {"outcome": reverse("web-outcome", args=[decision.pk]),
            "review": reverse("web-review", args=[decision.pk])}


# ---- permission matrix ---------------------------------------------------------------------

@pytest.mark.parametrize("name", ["outcome", "review"])
def test_anonymous_is_sent_to_sign_in(decision, name):
    response = client_as().get(_urls(decision)[name])
    assert response.status_code == 302 and response["Location"].startswith("/login/?next=")


@pytest.mark.parametrize("name", ["outcome", "review"])
def test_user_of_another_team_gets_404(decision, people, name):
    client = client_as(people.omar)
    assert client.get(_urls(decision)[name]).status_code == 404
    assert client.post(_urls(decision)[name], {"etag": etag(decision)}).status_code == 404
    assert Outcome.objects.count() == 0


@pytest.mark.parametrize(("who", "code"), [("ana", 200), ("fred", 403), ("olga", 403),
                                           ("bea", 403), ("vic", 403)])
def test_only_the_analyst_opens_the_outcome_form(decision, people, who, code):
    response = client_as(getattr(people, who)).get(_urls(decision)["outcome"])
    assert response.status_code == code
    if code == 403:
        assert "analysts record outcomes" in html(response)


def test_viewer_cannot_post_an_outcome(decision, people):
    page = html(client_as(people.ana).get(_urls(decision)["outcome"]))
    response = client_as(people.vic).post(_urls(decision)["outcome"], outcome_post(page, decision))
    assert response.status_code == 403
    assert Outcome.objects.count() == 0


@pytest.mark.parametrize("who", ["ana", "fred", "olga", "bea", "vic"])
def test_every_member_reads_the_review(decision, people, who):
    outcomes.record_outcome(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                            path={"study0/signal": "good", "study0/g0/a0": "cold"},
                            realised_value=-1_300_000)
    response = client_as(getattr(people, who)).get(_urls(decision)["review"])
    assert response.status_code == 200
    assert "Regret" in html(response) and CAUTION in html(response)


def test_outcome_form_before_commit_sends_back_with_the_rule(people):
    draft = draft_with(people, survey_table())
    response = client_as(people.ana).get(_urls(draft)["outcome"], follow=True)
    assert "an outcome is recorded for a committed decision, not a draft one" in html(response)


def test_csrf_token_is_required(decision, people):
    page = html(client_as(people.ana).get(_urls(decision)["outcome"]))
    client = client_as(people.ana, enforce_csrf_checks=True)
    assert client.post(_urls(decision)["outcome"], outcome_post(page, decision)).status_code == 403
    assert Outcome.objects.count() == 0


# ---- the form --------------------------------------------------------------------------------

def test_the_form_lists_the_plans_chance_nodes_first(decision, people):
    page = html(client_as(people.ana).get(_urls(decision)["outcome"]))
    on_plan = page.split("On the recorded plan")[1].split("Other chance nodes")[0]
    # The plan buys the survey (hand-worked): its signal node, then the state node
    # under each signal's best alternative (well after "good", gas after "poor").
    assert "[study0/signal]" in on_plan and "[study0/g0/a0]" in on_plan
    assert "[study0/g1/a1]" in on_plan
    assert "[a0]" not in on_plan  # the well without the survey: off the plan
    assert "good (p = 0.480)" in page  # P(good) = 12/25 (by hand)
    assert CAUTION in page and "<details>" in page  # nothing off the plan chosen: closed


@pytest.mark.parametrize(("override", "field", "message"), [
    ({"realised_value": "lots"}, "realised_value",
     "realised_value: must be a finite number (money actually made or lost), got &#x27;lots&#x27;"),
    ({"realised_value": "inf"}, "realised_value", "must be a finite number"),
    ({"study_signal": "poor"}, "study_signal",
     "study_signal: the path records the signal &#x27;good&#x27;, not &#x27;poor&#x27;"),
])
def test_bad_input_shows_the_services_message_beside_the_field_and_keeps_it(
        decision, people, override, field, message):
    client = client_as(people.ana)
    page = html(client.get(_urls(decision)["outcome"]))
    response = client.post(_urls(decision)["outcome"], outcome_post(page, decision, **override))
    assert response.status_code == 400
    page = html(response)
    errors = re.search(rf'<ul class="errorlist" id="id_{field}_error">(.*?)</ul>', page, re.S)
    assert errors and message in errors.group(1)
    assert "invented: cold reservoir</textarea>" in page
    assert '<option value="cold" selected>' in page
    assert Outcome.objects.count() == 0


def test_a_chance_node_left_unanswered_is_named_beside_its_select(decision, people):
    client = client_as(people.ana)
    page = html(client.get(_urls(decision)["outcome"]))
    data = outcome_post(page, decision)
    state_field = node_field(page, "study0/g0/a0")
    data[state_field] = ""
    response = client.post(_urls(decision)["outcome"], data)
    assert response.status_code == 400
    errors = re.search(rf'<ul class="errorlist" id="id_{state_field}_error">(.*?)</ul>',
                       html(response), re.S)
    assert errors and "path.study0/g0/a0: the path passes the chance node" in errors.group(1)
    assert Outcome.objects.count() == 0


def test_a_stale_form_is_refused_with_a_message(decision, people):
    client = client_as(people.ana)
    page = html(client.get(_urls(decision)["outcome"]))
    data = outcome_post(page, decision, etag='"stale"')
    response = client.post(_urls(decision)["outcome"], data)
    assert response.status_code == 412
    assert "has changed since you read it" in html(response)
    assert Outcome.objects.count() == 0


def test_recording_then_reviewing_shows_the_hand_worked_figures(decision, people):
    client = client_as(people.ana)
    page = html(client.get(_urls(decision)["outcome"]))
    response = client.post(_urls(decision)["outcome"], outcome_post(page, decision))
    assert response.status_code == 302 and response["Location"] == _urls(decision)["review"]
    outcome = Outcome.objects.get()
    assert outcome.path == {"study0/signal": "good", "study0/g0/a0": "cold"}
    assert outcome.realised_value == -1_300_000
    page = html(client.get(_urls(decision)["review"]))
    assert "4,320,000 EUR" in page  # expected at approval (hand-worked)
    assert "−1,300,000 EUR" in page  # realised
    assert "−5,620,000 EUR" in page  # realised minus expected
    assert f"{float(Fraction(3, 25)):.3f}" in page  # P(what happened) = 3/25
    hindsight = page.split('id="hind-h"')[1]
    assert "2,500,000 EUR" in hindsight and "−1,100,000 EUR" in hindsight
    assert "3,600,000 EUR" in hindsight  # regret (hand-worked)
    sound = page.split('id="sound-h"')[1].split('id="hind-h"')[0]
    assert "had the best expected value" in sound and "3,600,000" not in sound
    assert page.count("<svg") >= 1  # the outcome chart
    assert CAUTION in page


def test_a_second_recording_is_a_correction_prefilled_with_the_first(decision, people):
    client = client_as(people.ana)
    page = html(client.get(_urls(decision)["outcome"]))
    client.post(_urls(decision)["outcome"], outcome_post(page, decision))
    page = html(client.get(_urls(decision)["outcome"]))
    assert "Correct the recorded outcome" in page and 'value="-1,300,000"' in page
    client.post(_urls(decision)["outcome"],
                outcome_post(page, decision, realised_value="-1,250,000"))
    assert Outcome.objects.count() == 2
    page = html(client.get(_urls(decision)["review"]))
    assert "Outcome history" in page and "−1,250,000 EUR" in page


def test_review_without_an_outcome_says_so(decision, people):
    page = html(client_as(people.vic).get(_urls(decision)["review"]))
    assert "No outcome has been recorded" in page
    assert "Record the outcome" not in page  # the viewer does not record


def test_decision_page_links_to_the_outcome_and_the_review(decision, people):
    url = reverse("web-decision", args=[decision.pk])
    assert _urls(decision)["outcome"] in html(client_as(people.ana).get(url))
    assert _urls(decision)["outcome"] not in html(client_as(people.vic).get(url))
    outcomes.record_outcome(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                            path={"study0/signal": "good", "study0/g0/a0": "cold"},
                            realised_value=-1_300_000)
    assert _urls(decision)["review"] in html(client_as(people.vic).get(url))
    decision.refresh_from_db()
    assert decision.status == Status.COMMITTED


# ---- the memo link ----------------------------------------------------------------------------

def test_decision_page_memo_link_downloads_a_pdf_for_a_member(decision, people):
    page = html(client_as(people.vic).get(reverse("web-decision", args=[decision.pk])))
    memo = reverse("version-memo", kwargs={"decision_pk": decision.pk, "number": 1})
    assert f'href="{memo}"' in page
    response = client_as(people.vic).get(memo)
    assert response.status_code == 200
    assert response["Content-Type"] == "application/pdf"
    assert response.content.startswith(b"%PDF-")
    assert client_as(people.omar).get(memo).status_code == 404


def test_the_form_follows_the_alternative_the_team_chose(people):
    # The team takes "Stay on gas" instead of the recommended survey plan: the plan's
    # path is then the gas alternative's state node (a1), not the survey's nodes.
    decision = committed(people, alternative="Stay on gas",
                         justification="Keeps capital free (invented).", recommended=False)
    page = html(client_as(people.ana).get(_urls(decision)["outcome"]))
    on_plan = page.split("On the recorded plan")[1].split("Other chance nodes")[0]
    assert "[a1]" in on_plan and "[study0/signal]" not in on_plan
    data = {"etag": etag(decision), node_field(page, "a1"): "cold",
            node_field(page, "study0/signal"): "good", "realised_value": "2,400,000"}
    response = client_as(people.ana).post(_urls(decision)["outcome"], data)
    # A path with records under two branches of the first decision is refused; the
    # off-plan group opens so the answer typed there stays in view.
    assert response.status_code == 400
    assert "<details open>" in html(response)
    assert "records chance nodes under more than one branch" in html(response)
    assert "alternative “Stay on gas”" in page


def test_a_tree_with_more_chance_nodes_than_the_page_lists_says_so(decision, people, monkeypatch):
    from decisions.web import views_outcomes

    # The expanded survey table has 7 chance nodes: the state under each alternative without
    # the survey (2), the survey's signal (1), the state under each alternative after each
    # signal (4). The page lists two: 5 are left out.
    monkeypatch.setattr(views_outcomes, "MAX_NODES", 2)
    page = html(client_as(people.ana).get(_urls(decision)["outcome"]))
    assert page.count('<select name="node-') == 2
    assert "The tree has 5 more chance nodes than this page lists" in page
