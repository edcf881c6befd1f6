"""The decision memo: its text, its determinism, every page rendering, the API and the command."""

from __future__ import annotations

import datetime as dt
import io
import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest
import time_machine
from django.core.management import CommandError, call_command
from django.urls import reverse
from pypdf import PdfReader

import valuation
from decisions.memo.build import CAUTION, build_memo
from decisions.models import AuditEvent
from decisions.services import decisions as svc
from decisions.services import signoff as signing
from decisions.services import sources
from decisions.services.errors import NotFoundError
from decisions.services.locking import IF_MATCH_ANY
from decisions.services.memo import SENSITIVITY_NODE_LIMIT, memo_for_version, sensitivity_data
from decisions.services.outcomes import record_outcome
from tests.personas import PASSWORD, small_table
from tests.test_drawings import big_tree, load
from valuation.canonical import sha256_hex
from valuation.sensitivity import TIE_RULE_NOTE

FROZEN = dt.datetime(2026, 12, 1, 9, 30, tzinfo=dt.UTC)


def text_of(pdf: bytes) -> str:
    """Every page's text, whitespace runs (line breaks included) read as one space."""
    reader = PdfReader(io.BytesIO(pdf))
    return " ".join(" ".join(page.extract_text().split()) for page in reader.pages)


def page_count(pdf: bytes) -> int:
    return len(PdfReader(io.BytesIO(pdf)).pages)


def cents(value) -> str:
    """The API's float as the memo prints it: rounded to the cent, thousands separated."""
    return f"{value:,.2f}"


def memo_url(decision_id, number) -> str:
    return reverse("version-memo", kwargs={"decision_pk": decision_id, "number": number})


@pytest.fixture
def approved(submitted, people):
    """ana's decision (invented) signed by fred and olga, then the team's own plan recorded."""
    for who, role in ((people.fred, "financial review"), (people.olga, "operations")):
        signing.sign(submitted.pk, 1, actor=who, password=PASSWORD, role=role,
                     meaning="approve", if_match=IF_MATCH_ANY)
    svc.record_strategy(submitted.pk, actor=people.ana, if_match=IF_MATCH_ANY, recommended=False,
                        alternative="Stay on gas",
                        justification="The board keeps gas until the grid contract ends <2028>.")
    submitted.refresh_from_db()
    return submitted


def demo_data(document: dict, **changes) -> dict:
    """Memo data built in code, as the service would assemble it (invented people)."""
    results = valuation.evaluate(document)
    data = {
        "decision": {"id": 7, "title": "Heat source (invented demo)",
                     "team": "Northfield Heat Cooperative (invented)", "status": "submitted"},
        "version": {"number": 3, "content_sha256": sha256_hex(document),
                    "results_sha256": sha256_hex(results), "created_at": "2026-11-30 10:00:00 UTC",
                    "author": "ana", "change_note": "survey added"},
        "generated_at": "2026-12-01 09:30:00 UTC",
        "audit_head": {"seq": 12, "hash": "c" * 64},
        "document": document, "results": results, "strategy": None,
        "signoffs": [], "policy": {"roles": {"operations": {"required": 1, "signed": 0,
                                                            "signers": []}}, "met": False},
    }
    data.update(changes)
    return data


# ---- the memo's text, through the API ---------------------------------------------------------

