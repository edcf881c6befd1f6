"""The study-source, outcome, review and portfolio endpoints: who may do what, and
bad inputs answered with the field and the rule (status, location, message)."""

from __future__ import annotations

import io

import pytest

from decisions.models import StudyRecord, StudySource
from tests.source_helpers import (
    NEVER_POOR_WHEN_HOT,
    TELLURION_CSV,
    committed,
    draft_with,
    import_many,
    survey_source,
    survey_table,
    tellurion_claim,
    tellurion_source,
)

pytestmark = pytest.mark.django_db

MEMBERS = ["ana", "fred", "olga", "bea", "vic"]
OUTCOME = {"path": {"study0/signal": "good", "study0/g0/a0": "cold"}, "realised_value": -1300000,
           "note": "invented"}


def _csv(text: str, name: str = "records.csv"):
    f = io.BytesIO(text.encode("utf-8"))
    f.name = name
    return f


# ---- who sees what ----------------------------------------------------------------------

@pytest.mark.parametrize("url", [
    "/api/sources/", "/api/sources/{s}/", "/api/sources/{s}/records/",
    "/api/decisions/{d}/outcome/", "/api/decisions/{d}/review/",
    "/api/decisions/{d}/versions/1/sources-comparison/", "/api/portfolio/?team={t}",
])
def test_anonymous_users_are_refused_everywhere(people, client_for, url):
    source, decision = survey_source(people), draft_with(people, survey_table())
    r = client_for(None).get(url.format(s=source.pk, d=decision.pk, t=people.team.pk))
    assert r.status_code in (401, 403)


@pytest.mark.parametrize("url", [
    "/api/sources/{s}/", "/api/sources/{s}/records/", "/api/decisions/{d}/outcome/",
    "/api/decisions/{d}/review/", "/api/decisions/{d}/versions/1/sources-comparison/",
    "/api/portfolio/?team={t}",
])
def test_a_user_of_another_team_gets_404(people, client_for, url):
    source, decision = survey_source(people), draft_with(people, survey_table())
    r = client_for(people.omar).get(url.format(s=source.pk, d=decision.pk, t=people.team.pk))
    assert r.status_code == 404
    assert "Survey firm" not in str(r.data)


def test_outsiders_cannot_write_to_another_teams_source_or_decision(people, client_for):
    source, decision = survey_source(people), committed(people)
    omar = client_for(people.omar)
    assert omar.post(f"/api/sources/{source.pk}/records/", {"date": "2024-01-01", "signal": "good",
                     "state": "hot"}, format="json").status_code == 404
    assert omar.post(f"/api/sources/{source.pk}/import/",
                     {"file": _csv("date,signal,state\n2024-01-01,good,hot\n")},
                     format="multipart").status_code == 404
    assert omar.post(f"/api/decisions/{decision.pk}/outcome/", OUTCOME, format="json",
                     HTTP_IF_MATCH="*").status_code == 404
    assert omar.post(f"/api/decisions/{decision.pk}/apply-source/",
                     {"study": "Survey", "source": source.pk}, format="json",
                     HTTP_IF_MATCH="*").status_code == 404
    r = omar.post("/api/sources/", {"team": people.team.pk, "name": "x",
                                    "claimed": tellurion_claim()}, format="json")
    assert r.status_code == 404
    assert StudyRecord.objects.count() == 0 and StudySource.objects.count() == 1


@pytest.mark.parametrize("username", MEMBERS)
def test_every_member_reads_sources_reviews_and_the_portfolio(people, client_for, username):
    source = tellurion_source(people)
    decision = committed(people)
    client_for(people.ana).post(f"/api/decisions/{decision.pk}/outcome/", OUTCOME, format="json",
                                HTTP_IF_MATCH=decision.etag)
    c = client_for(getattr(people, username))
    r = c.get("/api/sources/")
    assert r.status_code == 200 and [s["name"] for s in r.data["results"]] == [source.name]
    assert r.data["results"][0]["records"] == 30
    r = c.get(f"/api/sources/{source.pk}/?window=5")
    assert r.status_code == 200 and r.data["trend"]["window"] == 5
    assert r.data["calibration"]["records"] == 30
    assert c.get(f"/api/sources/{source.pk}/records/").data["count"] == 30
    r = c.get(f"/api/decisions/{decision.pk}/review/")
    assert r.status_code == 200 and r.data["hindsight"]["regret"] == pytest.approx(3_600_000)
    r = c.get(f"/api/portfolio/?team={people.team.pk}")
    assert r.status_code == 200 and r.data["totals"][0]["decisions"] == 1


