"""Browser pages through Django's test client: who sees what, forms, messages, CSRF.

Personas (tests/personas.py, invented): ana analyst, fred financial review,
olga operations, vic viewer of the Northfield team; omar is an analyst of
another team and must never see Northfield's decisions (404, not 403).
"""

from __future__ import annotations

import json
import re

import pytest
from django.test import Client
from django.urls import reverse

from decisions.models import Decision, ModelVersion, SignOff, Status
from decisions.services import decisions as svc
from decisions.services import signoff as signing
from decisions.services.locking import IF_MATCH_ANY
from tests.personas import PASSWORD, small_table
from tests.webutil import client_as, html

pytestmark = pytest.mark.django_db


def page_urls(decision) -> dict[str, str]:
    pk = decision.pk
    return {
        "decision": reverse("web-decision", args=[pk]),
        "diff": reverse("web-decision-diff", args=[pk]) + "?a=1&b=1",
        "edit": reverse("web-edit-table", args=[pk]),
        "edit_json": reverse("web-edit-json", args=[pk]),
    }


def etag(decision) -> str:
    decision.refresh_from_db()
    return decision.etag


# ---- permission matrix ---------------------------------------------------------------

@pytest.mark.parametrize("name", ["decision", "diff", "edit", "edit_json"])
def test_anonymous_is_sent_to_sign_in(draft, name):
    url = page_urls(draft)[name]
    response = client_as().get(url)
    assert response.status_code == 302
    assert response["Location"].startswith("/login/?next=")


def test_anonymous_new_decision_redirects_and_the_front_door_shows_the_sign_in_form(db):
    response = client_as().get(reverse("web-decision-new"))
    assert response.status_code == 302 and response["Location"].startswith("/login/")
    response = client_as().get("/")
    assert response.status_code == 200
    assert 'name="password"' in html(response) and "Your decisions" not in html(response)


@pytest.mark.parametrize("name", ["decision", "diff", "edit", "edit_json"])
def test_user_of_another_team_gets_404_on_every_page(draft, people, name):
    response = client_as(people.omar).get(page_urls(draft)[name])
    assert response.status_code == 404
    assert draft.title not in html(response)


@pytest.mark.parametrize("route", ["web-submit", "web-sign", "web-strategy", "web-commit",
                                   "web-close", "web-policy", "web-validate", "web-edit-table",
                                   "web-edit-json"])
def test_user_of_another_team_gets_404_on_every_post(draft, people, route):
    response = client_as(people.omar).post(reverse(route, args=[draft.pk]),
                                           {"etag": etag(draft), "password": PASSWORD})
    assert response.status_code == 404
    draft.refresh_from_db()
    assert draft.status == Status.DRAFT and draft.versions.count() == 1


def test_outsider_dashboard_does_not_list_the_other_teams_decisions(draft, people):
    response = client_as(people.omar).get("/")
    assert response.status_code == 200
    assert draft.title not in html(response)


@pytest.mark.parametrize("who", ["ana", "fred", "olga", "bea", "vic"])
def test_every_member_reads_the_decision_page_and_diff(draft, people, who):
    client = client_as(getattr(people, who))
    for name in ("decision", "diff"):
        assert client.get(page_urls(draft)[name]).status_code == 200


@pytest.mark.parametrize(("who", "code"), [("ana", 200), ("fred", 200), ("vic", 403)])
def test_model_editors_open_for_analysts_and_reviewers_not_viewers(draft, people, who, code):
    client = client_as(getattr(people, who))
    assert client.get(page_urls(draft)["edit"]).status_code == code
    assert client.get(page_urls(draft)["edit_json"]).status_code == code


def test_viewer_cannot_create_a_decision(people):
    response = client_as(people.vic).get(reverse("web-decision-new"))
    assert response.status_code == 403
    assert "Only an analyst" in html(response)


