"""Study sources through the services: creation rules, records, imports, calibration,
applying a source to a study and the claimed-vs-calibrated comparison.

Calibration figures are checked by exact count-adding (Gelman et al., *Bayesian
Data Analysis*, 3rd ed., 2013, sec. 3.4: Dirichlet prior + multinomial counts)
with ``fractions``; the core's own tests check the intervals against scipy.
"""

from __future__ import annotations

import hashlib
import io
import json
from fractions import Fraction

import pytest
from django.db import DatabaseError, transaction

from decisions.models import AuditEvent, StudyRecord, StudySource
from decisions.services import sources
from decisions.services.errors import ConflictError, ForbiddenError, InvalidInput, NotFoundError
from decisions.services.locking import IF_MATCH_ANY
from tests.source_helpers import (
    TELLURION_CSV,
    draft_with,
    heating_table,
    survey_source,
    survey_table,
    tellurion_claim,
    tellurion_source,
)

pytestmark = pytest.mark.django_db


def test_a_source_takes_its_states_and_signals_from_the_claim(people):
    source = sources.create_source(actor=people.ana, team=people.team, name=" Geo lab (invented) ",
                                   claimed=tellurion_claim())
    assert source.name == "Geo lab (invented)"
    assert source.states == ["hot reservoir", "cold reservoir"]
    assert source.signals == ["favourable", "unfavourable"]
    assert source.prior_strength == 10.0  # valuation.reliability.DEFAULT_PRIOR_STRENGTH
    event = AuditEvent.objects.latest("seq")
    assert (event.action, event.object_id) == ("source.create", str(source.pk))


@pytest.mark.parametrize(("claimed", "strength", "problems"), [
    ({"hot": {"yes": 0.7, "no": 0.4}}, None,
     [("claimed['hot']", "probabilities must sum to 1 (within 1e-6), got 1.1")]),
    ({"hot": {"yes": 1.2, "no": -0.2}}, None,
     [("claimed['hot']['yes']", "must be within [0, 1], got 1.2"),
      ("claimed['hot']['no']", "must be within [0, 1], got -0.2")]),
    ([], None, [("claimed", "must be a non-empty mapping of state -> signal -> probability")]),
    ({"hot": {"yes": 0.5, "no": 0.5}}, 0, [("prior_strength", "must be within (0, 1,000,000], got 0")]),
    ({"hot": {"yes": 0.5, "no": 0.5}}, "ten", [("prior_strength", "must be a number, got 'ten'")]),
], ids=["row sum", "out of range", "not a table", "zero strength", "text strength"])
def test_a_bad_claim_is_refused_naming_the_cell_and_rule(people, claimed, strength, problems):
    with pytest.raises(InvalidInput) as err:
        sources.create_source(actor=people.ana, team=people.team, name="Lab (invented)",
                              claimed=claimed, prior_strength=strength)
    assert err.value.problems == problems
    assert not StudySource.objects.exists()


def test_source_names_are_unique_within_a_team_only(people):
    survey_source(people)
    with pytest.raises(ConflictError) as err:
        survey_source(people)
    assert str(err.value) == "name: a source named 'Survey firm (invented)' exists already in this team"
    sources.create_source(actor=people.omar, team=people.other_team, name="Survey firm (invented)",
                          claimed=tellurion_claim())


def test_only_analysts_create_sources_and_outsiders_see_nothing(people):
    with pytest.raises(ForbiddenError):
        sources.create_source(actor=people.fred, team=people.team, name="x", claimed=tellurion_claim())
    with pytest.raises(NotFoundError):
        sources.create_source(actor=people.omar, team=people.team, name="x", claimed=tellurion_claim())
    source = survey_source(people)
    assert list(sources.visible_sources(people.vic)) == [source]
    assert list(sources.visible_sources(people.omar)) == []
    with pytest.raises(NotFoundError):
        sources.get_source(people.omar, source.pk)