@pytest.mark.django_db
def test_memo_text_holds_title_hashes_api_figures_signoffs_caution_and_page_numbers(
        approved, people, client_for):
    client = client_for(people.ana)
    api = client.get(reverse("version-detail", kwargs={"decision_pk": approved.pk, "number": 1}))
    version = api.json()
    results = version["results"]
    response = client.get(memo_url(approved.pk, 1))
    assert response.status_code == 200
    text = text_of(response.content)

    assert "Heat source (invented)" in text
    assert version["content_sha256"] in text
    assert AuditEvent.objects.order_by("-seq").first().hash in text
    # Figures as the API gives them, to the cent (SMALL_TABLE: 0.4 x 9M + 0.6 x -1M = 3.0M).
    assert cents(results["expected_value"]) == "3,000,000.00"
    for figure in (results["expected_value"], results["without_information"]["expected_value"],
                   results["evpi"], *(a["expected_value"] for a in results["alternatives"])):
        assert cents(figure) in text, figure
    # The risk profile is the chosen plan's: gas pays 2.5M whatever the state.
    assert "the outcome of the chosen plan ('Stay on gas')" in text
    assert "Worst Expected Best Probability of loss 2,500,000.00 EUR 2,500,000.00 EUR " \
           "2,500,000.00 EUR 0.0%" in text
    # The chosen plan differs: the justification and the value given up (3.0M - 2.5M).
    strategy = client.get(reverse("decision-strategy", kwargs={"pk": approved.pk})).json()[0]
    assert "Chosen plan (differs from the recommended one). Stay on gas" in text
    assert "The board keeps gas until the grid contract ends <2028>." in text
    assert cents(strategy["value_given_up"]) == "500,000.00"
    assert "Value given up against the recommended plan: 500,000.00 EUR" in text
    # Sign-offs: printed names, roles, meanings, times and the hash each binds to.
    for s in version["signoffs"]:
        signed = dt.datetime.fromisoformat(s["signed_at"].replace("Z", "+00:00"))
        assert s["signer_printed_name"] in text
        assert f"{s['role']} {s['meaning']} {signed:%Y-%m-%d %H:%M:%S} UTC" in text
        assert f"bound to SHA-256 {s['bound_sha256']}" in text
    assert "Every sign-off the policy asks for has been given." in text
    assert CAUTION in text
    pages = page_count(response.content)
    assert f"page 1 of {pages}" in text and f"page {pages} of {pages}" in text


@pytest.mark.django_db
def test_memo_lists_pending_roles_before_everyone_has_signed(submitted, people):
    signing.sign(submitted.pk, 1, actor=people.fred, password=PASSWORD, role="financial review",
                 meaning="approve", if_match=IF_MATCH_ANY)
    text = text_of(memo_for_version(people.vic, submitted.pk, 1))
    assert "Fred Finance" in text
    assert "Pending: operations — 1 more sign-off." in text
    assert "No plan has been recorded on this version yet." in text


@pytest.mark.django_db
def test_study_figures_match_the_api_to_the_cent(draft, people, client_for):
    svc.save_version(draft.pk, actor=people.ana, document=load("heating_payoff_table.json"),
                     if_match=IF_MATCH_ANY)
    client = client_for(people.ana)
    results = client.get(reverse("version-detail",
                                 kwargs={"decision_pk": draft.pk, "number": 2})).json()["results"]
    text = text_of(client.get(memo_url(draft.pk, 2)).content)
    # 1,010,000 / 780,000 / 840,000 are the invented demo's figures (exact in fractions).
    assert cents(results["expected_value"]) == "1,010,000.00"
    assert cents(results["evpi"]) == "840,000.00"
    for study in results["studies"]:
        for key in ("cost", "evsi", "net_value", "max_fee"):
            assert cents(study[key]) in text, (study["name"], key)
        for signal, value in study["value_by_signal"].items():
            assert cents(value) in text, signal
        for signal, p in study["signal_probabilities"].items():
            assert f"{signal} {p:.4f}" in text
    assert "Bayesian revision" in text and "Tellurion seismic survey" in text


# ---- determinism ----------------------------------------------------------------------------------

@pytest.mark.django_db
def test_two_generations_at_the_same_time_give_identical_bytes(approved, people):
    with time_machine.travel(FROZEN, tick=False):
        first = memo_for_version(people.ana, approved.pk, 1)
        second = memo_for_version(people.bea, approved.pk, 1)
    assert first == second
    assert "Generated 2026-12-01 09:30:00 UTC" in text_of(first)
    with time_machine.travel(FROZEN + dt.timedelta(hours=1), tick=False):
        later = memo_for_version(people.ana, approved.pk, 1)
    assert later != first
    assert "Generated 2026-12-01 10:30:00 UTC" in text_of(later)
    # the generation time lives in the text only: PDF dates are reportlab's invariant ones
    assert b"20261201" not in first


def test_build_memo_is_pure_and_repeatable():
    data = demo_data(load("heating_tree.json"))
    assert build_memo(data) == build_memo(json.loads(json.dumps(data)))