@pytest.mark.parametrize(("username", "code"), [("ana", 201), ("fred", 403), ("olga", 403),
                                                ("bea", 403), ("vic", 403)])
def test_only_analysts_create_sources_add_records_and_import(people, client_for, username, code):
    c = client_for(getattr(people, username))
    r = c.post("/api/sources/", {"team": people.team.pk, "name": f"Lab of {username} (invented)",
                                 "claimed": tellurion_claim()}, format="json")
    assert r.status_code == code, r.data
    source = tellurion_source(people, with_records=False)
    r = c.post(f"/api/sources/{source.pk}/records/",
               {"date": "2024-01-01", "signal": "favourable", "state": "hot reservoir"}, format="json")
    assert r.status_code == code, r.data
    with TELLURION_CSV.open("rb") as fh:
        r = c.post(f"/api/sources/{source.pk}/import/", {"file": fh}, format="multipart")
    assert r.status_code == code, r.data
    if code == 403:
        assert r.data["code"] == "forbidden"
        assert r.data["errors"] == [{"location": "", "message":
                                     "import records into a study source: needs the role "
                                     f"'analyst' in this team; you are '{people.team.memberships.get(user=getattr(people, username)).role}'"}]


@pytest.mark.parametrize(("username", "code"), [("ana", 201), ("fred", 403), ("vic", 403)])
def test_only_analysts_record_outcomes(people, client_for, username, code):
    decision = committed(people)
    r = client_for(getattr(people, username)).post(f"/api/decisions/{decision.pk}/outcome/",
                                                   OUTCOME, format="json",
                                                   HTTP_IF_MATCH=decision.etag)
    assert r.status_code == code, r.data


# ---- requests and their answers ---------------------------------------------------------

def test_recording_an_outcome_needs_the_etag_and_returns_a_new_one(people, client_for):
    decision = committed(people)
    ana = client_for(people.ana)
    r = ana.post(f"/api/decisions/{decision.pk}/outcome/", OUTCOME, format="json")
    assert r.status_code == 428 and r.data["errors"][0]["location"] == "If-Match"
    r = ana.post(f"/api/decisions/{decision.pk}/outcome/", OUTCOME, format="json",
                 HTTP_IF_MATCH='"decision-0-0"')
    assert r.status_code == 412
    r = ana.post(f"/api/decisions/{decision.pk}/outcome/", OUTCOME, format="json",
                 HTTP_IF_MATCH=decision.etag)
    assert r.status_code == 201, r.data
    assert r.data["path_probability"] == pytest.approx(0.12)
    assert r["ETag"] != decision.etag
    r = ana.get(f"/api/decisions/{decision.pk}/outcome/")
    assert r.data["current"]["realised_value"] == -1300000 and r.data["history"] == []


@pytest.mark.parametrize(("body", "errors"), [
    ({**OUTCOME, "path": {"study0/signal": "superb", "study0/g0/a0": "cold"}},
     [{"location": "path.study0/signal", "message": "unknown branch 'superb' (branches: good, poor)"}]),
    ({**OUTCOME, "realised_value": "lots"},
     [{"location": "realised_value", "message": "A valid number is required."}]),
    ({**OUTCOME, "status": "closed"},
     [{"location": "status", "message": "is not an accepted field here"}]),
    ({"realised_value": 1}, [{"location": "path", "message": "This field is required."}]),
], ids=["unknown branch", "not a number", "unknown field", "missing path"])
def test_bad_outcomes_are_answered_with_field_and_rule(people, client_for, body, errors):
    decision = committed(people)
    r = client_for(people.ana).post(f"/api/decisions/{decision.pk}/outcome/", body, format="json",
                                    HTTP_IF_MATCH=decision.etag)
    assert r.status_code == 400 and r.data["errors"] == errors


