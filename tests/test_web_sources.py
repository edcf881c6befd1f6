"""Study-source pages in the browser face (Django test client): list and create, the
calibration page, records by hand, the two-step CSV import, and the decision page's
"take this study's likelihoods from a source" form with the claimed-vs-calibrated table.

Data is invented (tests/source_helpers.py). Hand-worked figures are named where used.
"""

from __future__ import annotations

import hashlib
import re

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from decisions.models import StudyRecord, StudySource
from decisions.services import sources
from decisions.web.forms_sources import WEB_IMPORT_MAX_BYTES
from decisions.web.views_sources import PENDING
from tests.source_helpers import (
    NEVER_POOR_WHEN_HOT,
    TELLURION_CSV,
    draft_with,
    heating_table,
    import_many,
    survey_source,
    survey_table,
    tellurion_source,
)
from tests.webutil import client_as, html

pytestmark = pytest.mark.django_db

CAUTION = "Figures are model outputs resting on the stated assumptions"
GOOD_CSV = (b"date,signal,state,note\n2021-03-01,good,hot,invented\n2021-04-01,poor,cold,invented\n"
            b"2021-05-01,good,cold,invented\n")
BAD_CSV = (b"date,signal,state\n2021-03-01,good,hot\n2021-13-01,good,hot\n2021-05-01,meh,cold\n"
           b"2021-06-01,good,lukewarm\n")


def errors_of(page: str, field: str) -> str:
    match = re.search(rf'<ul class="errorlist" id="id_{field}_error">(.*?)</ul>', page, re.S)
    return match.group(1) if match else ""


def upload(content: bytes = GOOD_CSV, name: str = "records.csv"):
    return SimpleUploadedFile(name, content, content_type="text/csv")


@pytest.fixture
def source(people):
    return survey_source(people)


def create_post(people, **overrides) -> dict:
    data = {"action": "create", "team": people.team.pk, "name": "Ridge Geophysics (invented)",
            "states": "hot, cold", "signals": "good, poor", "prior_strength": "12",
            "claim-0-0": "0.9", "claim-0-1": "0.1", "claim-1-0": "0.25", "claim-1-1": "0.75"}
    data.update(overrides)
    return data


# ---- permission matrix ---------------------------------------------------------------------

def test_anonymous_is_sent_to_sign_in(source):
    for url in (reverse("web-sources"), reverse("web-source", args=[source.pk])):
        response = client_as().get(url)
        assert response.status_code == 302 and response["Location"].startswith("/login/?next=")


def test_user_of_another_team_gets_404_and_does_not_see_the_source(source, people):
    client = client_as(people.omar)
    assert source.name not in html(client.get(reverse("web-sources")))
    assert client.get(reverse("web-source", args=[source.pk])).status_code == 404
    response = client.post(reverse("web-source-record", args=[source.pk]),
                           {"date": "2021-01-01", "signal": "good", "state": "hot"})
    assert response.status_code == 404
    response = client.post(reverse("web-source-import", args=[source.pk]),
                           {"step": "preview", "file": upload()})
    assert response.status_code == 404
    assert StudyRecord.objects.count() == 0


@pytest.mark.parametrize("who", ["ana", "fred", "olga", "bea", "vic"])
def test_every_member_reads_the_list_and_the_source(source, people, who):
    client = client_as(getattr(people, who))
    assert source.name in html(client.get(reverse("web-sources")))
    page = html(client.get(reverse("web-source", args=[source.pk])))
    assert "Claimed vs calibrated accuracy" in page and CAUTION in page


@pytest.mark.parametrize("who", ["fred", "vic"])
def test_non_analysts_cannot_create_add_or_import(source, people, who):
    client = client_as(getattr(people, who))
    page = html(client.get(reverse("web-source", args=[source.pk])))
    assert "Add the record" not in page and "Check the file" not in page
    assert client.post(reverse("web-sources"), create_post(people)).status_code == 403
    response = client.post(reverse("web-source-record", args=[source.pk]),
                           {"date": "2021-01-01", "signal": "good", "state": "hot"})
    assert response.status_code == 403
    assert "needs the role" in html(response)
    response = client.post(reverse("web-source-import", args=[source.pk]),
                           {"step": "preview", "file": upload()})
    assert response.status_code == 403
    assert StudySource.objects.count() == 1 and StudyRecord.objects.count() == 0