# ---- sections from plain data ----------------------------------------------------------------------

def test_names_outside_the_standard_fonts_do_not_crash_the_memo():
    doc = small_table(title="Wärme (invented)")
    data = demo_data(doc, decision={"id": 7, "title": "Ciepło dla Łodzi 供暖 (invented)",
                                    "team": "Zespół Łódź", "status": "submitted"},
                     signoffs=[{"printed_name": "Łukasz 张伟", "role": "operations",
                                "meaning": "approve", "signed_at": "2026-11-30 11:00:00 UTC",
                                "bound_sha256": sha256_hex(doc), "reason": ""}])
    text = text_of(build_memo(data))
    assert "Cieplo dla Lodzi [U+4F9B][U+6696] (invented)" in text
    assert "Lukasz [U+5F20][U+4F1F]" in text


def test_without_sensitivity_data_the_section_says_it_was_not_computed():
    text = text_of(build_memo(demo_data(small_table())))
    assert "Sensitivity Sensitivity not computed." in text


def test_sensitivity_section_shows_break_evens_from_the_data():
    # Break-even of P(hot) for SMALL_TABLE: 0.4 is the base; the well beats gas when
    # 9M p - 1M (1 - p) >= 2.5M, i.e. p >= 0.35 (exact: 3.5 / 10).
    data = demo_data(small_table(), sensitivity={
        "tornado": [{"name": "states[0].probability", "label": "P(hot)", "kind": "probability",
                     "low": 0.3, "high": 0.5, "value_low": 2500000.0, "value_high": 4000000.0,
                     "swing": 1500000.0}],
        "one_way": [{"parameter": "states[0].probability", "label": "P(hot)",
                     "kind": "probability", "base": 0.4, "x": [0.0, 0.5, 1.0],
                     "value": [2500000.0, 4000000.0, 9000000.0],
                     "break_even": [{"value": 0.35, "from": "Stay on gas", "to": "Deep well"}]}]})
    text = text_of(build_memo(data))
    assert "Break-even values" in text
    assert "P(hot) 0.3500 Stay on gas Deep well" in text
    assert "P(hot) 0.3000 0.5000 2,500,000.00 4,000,000.00 1,500,000.00" in text


def _memo_text_with_break_even(break_even: dict) -> str:
    """The memo's text when one sweep of P(hot) has the one break-even given."""
    data = demo_data(small_table(), sensitivity={
        "tornado": [],
        "one_way": [{"parameter": "states[0].probability", "label": "P(hot)",
                     "kind": "probability", "base": 0.4, "x": [0.0, 1.0], "value": [1.0, 2.0],
                     "break_even": [break_even]}]})
    return text_of(build_memo(data))


def test_a_tie_rule_break_even_is_marked_and_explained():
    text = _memo_text_with_break_even({"value": 0.8, "from": "First", "to": "Later",
                                       "tie_rule": True})
    assert "P(hot) 0.8000 (tie rule) First Later" in text
    assert " ".join(TIE_RULE_NOTE.split()) in " ".join(text.split())


def test_an_exact_break_even_is_not_marked():
    text = _memo_text_with_break_even({"value": 0.35, "from": "Stay on gas", "to": "Deep well",
                                       "tie_rule": False})
    assert "P(hot) 0.3500 Stay on gas Deep well" in text
    assert "(tie rule)" not in text


def test_sources_and_outcomes_are_printed_when_given():
    calibration = valuation.reliability.calibrate(
        {"hot reservoir": {"favourable": 0.85, "unfavourable": 0.15},
         "cold reservoir": {"favourable": 0.2, "unfavourable": 0.8}}, [])
    data = demo_data(load("heating_payoff_table.json"),
                     sources=[{"name": "Tellurion Surveys (invented)",
                               "study": "Tellurion seismic survey", "calibration": calibration}],
                     outcomes={"rows": [{"label": "Reservoir found", "expected": 1010000.0,
                                         "realised": 480000.0, "regret": 200000.0}],
                               "regret": 200000.0})
    text = text_of(build_memo(data))
    assert "Study sources: claimed and calibrated accuracy" in text
    assert "Tellurion Surveys (invented)" in text
    # no records: the calibrated mean equals the claim (valuation.reliability docstring)
    assert "hot reservoir favourable 0.8500 0.8500" in text
    assert "Outcomes: expected and realised" in text
    assert "Reservoir found 1,010,000.00 480,000.00 -530,000.00 200,000.00" in text
    assert "Regret (value the best plan in hindsight would have added): 200,000.00 EUR." in text