def test_outcome_on_a_draft_is_a_conflict(people, client_for):
    decision = draft_with(people, survey_table())
    r = client_for(people.ana).post(f"/api/decisions/{decision.pk}/outcome/", OUTCOME,
                                    format="json", HTTP_IF_MATCH=decision.etag)
    assert r.status_code == 409
    assert r.data["errors"] == [{"location": "status", "message": "decision: an outcome is recorded "
                                 "for a committed decision, not a draft one"}]


def test_review_before_an_outcome_is_404_with_a_reason(people, client_for):
    r = client_for(people.vic).get(f"/api/decisions/{committed(people).pk}/review/")
    assert r.status_code == 404
    assert r.data["errors"] == [{"location": "outcome",
                                 "message": "none recorded for this decision yet"}]


@pytest.mark.parametrize(("body", "errors"), [
    ({"team": 1, "name": "x", "claimed": {"hot": {"yes": 0.7, "no": 0.4}}},
     [{"location": "claimed['hot']", "message": "probabilities must sum to 1 (within 1e-6), got 1.1"}]),
    ({"team": 1, "name": "", "claimed": {"hot": {"yes": 0.5, "no": 0.5}}},
     [{"location": "name", "message": "This field may not be blank."}]),
    ({"team": 1, "name": "x", "claimed": {"hot": {"yes": 0.5, "no": 0.5}}, "prior_strength": -1},
     [{"location": "prior_strength", "message": "must be within (0, 1,000,000], got -1"}]),
], ids=["row sum", "blank name", "negative strength"])
def test_bad_sources_are_answered_with_field_and_rule(people, client_for, body, errors):
    body = {**body, "team": people.team.pk}
    r = client_for(people.ana).post("/api/sources/", body, format="json")
    assert r.status_code == 400 and r.data["errors"] == errors


def test_a_bad_upload_lists_every_line_and_imports_nothing(people, client_for):
    source = tellurion_source(people, with_records=False)
    text = ("date,signal,state\n2024-01-01,favourable,hot reservoir\n"
            "2024-01-02,superb,hot reservoir\n2024-13-01,favourable,cold reservoir\n")
    r = client_for(people.ana).post(f"/api/sources/{source.pk}/import/", {"file": _csv(text)},
                                    format="multipart")
    assert r.status_code == 400
    assert r.data["errors"] == [
        {"location": "line 3", "message": "signal: unknown signal 'superb' (known: favourable, "
                                          "unfavourable)"},
        {"location": "line 4", "message": "date: not a valid calendar date, got '2024-13-01' "
                                          "(month must be in 1..12)"},
    ]
    assert source.records.count() == 0


def test_a_dry_run_upload_counts_and_writes_nothing(people, client_for):
    source = tellurion_source(people, with_records=False)
    with TELLURION_CSV.open("rb") as fh:
        r = client_for(people.ana).post(f"/api/sources/{source.pk}/import/?dry_run=1",
                                        {"file": fh}, format="multipart")
    assert r.status_code == 200 and r.data["dry_run"] is True and r.data["records"] == 30
    assert source.records.count() == 0
    r = client_for(people.ana).post(f"/api/sources/{source.pk}/import/?dry_run=maybe",
                                    {"file": _csv("date,signal,state\n")}, format="multipart")
    assert r.status_code == 400
    assert r.data["errors"] == [{"location": "dry_run",
                                 "message": "must be 1 or 0 (true or false), got 'maybe'"}]


def test_an_upload_without_a_file_or_too_large_is_refused(people, client_for):
    source = tellurion_source(people, with_records=False)
    ana = client_for(people.ana)
    r = ana.post(f"/api/sources/{source.pk}/import/", {}, format="multipart")
    assert r.status_code == 400
    assert r.data["errors"] == [{"location": "file",
                                 "message": "send the CSV as the multipart field 'file'"}]
    big = _csv("date,signal,state\n" + "2024-01-01,favourable,hot reservoir\n" * 1_400_000)
    assert len(big.getvalue()) > 50_000_000
    r = ana.post(f"/api/sources/{source.pk}/import/", {"file": big}, format="multipart")
    assert r.status_code == 400
    assert r.data["errors"][0]["location"] == "file"
    assert r.data["errors"][0]["message"].startswith("larger than 16,777,216 bytes")
    assert source.records.count() == 0