def test_viewer_cannot_submit_and_is_told_why(draft, people):
    client = client_as(people.vic)
    response = client.post(reverse("web-submit", args=[draft.pk]), {"etag": etag(draft)},
                           follow=True)
    draft.refresh_from_db()
    assert draft.status == Status.DRAFT
    page = html(response)
    assert "submit: needs the role" in page and "you are &#x27;viewer&#x27;" in page


# ---- sign in and dashboard ----------------------------------------------------------------

def test_sign_in_with_password_then_sign_out(people):
    client = Client()
    response = client.post("/login/", {"username": "ana", "password": PASSWORD})
    assert response.status_code == 302 and response["Location"] == "/"
    assert "Signed in as" in html(client.get("/"))
    client.post("/logout/")
    assert "Signed in as" not in html(client.get("/"))


def test_wrong_password_re_renders_the_sign_in_form(people):
    response = Client().post("/login/", {"username": "ana", "password": "wrong"})
    assert response.status_code == 200
    assert "did not match" in html(response)
    assert 'value="ana"' in html(response)


def test_dashboard_lists_what_waits_for_the_users_signoff_first(submitted, people):
    page = html(client_as(people.fred).get("/"))
    waiting = page.index("Waiting for your sign-off")
    assert page.index(submitted.title) > waiting
    assert "financial review" in page[waiting:page.index("By status")]
    # The author and the viewer have nothing to sign.
    for user in (people.ana, people.vic):
        section = html(client_as(user).get("/"))
        assert "Nothing waits for your signature." in section


def test_every_page_carries_the_caution_line(draft, people):
    caution = ("Figures are model outputs resting on the stated assumptions; weigh them with "
               "professional judgment and your organisation&#x27;s own approval rules.")
    client = client_as(people.ana)
    for url in ["/", reverse("web-decision-new"), *page_urls(draft).values()]:
        page = html(client.get(url))
        assert caution in page or caution.replace("&#x27;", "'") in page, url


# ---- decision page --------------------------------------------------------------------------

def test_decision_page_shows_the_stored_results(draft, people):
    # SMALL_TABLE (tests/personas.py), worked by hand: deep well 0.4*9e6 + 0.6*(-1e6) = 3.0e6;
    # gas 2.5e6; perfect information 0.4*9e6 + 0.6*2.5e6 = 5.1e6, so EVPI = 2.1e6.
    page = html(client_as(people.vic).get(page_urls(draft)["decision"]))
    assert "3,000,000 EUR" in page
    assert "2,500,000 EUR" in page
    assert "2,100,000 EUR" in page
    assert "Deep well" in page and "pruned" in page
    assert "Audit timeline" in page and "version.create" in page


def test_sign_panel_is_disabled_with_the_reason_for_the_author_and_the_viewer(submitted, people):
    page = html(client_as(people.ana).get(page_urls(submitted)["decision"]))
    assert "fieldset disabled" in page
    assert "your role in this team is &#x27;analyst&#x27;" in page.lower()
    page = html(client_as(people.vic).get(page_urls(submitted)["decision"]))
    assert "fieldset disabled" in page and "&#x27;viewer&#x27;" in page
    page = html(client_as(people.fred).get(page_urls(submitted)["decision"]))
    assert 'name="password"' in page and "fieldset disabled" not in page


def test_rejecting_without_a_reason_keeps_the_panel_and_names_the_field(submitted, people):
    response = client_as(people.fred).post(reverse("web-sign", args=[submitted.pk]), {
        "etag": etag(submitted), "version": 1, "meaning": "reject", "reason": "",
        "password": PASSWORD})
    assert response.status_code == 400
    assert "is required when rejecting" in html(response)
    assert SignOff.objects.count() == 0


def test_wrong_password_refuses_the_signature(submitted, people):
    response = client_as(people.fred).post(reverse("web-sign", args=[submitted.pk]), {
        "etag": etag(submitted), "version": 1, "meaning": "approve", "password": "not mine"})
    assert response.status_code == 403
    assert "the password does not match" in html(response)
    assert SignOff.objects.count() == 0