def test_without_outcomes_or_sources_those_sections_are_absent():
    text = text_of(build_memo(demo_data(load("heating_payoff_table.json"))))
    assert "Outcomes: expected and realised" not in text
    assert "Study sources" not in text


@pytest.mark.django_db
def test_service_computes_sensitivity_or_says_why_not():
    doc = load("heating_tree.json")
    out = sensitivity_data(doc, valuation.evaluate(doc))
    assert out.get("tornado") or out.get("note")
    if out.get("tornado"):
        swings = [row["swing"] for row in out["tornado"]]
        assert swings == sorted(swings, reverse=True)


# ---- a large model -----------------------------------------------------------------------------------

def _render_every_page(pdf: bytes, tmp_path: Path) -> int:
    path = tmp_path / "memo.pdf"
    path.write_bytes(pdf)
    pages = page_count(pdf)
    if shutil.which("pdftoppm"):
        subprocess.run(["pdftoppm", "-png", "-r", "20", str(path), str(tmp_path / "page")],
                       check=True, capture_output=True, timeout=120)
        rendered = sorted(tmp_path.glob("page-*.png"))
        assert len(rendered) == pages
        assert all(p.stat().st_size > 0 for p in rendered)
    else:  # parse check: every page's content stream decodes and yields text
        for page in PdfReader(io.BytesIO(pdf)).pages:
            assert page.extract_text().strip()
    return pages


def test_a_500_node_model_gives_a_readable_memo_whose_every_page_renders(tmp_path):
    doc = big_tree(500)
    assert len(doc["nodes"]) == 500
    pdf = build_memo(demo_data(doc))
    pages = _render_every_page(pdf, tmp_path)
    text = text_of(pdf)
    assert pages > 3
    assert f"page {pages} of {pages}" in text
    assert "option 0 <i>&" in text  # labels with markup arrive as text
    # Every marker names the part and the page it continues on, and that page holds it.
    page_texts = [page.extract_text() for page in PdfReader(io.BytesIO(pdf)).pages]
    refs = re.findall(r"continued in part (\d+), p\. (\d+) »", " ".join(page_texts))
    assert len(refs) >= 5
    for part, page in refs:
        assert f"Part {part} of " in page_texts[int(page) - 1], (part, page)
    backs = re.findall(r"from part (\d+), p\. (\d+)", " ".join(page_texts))
    assert backs and all(f"Part {part} of " in page_texts[int(page) - 1] for part, page in backs)


@pytest.mark.slow
@pytest.mark.django_db
def test_memo_of_a_saved_500_node_version_renders(draft, people, tmp_path):
    svc.save_version(draft.pk, actor=people.ana, document=big_tree(500), if_match=IF_MATCH_ANY)
    pdf = memo_for_version(people.ana, draft.pk, 2)
    assert _render_every_page(pdf, tmp_path) > 3


# ---- the API endpoint --------------------------------------------------------------------------------

@pytest.mark.django_db
def test_owner_downloads_the_memo_as_a_pdf_attachment(draft, people, client_for):
    response = client_for(people.ana).get(memo_url(draft.pk, 1))
    assert response.status_code == 200
    assert response["Content-Type"] == "application/pdf"
    assert response["Content-Disposition"] == \
        f'attachment; filename="decision-{draft.pk}-version-1-memo.pdf"'
    assert response.content.startswith(b"%PDF-")


@pytest.mark.django_db
def test_a_viewer_of_the_team_may_read_the_memo(draft, people, client_for):
    assert client_for(people.vic).get(memo_url(draft.pk, 1)).status_code == 200


@pytest.mark.django_db
def test_user_of_another_team_gets_404(draft, people, client_for):
    response = client_for(people.omar).get(memo_url(draft.pk, 1))
    assert response.status_code == 404
    assert response["Content-Type"].startswith("application/json")
    assert b"Heat source" not in response.content