def test_csrf_token_is_required(source, people):
    client = client_as(people.ana, enforce_csrf_checks=True)
    assert client.post(reverse("web-sources"), create_post(people)).status_code == 403
    assert client.post(reverse("web-source-record", args=[source.pk]),
                       {"date": "2021-01-01", "signal": "good", "state": "hot"}).status_code == 403
    assert client.post(reverse("web-source-import", args=[source.pk]),
                       {"step": "preview", "file": upload()}).status_code == 403
    assert StudySource.objects.count() == 1 and StudyRecord.objects.count() == 0


# ---- create a source -----------------------------------------------------------------------

def test_laying_out_the_table_keeps_what_was_typed(people):
    response = client_as(people.ana).post(reverse("web-sources"), {
        "action": "layout", "team": people.team.pk, "name": "Ridge (invented)",
        "states": "hot, cold", "signals": "good, poor"})
    page = html(response)
    assert response.status_code == 200
    assert 'name="claim-1-1"' in page and 'aria-label="Claimed P(poor | cold)"' in page
    assert 'value="Ridge (invented)"' in page


def test_a_valid_source_is_created_with_its_claim(people):
    response = client_as(people.ana).post(reverse("web-sources"), create_post(people))
    source = StudySource.objects.get(name="Ridge Geophysics (invented)")
    assert response.status_code == 302
    assert response["Location"] == reverse("web-source", args=[source.pk])
    assert source.claimed == {"hot": {"good": 0.9, "poor": 0.1},
                              "cold": {"good": 0.25, "poor": 0.75}}
    assert source.prior_strength == 12


@pytest.mark.parametrize(("override", "where", "message"), [
    ({"claim-0-0": "lots"}, "err-claim-0-0",
     "claimed[&#x27;hot&#x27;][&#x27;good&#x27;]: must be a finite number, got &#x27;lots&#x27;"),
    ({"claim-1-0": "0.5"}, "err-claim-row-1",
     "claimed[&#x27;cold&#x27;]: probabilities must sum to 1 (within 1e-6), got 1.25"),
    ({"prior_strength": "0"}, "id_prior_strength_error",
     "must be within (0, 1,000,000], got 0"),
    ({"signals": "good"}, "err-claim-row-0", "needs at least two signals"),
])
def test_bad_claims_show_the_services_message_beside_the_cell_and_keep_the_input(
        people, override, where, message):
    data = create_post(people, **override)
    if override.get("signals") == "good":
        data = {k: v for k, v in data.items() if not k.endswith("-1")}
    response = client_as(people.ana).post(reverse("web-sources"), data)
    assert response.status_code == 400
    page = html(response)
    block = re.search(rf'<ul class="(?:field-errors|errorlist)" id="{where}"[^>]*>(.*?)</ul>',
                      page, re.S)
    assert block and message in block.group(1)
    assert 'value="Ridge Geophysics (invented)"' in page
    typed = override.get("claim-0-0", "0.9")
    assert f'value="{typed}"' in page
    assert StudySource.objects.count() == 0


def test_a_duplicate_name_is_refused_beside_the_name(source, people):
    response = client_as(people.ana).post(reverse("web-sources"),
                                          create_post(people, name=source.name))
    assert response.status_code == 409
    assert "exists already in this team" in errors_of(html(response), "name")
    assert StudySource.objects.count() == 1


# ---- the calibration page and records ----------------------------------------------------------

def test_source_page_shows_claim_calibration_chart_and_trend(people):
    source = tellurion_source(people)
    page = html(client_as(people.vic).get(reverse("web-source", args=[source.pk])))
    cal = sources.calibration(source)["calibration"]
    cell = cal["states"]["hot reservoir"]["signals"]["favourable"]
    # The page prints the service's figures (checked against scipy in the service tests).
    assert f"{cell['posterior_mean']:.3f}" in page
    assert f"{cell['interval_90'][0]:.3f} – {cell['interval_90'][1]:.3f}" in page
    assert "0.850" in page  # the claim, from fixtures/tellurion_claimed.json
    assert "<svg" in page.split('id="accuracy-h"')[1].split('id="trend-h"')[0]
    # 30 records, windows of 10 records ending at each record: 21 windows.
    trend = page.split('id="trend-h"')[1].split('id="records-h"')[0]
    assert trend.count('<td class="date">') == 2 * 21
    assert "hot reservoir: says favourable" in trend
    assert "30 records" in page