def test_two_approvals_approve_then_plan_commit_close(submitted, people):
    for user in (people.fred, people.olga):
        response = client_as(user).post(reverse("web-sign", args=[submitted.pk]), {
            "etag": etag(submitted), "version": 1, "meaning": "approve", "password": PASSWORD})
        assert response.status_code == 302
    submitted.refresh_from_db()
    assert submitted.status == Status.APPROVED
    ana = client_as(people.ana)
    response = ana.post(reverse("web-strategy", args=[submitted.pk]), {
        "etag": etag(submitted), "choice": "alternative", "alternative": "Stay on gas",
        "justification": ""})
    assert response.status_code == 400
    assert "is required when the recommended plan is not taken" in html(response)
    response = ana.post(reverse("web-strategy", args=[submitted.pk]), {
        "etag": etag(submitted), "choice": "alternative", "alternative": "Stay on gas",
        "justification": "Keeps capital free (invented)."}, follow=True)
    # Value given up computed by the service from the stored results: 3.0e6 - 2.5e6 (by hand).
    assert "500,000 EUR" in html(response)
    ana.post(reverse("web-commit", args=[submitted.pk]), {"etag": etag(submitted)})
    submitted.refresh_from_db()
    assert submitted.status == Status.COMMITTED
    ana.post(reverse("web-close", args=[submitted.pk]), {"etag": etag(submitted), "note": "done"})
    submitted.refresh_from_db()
    assert submitted.status == Status.CLOSED


def test_a_stale_page_is_refused_with_a_message(draft, people):
    stale = etag(draft)
    svc.update_decision(draft.pk, actor=people.ana, if_match=IF_MATCH_ANY, title="Renamed")
    response = client_as(people.ana).post(reverse("web-submit", args=[draft.pk]),
                                          {"etag": stale}, follow=True)
    draft.refresh_from_db()
    assert draft.status == Status.DRAFT
    assert "has changed since you read it" in html(response)


def test_csrf_token_is_required_on_state_changes(draft, people):
    client = client_as(people.ana, enforce_csrf_checks=True)
    response = client.post(reverse("web-submit", args=[draft.pk]), {"etag": etag(draft)})
    assert response.status_code == 403
    draft.refresh_from_db()
    assert draft.status == Status.DRAFT


def test_diff_of_two_versions_lists_the_changed_probability(draft, people):
    changed = small_table(states=[{"name": "hot", "probability": 0.5},
                                  {"name": "cold", "probability": 0.5}])
    svc.save_version(draft.pk, actor=people.ana, document=changed, if_match=IF_MATCH_ANY)
    page = html(client_as(people.vic).get(reverse("web-decision-diff", args=[draft.pk]) + "?a=1&b=2"))
    assert "states[name=hot].probability" in page
    assert "0.4" in page and "0.5" in page
    # 0.5*9e6 + 0.5*(-1e6) = 4.0e6 (by hand)
    assert "4,000,000 EUR" in page


def test_an_earlier_signature_is_shown_but_not_counted(submitted, people):
    signing.sign(submitted.pk, 1, actor=people.olga, password=PASSWORD, role="operations",
                 meaning="reject", reason="Loop area unconfirmed (invented)", if_match=IF_MATCH_ANY)
    page = html(client_as(people.ana).get(page_urls(submitted)["decision"]))
    assert "was rejected by Olga Operations" in page
    assert "Loop area unconfirmed (invented)" in page
    assert "Submit version" not in page


# ---- create and edit ------------------------------------------------------------------------