@pytest.mark.django_db
def test_anonymous_user_is_refused(draft, client_for):
    assert client_for(None).get(memo_url(draft.pk, 1)).status_code in (401, 403)


@pytest.mark.django_db
def test_missing_version_gets_404_in_json_even_when_a_pdf_is_asked_for(draft, people, client_for):
    response = client_for(people.ana).get(memo_url(draft.pk, 9), HTTP_ACCEPT="application/pdf")
    assert response.status_code == 404
    assert response.json()["errors"] == [{"location": "number", "message": "version 9: not found"}]


@pytest.mark.django_db
def test_service_refuses_a_foreign_decision(draft, people):
    with pytest.raises(NotFoundError, match="decision: not found"):
        memo_for_version(people.omar, draft.pk, 1)


# ---- the command ---------------------------------------------------------------------------------------

@pytest.mark.django_db
def test_command_writes_the_memo_file(draft, people, tmp_path):
    svc.save_version(draft.pk, actor=people.ana, document=small_table(title="v2 (invented)"),
                     if_match=IF_MATCH_ANY)
    out = tmp_path / "memo.pdf"
    stdout = io.StringIO()
    call_command("decision_memo", str(draft.pk), "-o", str(out), stdout=stdout)
    assert out.read_bytes().startswith(b"%PDF-")
    assert "version 2" in stdout.getvalue()          # the current version by default
    call_command("decision_memo", str(draft.pk), "--version", "1", "-o", str(out), stdout=stdout)
    version1 = draft.versions.get(number=1)
    assert version1.content_sha256 in text_of(out.read_bytes())
    assert [p.name for p in tmp_path.iterdir()] == ["memo.pdf"]   # no temporary file left


@pytest.mark.django_db
def test_command_names_a_missing_decision_or_version(draft, tmp_path):
    out = tmp_path / "memo.pdf"
    with pytest.raises(CommandError, match="decision: decision 999999: not found"):
        call_command("decision_memo", "999999", "-o", str(out))
    with pytest.raises(CommandError, match="number: version 5: not found"):
        call_command("decision_memo", str(draft.pk), "--version", "5", "-o", str(out))
    assert not out.exists()


# ---- outcomes and study sources read from the records -------------------------------------------------