def test_a_record_added_by_hand(source, people):
    response = client_as(people.ana).post(reverse("web-source-record", args=[source.pk]), {
        "date": "2021-02-03", "signal": "good", "state": "cold", "note": "invented"})
    assert response.status_code == 302
    record = StudyRecord.objects.get()
    assert (str(record.date), record.signal, record.state, record.origin) == \
        ("2021-02-03", "good", "cold", "manual")


@pytest.mark.parametrize(("date", "message"), [
    ("2021-02-30", "not a valid calendar date"),
    ("2999-01-01", "must not be in the future, got 2999-01-01"),
])
def test_a_bad_record_date_is_named_beside_the_field_and_kept(source, people, date, message):
    response = client_as(people.ana).post(reverse("web-source-record", args=[source.pk]), {
        "date": date, "signal": "good", "state": "cold", "note": "typed note"})
    assert response.status_code == 400
    page = html(response)
    assert message in errors_of(page, "date")
    assert f'value="{date}"' in page and "typed note</textarea>" in page
    assert '<option value="cold" selected>' in page
    assert StudyRecord.objects.count() == 0


# ---- CSV import: preview, then confirm ---------------------------------------------------------

def test_preview_lists_the_rows_and_imports_nothing(source, people):
    client = client_as(people.ana)
    response = client.post(reverse("web-source-import", args=[source.pk]),
                           {"step": "preview", "file": upload()})
    assert response.status_code == 200
    page = html(response)
    assert "3 records will be imported from records.csv" in page
    assert hashlib.sha256(GOOD_CSV).hexdigest() in page
    assert page.count("<td>2021-0") == 3
    assert StudyRecord.objects.count() == 0
    assert client.session[PENDING]["sha256"] == hashlib.sha256(GOOD_CSV).hexdigest()


def test_bad_lines_are_listed_by_number_and_nothing_is_imported(source, people):
    client = client_as(people.ana)
    response = client.post(reverse("web-source-import", args=[source.pk]),
                           {"step": "preview", "file": upload(BAD_CSV)})
    assert response.status_code == 400
    problems = re.search(r'<ul class="import-problems">(.*?)</ul>', html(response), re.S).group(1)
    assert "line 3: date: not a valid calendar date" in problems
    assert "line 4: signal: unknown signal &#x27;meh&#x27;" in problems
    assert "line 5: state: unknown state &#x27;lukewarm&#x27;" in problems
    assert "line 2" not in problems
    assert StudyRecord.objects.count() == 0 and PENDING not in client.session


def test_confirm_imports_exactly_the_previewed_rows_once(source, people):
    client = client_as(people.ana)
    client.post(reverse("web-source-import", args=[source.pk]),
                {"step": "preview", "file": upload(name="../../etc/passwd.csv")})
    digest = hashlib.sha256(GOOD_CSV).hexdigest()
    response = client.post(reverse("web-source-import", args=[source.pk]),
                           {"step": "confirm", "sha256": digest}, follow=True)
    assert "Imported 3 records from passwd.csv" in html(response)
    rows = list(StudyRecord.objects.order_by("date").values_list("date", "signal", "state",
                                                                  "import_sha256"))
    assert [(str(d), sig, st) for d, sig, st, _ in rows] == [
        ("2021-03-01", "good", "hot"), ("2021-04-01", "poor", "cold"), ("2021-05-01", "good", "cold")]
    assert {sha for *_, sha in rows} == {digest}
    assert PENDING not in client.session
    # A second confirm finds nothing waiting: nothing more is imported.
    response = client.post(reverse("web-source-import", args=[source.pk]),
                           {"step": "confirm", "sha256": digest}, follow=True)
    assert "no longer waiting" in html(response)
    assert StudyRecord.objects.count() == 3


def test_confirm_with_another_fingerprint_imports_nothing(source, people):
    client = client_as(people.ana)
    client.post(reverse("web-source-import", args=[source.pk]),
                {"step": "preview", "file": upload()})
    response = client.post(reverse("web-source-import", args=[source.pk]),
                           {"step": "confirm", "sha256": "0" * 64}, follow=True)
    assert "no longer waiting" in html(response)
    assert StudyRecord.objects.count() == 0


def test_the_same_file_twice_is_refused_at_confirm(source, people):
    client = client_as(people.ana)
    digest = hashlib.sha256(GOOD_CSV).hexdigest()
    for expected in (3, 3):
        client.post(reverse("web-source-import", args=[source.pk]),
                    {"step": "preview", "file": upload()})
        response = client.post(reverse("web-source-import", args=[source.pk]),
                               {"step": "confirm", "sha256": digest})
        assert StudyRecord.objects.count() == expected
    assert response.status_code == 409
    assert "was already imported into this source" in html(response)