def test_create_decision_needs_a_title_and_a_policy_and_keeps_the_input(people):
    client = client_as(people.ana)
    response = client.post(reverse("web-decision-new"), {
        "title": "", "team": people.team.pk, "kind": "payoff_table",
        "policy_financial_review": 0, "policy_operations": 0, "policy_budget_holder": 0})
    assert response.status_code == 400
    assert "This field is required." in html(response)
    response = client.post(reverse("web-decision-new"), {
        "title": "Boilers (invented)", "team": people.team.pk, "kind": "payoff_table",
        "policy_financial_review": 0, "policy_operations": 0, "policy_budget_holder": 0})
    assert "policy: name at least one signing role" in html(response)
    assert 'value="Boilers (invented)"' in html(response)
    response = client.post(reverse("web-decision-new"), {
        "title": "Boilers (invented)", "team": people.team.pk, "kind": "payoff_table",
        "policy_financial_review": 1, "policy_operations": 0, "policy_budget_holder": 0})
    decision = Decision.objects.get(title="Boilers (invented)")
    assert response["Location"] == reverse("web-edit-table", args=[decision.pk])
    assert decision.policy.as_dict() == {"financial review": 1}


def table_post(decision, **overrides) -> dict:
    data = {
        "etag": etag(decision), "title": "Heat (invented)", "currency": "EUR", "objective": "max",
        "discount_rate": "", "n_states": 2, "n_alts": 2, "n_studies": 0,
        "state-0-name": "hot", "state-0-probability": "0.4",
        "state-1-name": "cold", "state-1-probability": "0.6",
        "alt-0-name": "Deep well", "alt-0-payoff-0": "9,000,000", "alt-0-payoff-1": "-1000000",
        "alt-1-name": "Stay on gas", "alt-1-payoff-0": "2500000", "alt-1-payoff-1": "2500000",
        "change_note": "typed in the browser", "action": "save",
    }
    data.update(overrides)
    return data


@pytest.mark.parametrize(("field", "typed", "message"), [
    ("state-1-probability", "1.2", "states[1].probability: must be within [0, 1], got 1.2"),
    ("alt-0-payoff-0", "lots", "alternatives[0].payoffs.hot: must be a number, got &#x27;lots&#x27;"),
])
def test_bad_table_input_shows_the_cores_message_beside_the_field_and_keeps_it(
        draft, people, field, typed, message):
    response = client_as(people.ana).post(reverse("web-edit-table", args=[draft.pk]),
                                          table_post(draft, **{field: typed}))
    assert response.status_code == 400
    page = html(response)
    errors = re.search(rf'<ul class="field-errors" id="err-{field}"[^>]*>(.*?)</ul>', page, re.S)
    assert errors and message in errors.group(1)
    assert f'name="{field}" id="f-{field}" value="{typed}"' in page
    assert 'value="typed in the browser"' in page
    assert ModelVersion.objects.filter(decision=draft).count() == 1


def test_adding_a_state_keeps_everything_typed(draft, people):
    response = client_as(people.ana).post(reverse("web-edit-table", args=[draft.pk]),
                                          table_post(draft, action="add-state"))
    page = html(response)
    assert response.status_code == 200
    assert 'name="state-2-name"' in page and 'name="alt-1-payoff-2"' in page
    assert 'value="9,000,000"' in page and 'value="Stay on gas"' in page


def test_a_valid_table_saves_a_new_version(draft, people):
    response = client_as(people.ana).post(reverse("web-edit-table", args=[draft.pk]),
                                          table_post(draft))
    assert response.status_code == 302
    version = draft.current_version()
    assert version.number == 2 and version.change_note == "typed in the browser"
    assert version.results["expected_value"] == pytest.approx(3_000_000)


def test_the_json_editor_reports_syntax_and_model_problems_and_keeps_the_text(draft, people):
    client = client_as(people.ana)
    url = reverse("web-edit-json", args=[draft.pk])
    response = client.post(url, {"etag": etag(draft), "document": '{"kind": "tree",'})
    assert response.status_code == 400
    assert "not valid JSON at line 1, column 17" in html(response)
    assert "{&quot;kind&quot;: &quot;tree&quot;," in html(response)
    text = ('{"kind": "tree", "root": "a", "nodes": [{"id": "a", "kind": "chance", "name": "x",'
            ' "branches": [{"label": "p", "probability": 1.5, "to": "b"}]},'
            ' {"id": "b", "kind": "end", "payoff": 1}]}')
    response = client.post(url, {"etag": etag(draft), "document": text})
    assert response.status_code == 400
    assert "nodes[0].branches[0].probability" in html(response)
    assert draft.versions.count() == 1