def test_a_manual_record_is_checked_against_the_source(people):
    source = survey_source(people)
    row = sources.add_record(actor=people.ana, source=source, date="2024-05-01", signal="good",
                             state="cold", note="invented")
    assert (row.origin, row.signal, row.state, str(row.date)) == ("manual", "good", "cold", "2024-05-01")
    with pytest.raises(InvalidInput) as err:
        sources.add_record(actor=people.ana, source=source, date="2024-02-30", signal="great",
                           state="cold")
    assert err.value.problems == [
        ("date", "not a valid calendar date, got '2024-02-30' (day is out of range for month)"),
        ("signal", "unknown signal 'great' (known: good, poor)"),
    ]
    with pytest.raises(InvalidInput) as err:
        sources.add_record(actor=people.ana, source=source, date="2999-01-01", signal="good",
                           state="cold")
    assert err.value.problems == [("date", "must not be in the future, got 2999-01-01")]
    with pytest.raises(ForbiddenError):
        sources.add_record(actor=people.vic, source=source, date="2024-05-01", signal="good",
                           state="cold")


def test_records_are_append_only_in_the_database(people):
    source = survey_source(people)
    row = sources.add_record(actor=people.ana, source=source, date="2024-05-01", signal="good",
                             state="cold")
    with pytest.raises(DatabaseError), transaction.atomic():
        StudyRecord.objects.filter(pk=row.pk).update(state="hot")
    with pytest.raises(DatabaseError), transaction.atomic():
        StudyRecord.objects.filter(pk=row.pk).delete()


def test_import_writes_every_record_and_one_event_with_the_file_hash(people):
    source = tellurion_source(people, with_records=False)
    before = AuditEvent.objects.count()
    data = TELLURION_CSV.read_bytes()
    summary = sources.import_records(actor=people.ana, source=source, file=io.BytesIO(data),
                                     filename="../../etc/passwd\x00.csv")
    assert summary["records"] == 30 and source.records.count() == 30
    assert summary["sha256"] == hashlib.sha256(data).hexdigest()
    assert summary["counts"] == {"hot reservoir": {"favourable": 8, "unfavourable": 5},
                                 "cold reservoir": {"favourable": 6, "unfavourable": 11}}
    assert summary["file"] == "passwd_.csv"  # a label, never a path
    assert AuditEvent.objects.count() == before + 1
    event = AuditEvent.objects.latest("seq")
    assert event.action == "source.import"
    assert event.payload["records"] == 30 and event.payload["sha256"] == summary["sha256"]
    assert set(source.records.values_list("origin", flat=True)) == {"import"}


def test_a_dry_run_checks_and_counts_but_writes_nothing(people):
    source = tellurion_source(people, with_records=False)
    before = AuditEvent.objects.count()
    summary = sources.import_records(actor=people.ana, source=source,
                                     file=io.BytesIO(TELLURION_CSV.read_bytes()), dry_run=True)
    assert summary["dry_run"] is True and summary["records"] == 30
    assert source.records.count() == 0 and AuditEvent.objects.count() == before


def test_the_same_file_is_not_imported_twice(people):
    source = tellurion_source(people)
    with pytest.raises(ConflictError) as err:
        sources.import_records(actor=people.ana, source=source,
                               file=io.BytesIO(TELLURION_CSV.read_bytes()))
    assert "was already imported into this source" in str(err.value)
    assert source.records.count() == 30


def test_calibration_matches_exact_count_adding(people):
    source = tellurion_source(people)
    out = sources.calibration(source)
    lik = out["calibration"]["calibrated_likelihoods"]
    # Prior Dirichlet(0.85*10, 0.15*10) for "hot reservoir" plus counts (8, 5):
    # mean (8.5 + 8) / (10 + 13) = 33/46 (Gelman et al. 2013, sec. 3.4).
    assert lik["hot reservoir"]["favourable"] == pytest.approx(float(Fraction(33, 46)), abs=1e-12)
    # "cold reservoir": Dirichlet(2, 8) plus (6, 11): (2 + 6) / 27 = 8/27.
    assert lik["cold reservoir"]["favourable"] == pytest.approx(float(Fraction(8, 27)), abs=1e-12)
    assert out["calibration"]["records"] == 30
    assert out["scores"]["claimed"]["records"] == 30
    # Hit rate with the claim and a uniform prior: the posterior's most likely state is
    # "hot" after "favourable" (0.85 vs 0.20) and "cold" after "unfavourable" (0.15 vs
    # 0.80), so hits are 8 + 11 = 19 of 30 (counted from the fixture).
    assert out["scores"]["claimed"]["hit_rate"] == pytest.approx(19 / 30)
    assert len(out["trend"]["windows"]) == 21  # windows of 10 ending at records 10..30
    assert out["last_record"] == "2026-09-23"