@pytest.mark.django_db
def test_memo_shows_expected_vs_realised_and_regret_once_an_outcome_is_recorded(approved, people):
    svc.commit_decision(approved.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    before = text_of(memo_for_version(people.ana, approved.pk, 1))
    assert "Outcomes: expected and realised" not in before
    # The reservoir proved hot; the team stayed on gas (its chosen plan) and made 2.4M.
    record_outcome(approved.pk, actor=people.ana, if_match=IF_MATCH_ANY, path={"a1": "hot"},
                   realised_value=2400000, note="invented outcome")
    text = text_of(memo_for_version(people.ana, approved.pk, 1))
    assert "Outcomes: expected and realised" in text
    # expected 2.5M (gas, every state), realised 2.4M, difference -0.1M; with hindsight of a
    # hot reservoir the deep well pays 9M: regret 9M - 2.5M = 6.5M (SMALL_TABLE's payoffs).
    assert "Chosen plan 2,500,000.00 2,400,000.00 -100,000.00 6,500,000.00" in text
    assert "Regret (value the best plan in hindsight would have added): 6,500,000.00 EUR." in text
    assert "The model gave what happened a probability of 0.4000." in text


@pytest.mark.django_db
def test_memo_shows_claimed_and_calibrated_accuracy_of_a_study_source(draft, people):
    svc.save_version(draft.pk, actor=people.ana, document=load("heating_payoff_table.json"),
                     if_match=IF_MATCH_ANY)
    claimed = json.loads((Path(__file__).resolve().parent.parent / "fixtures"
                          / "tellurion_claimed.json").read_text())
    source = sources.create_source(actor=people.ana, team=people.team,
                                   name="Tellurion Surveys (invented)", claimed=claimed)
    for signal, state in (("favourable", "cold reservoir"), ("favourable", "hot reservoir")):
        sources.add_record(actor=people.ana, source=source, date="2025-05-01", signal=signal,
                           state=state)
    version = sources.apply_source_to_study(actor=people.ana, decision=draft,
                                            study_name="Tellurion seismic survey", source=source,
                                            mode="claimed", if_match=IF_MATCH_ANY)
    text = text_of(memo_for_version(people.ana, draft.pk, version.number))
    assert "Study sources: claimed and calibrated accuracy" in text
    assert "Tellurion Surveys (invented) (study 'Tellurion seismic survey')" in text
    assert "Calibrated from 2 past studies; the claim counts as 10 studies of each state." in text
    # hot reservoir -> favourable: Beta prior 8.5 + 1 record of 1 -> mean 9.5 / 11
    # (Dirichlet count-adding, Gelman et al. 2013, sec. 3.4)
    assert f"hot reservoir favourable 0.8500 {9.5 / 11:.4f}" in text
    assert "Study 'Tellurion seismic survey': net value" in text


def test_certainty_equivalent_is_shown_when_a_risk_tolerance_is_set():
    doc = load("heating_payoff_table.json")
    results = valuation.evaluate(doc, risk_tolerance=2_000_000)
    text = text_of(build_memo(demo_data(doc, results=results)))
    assert f"Certainty equivalent (risk tolerance 2,000,000.00 EUR) " \
           f"{cents(results['certainty_equivalent'])} EUR" in text


def test_a_plan_in_words_only_keeps_the_recommended_risk_profile_and_says_so():
    doc = small_table()
    data = demo_data(doc, strategy={"recommended": False, "plan": {"source": "team",
                     "alternative": None, "text": "Lease a mobile boiler for two winters"},
                     "justification": "Bridges the tender (invented).", "value_given_up": 1.5,
                     "chosen_by": "ana", "chosen_at": "2026-12-01 08:00:00 UTC"})
    text = text_of(build_memo(data))
    assert "Lease a mobile boiler for two winters" in text
    assert "Value given up against the recommended plan: 1.50 EUR." in text
    assert "the recommended plan (the chosen plan is described in words only" in text


def test_revision_tables_follow_the_document_order_not_the_stored_key_order():
    doc = load("heating_payoff_table.json")
    data = demo_data(doc)
    for study in data["results"]["studies"]:   # as jsonb might hand them back: keys re-sorted
        study["signal_probabilities"] = dict(sorted(study["signal_probabilities"].items()))
        study["joint"] = dict(sorted(study["joint"].items()))
    text = text_of(build_memo(data))
    assert text.index("hot 0.3500") < text.index("lukewarm 0.2100") < text.index("cold 0.4400")
    assert text.index("hot reservoir 0.4000") < text.index("cold reservoir 0.6000")


def test_sensitivity_is_not_computed_for_a_model_above_the_limit_and_the_memo_says_so():
    doc = big_tree(SENSITIVITY_NODE_LIMIT + 50)
    out = sensitivity_data(doc, {})
    assert "tornado" not in out
    assert out["note"].startswith(f"The model has more than {SENSITIVITY_NODE_LIMIT:,} nodes")
    text = text_of(build_memo(demo_data(small_table(), sensitivity=out)))
    assert f"Sensitivity not computed. The model has more than {SENSITIVITY_NODE_LIMIT:,}" in text


@pytest.mark.django_db
def test_memo_downloads_beyond_the_rate_get_429_with_retry_after(draft, people, client_for,
                                                                 monkeypatch):
    from rest_framework.throttling import ScopedRateThrottle

    monkeypatch.setattr(ScopedRateThrottle, "THROTTLE_RATES",
                        {**ScopedRateThrottle.THROTTLE_RATES, "memo": "2/min"})
    ana = client_for(people.ana)
    assert [ana.get(memo_url(draft.pk, 1)).status_code for _ in range(2)] == [200, 200]
    refused = ana.get(memo_url(draft.pk, 1))
    assert refused.status_code == 429
    assert int(refused["Retry-After"]) > 0
    # the allowance is per user: a colleague is not held back by ana's downloads
    assert client_for(people.vic).get(memo_url(draft.pk, 1)).status_code == 200