def test_live_validation_answers_messages_by_field(draft, people):
    client = client_as(people.ana)
    body = client.post(reverse("web-validate", args=[draft.pk]),
                       table_post(draft, **{"state-1-probability": "1.2"})).json()
    assert body["ok"] is False
    assert body["errors"]["state-1-probability"] == [
        "states[1].probability: must be within [0, 1], got 1.2"]
    body = client.post(reverse("web-validate", args=[draft.pk]), table_post(draft)).json()
    assert body["ok"] is True and body["expected_value"] == "3,000,000 EUR"
    assert client_as(people.vic).post(reverse("web-validate", args=[draft.pk]),
                                      table_post(draft)).status_code == 403


def test_decision_page_draws_the_tree_and_charts_as_inline_svg(draft, people):
    page = html(client_as(people.vic).get(page_urls(draft)["decision"]))
    assert page.count("<svg") >= 4  # legend, tree, risk profile, tornado, one-way
    assert "<script" not in page.split("<footer")[0].split('id="sensitivity"')[1]


def test_a_tie_rule_break_even_is_marked_and_explained_on_the_page(people):
    # Invented model: Later is 2e-9 better in every state, which counts only once the
    # best value falls under 2, at P(s1) = 0.8 (tie tolerance 1e-9 x the best value).
    doc = {"kind": "payoff_table", "title": "Tie check (invented)",
           "states": [{"name": "s1", "probability": 0.5}, {"name": "s2", "probability": 0.5}],
           "alternatives": [{"name": "First", "payoffs": {"s1": 0.0, "s2": 10.0}},
                            {"name": "Later", "payoffs": {"s1": 2e-9, "s2": 10.0 + 2e-9}}],
           "studies": []}
    decision = svc.create_decision(actor=people.ana, team=people.team, title="Tie (invented)",
                                   policy={"financial review": 1})
    svc.save_version(decision.pk, actor=people.ana, document=doc, change_note="tie",
                     if_match=IF_MATCH_ANY)
    url = page_urls(decision)["decision"] + "?input=states[0].probability"
    page = html(client_as(people.ana).get(url))
    assert re.search(r"Break-even: 0\.8(000)? \(tie rule\)\.", page), page.split("Break-even")[1][:200]
    assert "the first in document order is preferred until the gap counts" in page


def test_one_way_sensitivity_to_the_chosen_input_shows_the_break_even(draft, people):
    # Deep well vs gas: 9e6 p - 1e6 (1 - p) = 2.5e6 at p = 0.35 (by hand).
    url = page_urls(draft)["decision"] + "?input=states[0].probability"
    page = html(client_as(people.vic).get(url))
    assert '<option value="states[0].probability" selected>' in page
    assert re.search(r"Break-even: 0\.35(00)?\b", page)
    assert "(tie rule)" not in page


