"""The full workflow through the API on the invented demo scenario (fixtures/)."""

import json
from pathlib import Path

import pytest

from decisions.models import AuditEvent, Decision, SignOff
from decisions.services.audit import verify_chain
from tests.personas import PASSWORD, small_table

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
pytestmark = pytest.mark.django_db


def _doc(name="heating_payoff_table.json"):
    return json.loads((FIXTURES / name).read_text(encoding="utf-8"))


def test_decision_goes_from_draft_to_closed_with_every_step_audited(people, client_for):
    ana, fred, olga = client_for(people.ana), client_for(people.fred), client_for(people.olga)
    events_before = AuditEvent.objects.count()

    r = ana.post("/api/decisions/", {"team": people.team.pk, "title": "Heat source",
                                     "policy": {"financial review": 1, "operations": 1}},
                 format="json")
    assert r.status_code == 201, r.data
    pk, etag = r.data["id"], r["ETag"]
    assert r.data["status"] == "draft"

    r = ana.post(f"/api/decisions/{pk}/versions/", {"document": _doc(), "change_note": "v1"},
                 format="json", HTTP_IF_MATCH=etag)
    assert r.status_code == 201, r.data
    assert r.data["number"] == 1 and len(r.data["content_sha256"]) == 64
    assert r.data["results"]["policy"]["text"]
    etag = r["ETag"]

    r = ana.post(f"/api/decisions/{pk}/submit/", HTTP_IF_MATCH=etag)
    assert r.status_code == 200, r.data
    assert r.data["status"] == "submitted"
    etag = r["ETag"]

    r = fred.post(f"/api/decisions/{pk}/versions/1/signoffs/",
                  {"role": "financial review", "meaning": "approve", "password": PASSWORD},
                  format="json", HTTP_IF_MATCH=etag)
    assert r.status_code == 201, r.data
    assert r.data["signer_printed_name"] == "Fred Finance"
    assert "Fred Finance (financial review) — approve — " in r.data["manifestation"]
    etag = r["ETag"]
    assert Decision.objects.get(pk=pk).status == "submitted"  # operations still missing

    r = olga.post(f"/api/decisions/{pk}/versions/1/signoffs/",
                  {"role": "operations", "meaning": "approve", "password": PASSWORD},
                  format="json", HTTP_IF_MATCH=etag)
    assert r.status_code == 201, r.data
    etag = r["ETag"]
    assert Decision.objects.get(pk=pk).status == "approved"

    r = ana.post(f"/api/decisions/{pk}/strategy/", {"recommended": False,
                 "alternative": "Stay on gas", "justification": "board prefers low risk"},
                 format="json", HTTP_IF_MATCH=etag)
    assert r.status_code == 201, r.data
    version = Decision.objects.get(pk=pk).current_version()
    alts = {a["name"]: a["expected_value"] for a in version.results["alternatives"]}
    assert r.data["value_given_up"] == pytest.approx(
        version.results["expected_value"] - alts["Stay on gas"])
    etag = r["ETag"]

    r = ana.post(f"/api/decisions/{pk}/commit/", HTTP_IF_MATCH=etag)
    assert r.status_code == 200 and r.data["status"] == "committed", r.data
    r = ana.post(f"/api/decisions/{pk}/close/", {"note": "built"}, format="json",
                 HTTP_IF_MATCH=r["ETag"])
    assert r.status_code == 200 and r.data["status"] == "closed", r.data

    actions = list(AuditEvent.objects.filter(seq__gt=events_before).values_list("action",
                                                                               flat=True))
    assert actions == ["decision.create", "version.create", "decision.submit", "signoff.approve",
                       "signoff.approve", "strategy.record", "decision.commit", "decision.close"]
    assert verify_chain().ok


def test_reject_sends_the_decision_back_to_draft_until_a_new_version(submitted, people,
                                                                      client_for):
    fred, ana = client_for(people.fred), client_for(people.ana)
    r = fred.post(f"/api/decisions/{submitted.pk}/versions/1/signoffs/",
                  {"role": "financial review", "meaning": "reject", "password": PASSWORD,
                   "reason": "discount rate missing"}, format="json",
                  HTTP_IF_MATCH=submitted.etag)
    assert r.status_code == 201, r.data
    assert r.data["meaning"] == "reject" and r.data["reason"] == "discount rate missing"
    r = ana.post(f"/api/decisions/{submitted.pk}/submit/", HTTP_IF_MATCH=r["ETag"])
    assert r.status_code == 409
    assert r.data["errors"] == [{"location": "versions", "message":
                                 "decision: version 1 was rejected; save a new version before "
                                 "submitting again"}]


def test_new_version_voids_the_signoffs_of_the_earlier_one(submitted, people, client_for):
    fred, ana = client_for(people.fred), client_for(people.ana)
    r = fred.post(f"/api/decisions/{submitted.pk}/versions/1/signoffs/",
                  {"role": "financial review", "meaning": "approve", "password": PASSWORD},
                  format="json", HTTP_IF_MATCH=submitted.etag)
    assert r.status_code == 201
    doc = small_table()
    doc["states"][0]["probability"], doc["states"][1]["probability"] = 0.5, 0.5
    doc["alternatives"][1]["payoffs"]["hot"] = 2600000
    r = ana.post(f"/api/decisions/{submitted.pk}/versions/",
                 {"document": doc, "change_note": "survey revised"}, format="json",
                 HTTP_IF_MATCH=r["ETag"])
    assert r.status_code == 201, r.data
    decision = Decision.objects.get(pk=submitted.pk)
    assert decision.status == "draft"
    r = ana.get(f"/api/decisions/{submitted.pk}/policy/")
    assert r.data["roles"]["financial review"]["signed"] == 0
    assert SignOff.objects.filter(version__decision=decision).count() == 1  # kept on record
    r = ana.get(f"/api/decisions/{submitted.pk}/versions/1/diff/2/")
    assert r.status_code == 200
    assert r.data["summary"]["probabilities"] == 2
    assert r.data["summary"]["payoffs"] == 1


def test_results_are_those_computed_when_the_version_was_saved(draft, people, client_for,
                                                               monkeypatch):
    import valuation

    saved = client_for(people.vic).get(f"/api/decisions/{draft.pk}/versions/1/").data["results"]
    # A later change in the core must not alter what was signed.
    monkeypatch.setattr(valuation, "evaluate", lambda doc, **kw: {"expected_value": -1.0})
    again = client_for(people.vic).get(f"/api/decisions/{draft.pk}/versions/1/").data["results"]
    assert again == saved and saved["expected_value"] == pytest.approx(3.0e6)