def test_manual_record_errors_name_the_field(people, client_for):
    source = survey_source(people)
    r = client_for(people.ana).post(f"/api/sources/{source.pk}/records/",
                                    {"date": "yesterday", "signal": "good", "state": "warm"},
                                    format="json")
    assert r.status_code == 400
    assert r.data["errors"] == [
        {"location": "date", "message": "must be a date in the form YYYY-MM-DD, got 'yesterday'"},
        {"location": "state", "message": "unknown state 'warm' (known: hot, cold)"},
    ]


def test_apply_source_saves_a_version_and_reports_its_figures(people, client_for):
    source = survey_source(people)
    decision = draft_with(people, survey_table())
    r = client_for(people.ana).post(f"/api/decisions/{decision.pk}/apply-source/",
                                    {"study": "Survey", "source": source.pk, "mode": "claimed"},
                                    format="json", HTTP_IF_MATCH=decision.etag)
    assert r.status_code == 201, r.data
    assert r.data["version"] == 2 and r.data["source"]["accuracy"] == "claimed"
    assert r.data["evsi"] == pytest.approx(1_420_000)  # 4,420,000 - 3,000,000 (test_outcomes)
    r = client_for(people.vic).post(f"/api/decisions/{decision.pk}/apply-source/",
                                    {"study": "Survey", "source": source.pk}, format="json",
                                    HTTP_IF_MATCH="*")
    assert r.status_code == 403
    r = client_for(people.ana).post(f"/api/decisions/{decision.pk}/apply-source/",
                                    {"study": "Survey", "source": source.pk, "mode": "hopeful"},
                                    format="json", HTTP_IF_MATCH="*")
    assert r.status_code == 400 and r.data["errors"][0]["location"] == "mode"


def test_portfolio_needs_a_team_id_unless_the_user_has_exactly_one_team(people, client_for):
    r = client_for(people.sam).get("/api/portfolio/")
    assert r.status_code == 400
    assert r.data["errors"] == [{"location": "team", "message": "give the team's id (you belong "
                                                                "to no team)"}]
    r = client_for(people.ana).get("/api/portfolio/?bins=500")
    assert r.status_code == 400 and r.data["errors"][0]["location"] == "bins"


def test_the_record_exports_as_csv_that_reimports_and_runs_no_formula(people, client_for):
    source = tellurion_source(people)
    client_for(people.ana).post(f"/api/sources/{source.pk}/records/",
                                {"date": "2026-10-01", "signal": "favourable",
                                 "state": "cold reservoir", "note": "=HYPERLINK(\"x\")"},
                                format="json")
    r = client_for(people.vic).get(f"/api/sources/{source.pk}/records.csv")
    assert r.status_code == 200 and r["Content-Type"].startswith("text/csv")
    lines = r.content.decode("utf-8").splitlines()
    assert lines[0] == "date,signal,state,origin,decision,note"
    assert lines[1] == "2019-02-27,unfavourable,cold reservoir,import,,imported from tellurion_records.csv"
    assert lines[-1] == "2026-10-01,favourable,cold reservoir,manual,,\"'=HYPERLINK(\"\"x\"\")\""
    assert len(lines) == 32
    assert client_for(people.omar).get(f"/api/sources/{source.pk}/records.csv").status_code == 404


# ---- reads that must not fail on what the register accepted ------------------------------

MINUS_INFINITY = "minus infinity: a state that came true had been given probability 0"


def test_a_claimed_zero_contradicted_by_a_record_reads_as_null_with_a_note(people, client_for):
    ana = client_for(people.ana)
    r = ana.post("/api/sources/", {"team": people.team.pk, "name": "Never poor when hot",
                                   "claimed": NEVER_POOR_WHEN_HOT}, format="json")
    assert r.status_code == 201, r.data
    sid = r.data["id"]
    r = ana.post(f"/api/sources/{sid}/records/", {"date": "2024-01-01", "signal": "poor",
                                                  "state": "hot"}, format="json")
    assert r.status_code == 201, r.data
    r = ana.get(f"/api/sources/{sid}/")
    assert r.status_code == 200
    # The claim gives hot probability 0 after "poor" (Bayes: 0.5 * 0 / (0.5 * 0 + 0.5 * 0.8)),
    # and hot came true: log 0 is minus infinity, which JSON cannot carry.
    assert r.data["scores"]["claimed"]["log_score"] is None
    assert r.data["scores"]["calibrated"]["log_score"] is not None  # floored claim: finite
    assert r.data["non_finite"]["fields"] == ["scores.claimed.log_score"]
    assert r.data["non_finite"]["meaning"] == MINUS_INFINITY
    r = ana.get(f"/api/sources/{sid}/?window=1")
    assert r.status_code == 200
    assert r.data["trend"]["windows"][0]["log_score"] is None
    assert r.data["non_finite"]["fields"] == ["scores.claimed.log_score",
                                              "trend.windows[0].log_score"]