def test_a_model_too_large_to_analyse_on_the_page_says_so_instead(people, monkeypatch):
    # The memo's rule (services.memo.SENSITIVITY_NODE_LIMIT): a tornado re-evaluates the
    # model once per input, so the page of a 4,000-node tree took 4.3 s (measured
    # 2026-12), and a 20,000-node one would hold a server worker for a minute or more.
    from decisions.services.memo import SENSITIVITY_NODE_LIMIT
    from decisions.web import figures
    from tests.test_drawings import big_tree

    called = []
    monkeypatch.setattr(figures, "tornado", lambda *a, **k: called.append(1) or [])
    decision = svc.create_decision(actor=people.ana, team=people.team, title="Big (invented)",
                                   policy={"financial review": 1})
    doc = big_tree(SENSITIVITY_NODE_LIMIT + 50)
    svc.save_version(decision.pk, actor=people.ana, document=doc, change_note="big",
                     if_match=IF_MATCH_ANY)
    page = html(client_as(people.ana).get(page_urls(decision)["decision"]))
    section = page.split('id="sensitivity"')[1].split("</section>")[0]
    assert (f"Sensitivity not computed. The model has more than "
            f"{SENSITIVITY_NODE_LIMIT:,} nodes (a payoff table counted as the nodes of its "
            f"equivalent tree), too many to analyse while the page is drawn") in section
    assert "<svg" not in section and called == []


def test_a_model_within_the_limit_still_gets_its_tornado(draft, people):
    page = html(client_as(people.vic).get(page_urls(draft)["decision"]))
    section = page.split('id="sensitivity"')[1].split("</section>")[0]
    assert "<svg" in section and "Sensitivity not computed" not in section


def test_a_table_whose_tree_is_too_large_to_write_out_still_has_its_page(draft, people,
                                                                          monkeypatch):
    # A valid payoff table is evaluated as a table; its equivalent tree is only written
    # out up to EXPAND_NODE_LIMIT nodes. The page of a 1,000 x 1,000 table with a
    # 10-signal study (11,011,013 nodes) answered 500 before; the limit is lowered here
    # so that the small table of the fixture stands in for it.
    import importlib

    # (``valuation.expand`` is the function; the module is reached by its full name)
    monkeypatch.setattr(importlib.import_module("valuation.expand"), "EXPAND_NODE_LIMIT", 5)
    response = client_as(people.vic).get(page_urls(draft)["decision"])
    assert response.status_code == 200
    page = html(response)
    section = page.split('id="tree-h"')[1].split("</section>")[0]
    assert "The tree is not drawn or listed: the expanded tree would have" in section
    assert "more than the 5 shown; the table itself is still evaluated" in section
    assert "<svg" not in section
    assert "Expected value" in page or "expected value" in page


def test_a_lone_surrogate_typed_in_the_json_editor_is_refused_not_a_500(draft, people):
    # "\ud800" alone is half of a UTF-16 surrogate pair, not a Unicode character (the
    # Unicode Standard, D75); the stored copy is UTF-8, which cannot hold it.
    client = client_as(people.ana)
    doc = json.loads(draft.current_version().canonical_json)
    text = json.dumps(doc).replace(json.dumps(doc["title"]), '"Heat \\ud800 pump"', 1)
    response = client.post(reverse("web-edit-json", args=[draft.pk]),
                           {"etag": etag(draft), "document": text})
    assert response.status_code == 400
    assert "is half of a surrogate pair, which UTF-8 cannot encode" in html(response)
    assert draft.versions.count() == 1


def test_the_tree_of_a_model_past_the_detail_limit_is_listed_but_not_drawn(draft, people,
                                                                          monkeypatch):
    # Above DETAIL_NODE_LIMIT the stored results hold no node values, and cutting such a
    # tree into drawn parts took minutes (a 5 x 5 table with 800 signals: 41 s, measured
    # 2026-12). Stored results without node values stand in for such a model here.
    from decisions.web import figures

    version = draft.current_version()
    results = dict(version.results, nodes={})
    monkeypatch.setattr(figures, "tree_drawings", lambda *a, **k: pytest.fail("drawn"))
    out = figures.figures(json.loads(version.canonical_json), results,
                          tree={"kind": "tree", "root": "r", "nodes": [{"id": "r"}] * 3},
                          chosen_input=None)
    assert out["tree_svgs"] == [] and out["tree_total"] == 0
    assert out["drawing_note"] == (f"the tree has 3 nodes, more than the "
                                   f"{figures.DETAIL_NODE_LIMIT:,} whose values are stored")