def test_an_oversized_upload_is_refused_before_it_is_read(source, people):
    big = b"date,signal,state\n" + b"2021-03-01,good,hot\n" * (WEB_IMPORT_MAX_BYTES // 20 + 1)
    response = client_as(people.ana).post(reverse("web-source-import", args=[source.pk]),
                                          {"step": "preview", "file": upload(big)})
    assert response.status_code == 400
    assert "import a larger file through the API" in errors_of(html(response), "file")
    assert StudyRecord.objects.count() == 0


def test_a_body_far_above_the_limit_is_refused_from_its_declared_length(source, people):
    big = b"date,signal,state\n" + b"2021-03-01,good,hot\n" * (WEB_IMPORT_MAX_BYTES // 10)
    response = client_as(people.ana).post(reverse("web-source-import", args=[source.pk]),
                                          {"step": "preview", "file": upload(big)})
    assert response.status_code == 400
    problems = re.search(r'<ul class="import-problems">(.*?)</ul>', html(response), re.S).group(1)
    assert f"file: larger than {WEB_IMPORT_MAX_BYTES:,} bytes" in problems
    assert StudyRecord.objects.count() == 0 and PENDING not in client_as(people.ana).session


def test_the_demo_csv_previews_thirty_rows(source, people):
    source = tellurion_source(people, with_records=False)
    response = client_as(people.ana).post(
        reverse("web-source-import", args=[source.pk]),
        {"step": "preview", "file": upload(TELLURION_CSV.read_bytes(), "tellurion_records.csv")})
    assert "30 records will be imported" in html(response)


# ---- the decision page: apply a source, compare claimed and calibrated ------------------------

def test_apply_source_form_saves_a_version_and_shows_the_comparison(source, people):
    decision = draft_with(people, survey_table())
    client = client_as(people.ana)
    page = html(client.get(reverse("web-decision", args=[decision.pk])))
    assert "Take a study's likelihoods from a source" in page
    decision.refresh_from_db()
    response = client.post(reverse("web-apply-source", args=[decision.pk]), {
        "etag": decision.etag, "study": "Survey", "source": source.pk, "mode": "calibrated"})
    assert response.status_code == 302
    version = decision.current_version()
    assert version.number == 2
    study = version.results["studies"][0]
    assert study["source"]["accuracy"] == "calibrated" and study["source"]["id"] == source.pk
    page = html(client.get(reverse("web-decision", args=[decision.pk])))
    comparison = page.split('id="sources-h"')[1].split("</table>")[0]
    # No records: the calibrated accuracy is the claim. SURVEY_TABLE by hand (exact
    # fractions, tests/test_outcomes.py): with the survey 4,420,000 before its cost,
    # without 3,000,000: EVSI 1,420,000, net value 1,320,000 both ways.
    assert comparison.count('<td class="num">1,420,000 EUR</td>') == 2
    assert comparison.count('<td class="num">1,320,000 EUR</td>') == 2
    assert "flips the recommendation" not in page


def test_calibrated_accuracy_that_flips_the_recommendation_is_flagged(people):
    source = tellurion_source(people)
    decision = draft_with(people, heating_table())
    sources.apply_source_to_study(actor=people.ana, decision=decision,
                                  study_name="Tellurion seismic survey", source=source,
                                  mode="claimed", if_match=decision.etag)
    page = html(client_as(people.vic).get(reverse("web-decision", args=[decision.pk])))
    # tests/test_calibration_flip.py checks this flip with exact fractions.
    assert "The calibrated accuracy flips the recommendation." in page
    assert "no longer pays for itself" in page
    assert "Take a study" not in page  # the viewer saves no versions


def test_apply_source_with_a_stale_page_keeps_the_choice_and_says_why(source, people):
    decision = draft_with(people, survey_table())
    response = client_as(people.ana).post(reverse("web-apply-source", args=[decision.pk]), {
        "etag": '"stale"', "study": "Survey", "source": source.pk, "mode": "calibrated"})
    assert response.status_code == 412
    page = html(response)
    assert "has changed since you read it" in page
    assert 'value="calibrated" id="id_mode_1" checked' in page or \
        re.search(r'value="calibrated"[^>]*checked', page)
    assert decision.versions.count() == 1


@pytest.mark.parametrize(("who", "code"), [("vic", 403), ("omar", 404)])
def test_viewer_and_outsider_cannot_apply_a_source(source, people, who, code):
    decision = draft_with(people, survey_table())
    response = client_as(getattr(people, who)).post(
        reverse("web-apply-source", args=[decision.pk]),
        {"etag": decision.etag, "study": "Survey", "source": source.pk, "mode": "claimed"})
    assert response.status_code == code
    if who == "vic":
        assert "needs the role" in html(response)
    assert decision.versions.count() == 1


# ---- anonymous posts, CSRF on the decision page's form, the caution and the nav ---------------

@pytest.mark.parametrize("route", ["web-source-record", "web-source-import"])
def test_anonymous_posts_are_sent_to_sign_in(source, route):
    response = client_as().post(reverse(route, args=[source.pk]), {"step": "preview"})
    assert response.status_code == 302 and response["Location"].startswith("/login/?next=")
    assert StudyRecord.objects.count() == 0


def test_anonymous_apply_source_is_sent_to_sign_in(source, people):
    decision = draft_with(people, survey_table())
    response = client_as().post(reverse("web-apply-source", args=[decision.pk]),
                                {"etag": decision.etag, "study": "Survey", "source": source.pk})
    assert response.status_code == 302 and response["Location"].startswith("/login/?next=")
    assert decision.versions.count() == 1


def test_apply_source_needs_the_csrf_token(source, people):
    decision = draft_with(people, survey_table())
    client = client_as(people.ana, enforce_csrf_checks=True)
    response = client.post(reverse("web-apply-source", args=[decision.pk]), {
        "etag": decision.etag, "study": "Survey", "source": source.pk, "mode": "claimed"})
    assert response.status_code == 403
    assert decision.versions.count() == 1


def test_new_pages_carry_the_caution_and_the_nav_links(source, people):
    client = client_as(people.ana)
    pages = [html(client.get(reverse("web-sources"))),
             html(client.post(reverse("web-source-import", args=[source.pk]),
                              {"step": "preview", "file": upload()}))]
    for page in pages:
        assert CAUTION in page
        assert f'href="{reverse("web-sources")}">Sources</a>' in page
        assert f'href="{reverse("web-portfolio")}">Portfolio</a>' in page


# ---- pages that must not fail on what the register accepted ----------------------------------

def test_a_claimed_zero_contradicted_by_a_record_shows_a_dash_and_why(people):
    source = sources.create_source(actor=people.ana, team=people.team, name="Never poor when hot",
                                   claimed=NEVER_POOR_WHEN_HOT)
    sources.add_record(actor=people.ana, source=source, date="2024-01-01", signal="poor",
                       state="hot")
    response = client_as(people.vic).get(reverse("web-source", args=[source.pk]) + "?window=1")
    assert response.status_code == 200
    page = html(response)
    scores = page.split('id="accuracy-h"')[1].split('id="trend-h"')[0]
    row = re.search(r"Log score \(higher is better\)</th><td class=\"num\">(.*?)</td>", scores)
    assert row and row.group(1) == "—"
    assert ("A score shown as — is not a finite number: minus infinity: a state that came true "
            "had been given probability 0.") in scores
    assert "could not be computed" not in page


def test_a_claim_with_a_signal_no_state_gives_is_refused_on_the_page(people):
    data = create_post(people, **{"claim-0-0": "1", "claim-0-1": "0", "claim-1-0": "1",
                                  "claim-1-1": "0"})
    response = client_as(people.ana).post(reverse("web-sources"), data)
    assert response.status_code == 400
    assert ("claimed: signal &#x27;poor&#x27; has probability 0 in every state: no state could "
            "give it") in html(response)
    assert StudySource.objects.count() == 0


def test_a_long_record_shows_its_trend_with_the_step_used(source, people):
    import_many(people, source, 5_010)  # 5,001 windows of 10 at step 1: one too many
    response = client_as(people.vic).get(reverse("web-source", args=[source.pk]))
    assert response.status_code == 200
    page = html(response)
    trend = page.split('id="trend-h"')[1].split('id="records-h"')[0]
    assert "could not be computed" not in page
    assert "Not every window is shown: windows end every 2 records" in trend
    assert trend.count('<td class="date">') == 2 * 40  # TREND_ROWS newest of 2,501 windows
    assert "2461 earlier windows not listed." in trend