def test_a_claim_with_a_signal_no_state_gives_is_refused_at_creation(people, client_for):
    never = {"hot": {"good": 1, "poor": 0}, "cold": {"good": 1, "poor": 0}}
    r = client_for(people.ana).post("/api/sources/", {"team": people.team.pk, "name": "Never poor",
                                                      "claimed": never}, format="json")
    assert r.status_code == 400
    assert r.data["errors"] == [{"location": "claimed", "message":
                                 "signal 'poor' has probability 0 in every state: no state could "
                                 "give it, and a record of it could not be scored; give it a "
                                 "probability above 0 in some state, or leave it out"}]
    assert StudySource.objects.count() == 0


def _even_claim(n_states: int, n_signals: int) -> dict:
    return {f"s{i}": {f"k{j}": 1 / n_signals for j in range(n_signals)} for i in range(n_states)}


@pytest.mark.parametrize(("at_limit", "over", "errors"), [
    (_even_claim(100, 2), _even_claim(101, 2),
     [{"location": "claimed", "message": "at most 100 states are allowed, got 101"}]),
    (_even_claim(2, 100), _even_claim(2, 101),
     [{"location": "claimed['s0']", "message": "at most 100 signals are allowed, got 101"},
      {"location": "claimed['s1']", "message": "at most 100 signals are allowed, got 101"}]),
    (_even_claim(100, 100), _even_claim(5_000, 2),
     [{"location": "claimed", "message": "at most 100 states are allowed, got 5,000"}]),
], ids=["states", "signals", "the probe's 5,000 states"])
def test_a_claim_holds_at_most_a_hundred_states_and_signals(people, client_for, at_limit, over,
                                                             errors):
    ana = client_for(people.ana)
    r = ana.post("/api/sources/", {"team": people.team.pk, "name": "Over", "claimed": over},
                 format="json")
    assert r.status_code == 400 and r.data["errors"] == errors
    assert StudySource.objects.count() == 0
    r = ana.post("/api/sources/", {"team": people.team.pk, "name": "At the limit",
                                   "claimed": at_limit}, format="json")
    assert r.status_code == 201, r.data
    assert ana.get(f"/api/sources/{r.data['id']}/").status_code == 200


def test_a_long_record_is_read_with_the_least_step_and_says_so(people, client_for):
    source = survey_source(people)
    import_many(people, source, 5_009)  # windows of 10: 5,000 at step 1, the limit
    vic = client_for(people.vic)
    r = vic.get(f"/api/sources/{source.pk}/")
    assert r.status_code == 200, r.data
    assert r.data["trend"]["step"] == 1 and len(r.data["trend"]["windows"]) == 5_000
    assert "step_note" not in r.data["trend"]
    client_for(people.ana).post(f"/api/sources/{source.pk}/records/",
                                {"date": "2024-01-01", "signal": "good", "state": "hot"},
                                format="json")
    r = vic.get(f"/api/sources/{source.pk}/")
    assert r.status_code == 200, r.data
    trend = r.data["trend"]
    # 5,010 records: 5,001 windows at step 1; the least step keeping to 5,000 is 2, which
    # makes ceil(5,001 / 2) = 2,501 windows, the last ending at the last record.
    assert trend["step"] == 2 and len(trend["windows"]) == 2_501
    assert trend["windows"][-1]["end_date"] == "2024-01-01"
    assert trend["step_note"] == (
        "windows end every 2 records, the least step that keeps the trend within 5,000 windows "
        "and 50,000 cells (windows x states x signals; step 1 would make 5,001 windows)")
    assert r.data["calibration"]["records"] == 5_010