def test_applying_a_source_freezes_the_numbers_and_says_which(people):
    source = tellurion_source(people)
    decision = draft_with(people, heating_table())
    version = sources.apply_source_to_study(actor=people.ana, decision=decision,
                                            study_name="Tellurion seismic survey", source=source,
                                            mode="calibrated", if_match=IF_MATCH_ANY)
    doc = json.loads(version.canonical_json)
    study = doc["studies"][0]
    assert study["likelihoods"]["hot reservoir"]["favourable"] == pytest.approx(33 / 46)
    assert {k: study["source"][k] for k in ("id", "name", "accuracy", "prior_strength", "records")} \
        == {"id": source.pk, "name": "Tellurion Surveys (invented)", "accuracy": "calibrated",
            "prior_strength": 10.0, "records": 30}
    assert version.number == 2 and "calibrated accuracy" in version.change_note
    # More records later do not change the saved version (reproducible).
    sources.add_record(actor=people.ana, source=source, date="2026-10-01", signal="favourable",
                       state="cold reservoir")
    version.refresh_from_db()
    assert json.loads(version.canonical_json)["studies"][0]["likelihoods"] == study["likelihoods"]


def test_a_source_must_speak_of_the_model_states_and_study_signals(people):
    source = survey_source(people)
    decision = draft_with(people, heating_table())
    with pytest.raises(InvalidInput) as err:
        sources.apply_source_to_study(actor=people.ana, decision=decision,
                                      study_name="Tellurion seismic survey", source=source,
                                      if_match=IF_MATCH_ANY)
    assert err.value.problems == [
        ("source", "the source speaks of the states hot, cold; the model has hot reservoir, "
                   "cold reservoir"),
        ("source", "the source's signals are good, poor; the study 'Tellurion seismic survey' "
                   "has favourable, unfavourable"),
    ]
    with pytest.raises(InvalidInput) as err:
        sources.apply_source_to_study(actor=people.ana, decision=decision, study_name="Nope",
                                      source=source, if_match=IF_MATCH_ANY)
    assert err.value.problems == [("study", "no study named 'Nope' in version 1 "
                                            "(studies: 'Tellurion seismic survey')")]
    with pytest.raises(InvalidInput) as err:
        sources.apply_source_to_study(actor=people.ana, decision=decision, study_name="Survey",
                                      source=source, mode="guessed", if_match=IF_MATCH_ANY)
    assert err.value.problems == [("mode", "must be 'claimed' or 'calibrated', got 'guessed'")]


def test_another_teams_source_cannot_be_applied(people):
    foreign = sources.create_source(actor=people.omar, team=people.other_team, name="Foreign",
                                    claimed={"hot": {"good": 0.9, "poor": 0.1},
                                             "cold": {"good": 0.2, "poor": 0.8}})
    decision = draft_with(people, survey_table())
    with pytest.raises(NotFoundError):
        sources.apply_source_to_study(actor=people.ana, decision=decision, study_name="Survey",
                                      source=foreign.pk, if_match=IF_MATCH_ANY)


def test_comparison_lists_unsourced_studies_without_figures(people):
    decision = draft_with(people, heating_table(only_tellurion=False))
    out = sources.claimed_vs_calibrated(decision.current_version())
    assert [s["study"] for s in out["studies"]] == ["Tellurion seismic survey",
                                                    "Exploratory borehole"]
    assert all(s["note"] == "no study source is linked to this study" for s in out["studies"])
    assert out["flips"] is False


def test_the_prior_strength_limit_is_the_cores_and_holds_at_its_edge(people):
    from valuation.reliability import MAX_PRIOR_STRENGTH

    assert sources.MAX_PRIOR_STRENGTH is MAX_PRIOR_STRENGTH == 1_000_000.0
    source = sources.create_source(actor=people.ana, team=people.team, name="Edge (invented)",
                                   claimed=tellurion_claim(), prior_strength=1_000_000)
    assert source.prior_strength == 1_000_000.0
    with pytest.raises(InvalidInput) as err:
        sources.create_source(actor=people.ana, team=people.team, name="Over (invented)",
                              claimed=tellurion_claim(), prior_strength=1_000_000.5)
    assert err.value.problems == [("prior_strength",
                                   "must be within (0, 1,000,000], got 1000000.5")]
