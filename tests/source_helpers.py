"""Shared data for the study-source and outcome tests (all invented, built in code).

``SURVEY_TABLE`` is a small invented payoff table with one study, worked by
hand in tests/test_outcomes.py; ``committed(...)`` takes a decision through the
register's own services from draft to committed.
"""

from __future__ import annotations

import copy
import datetime
import io
import json
from pathlib import Path

from decisions.services import decisions as svc
from decisions.services import signoff, sources
from decisions.services.locking import IF_MATCH_ANY
from tests.personas import PASSWORD

FIXTURES = Path(__file__).resolve().parent.parent / "fixtures"
TELLURION_CSV = FIXTURES / "tellurion_records.csv"

# Invented: two states, two alternatives, one survey (hand-worked in test_outcomes.py).
SURVEY_TABLE = {
    "kind": "payoff_table",
    "title": "Heat source with a survey (invented test model)",
    "currency": "EUR",
    "objective": "max",
    "states": [{"name": "hot", "probability": 0.4}, {"name": "cold", "probability": 0.6}],
    "alternatives": [
        {"name": "Deep well", "payoffs": {"hot": 9000000, "cold": -1000000}},
        {"name": "Stay on gas", "payoffs": {"hot": 2500000, "cold": 2500000}},
    ],
    "studies": [{
        "name": "Survey", "cost": 100000, "signals": ["good", "poor"],
        "likelihoods": {"hot": {"good": 0.9, "poor": 0.1}, "cold": {"good": 0.2, "poor": 0.8}},
    }],
}
SURVEY_CLAIM = {"hot": {"good": 0.9, "poor": 0.1}, "cold": {"good": 0.2, "poor": 0.8}}


def survey_table() -> dict:
    return copy.deepcopy(SURVEY_TABLE)


def tellurion_claim() -> dict:
    return json.loads((FIXTURES / "tellurion_claimed.json").read_text(encoding="utf-8"))


def heating_table(*, only_tellurion: bool = True) -> dict:
    doc = json.loads((FIXTURES / "heating_payoff_table.json").read_text(encoding="utf-8"))
    if only_tellurion:
        doc["studies"] = [s for s in doc["studies"] if s["name"] == "Tellurion seismic survey"]
    return doc


def draft_with(people, document: dict, title: str = "Heat source (invented)"):
    decision = svc.create_decision(actor=people.ana, team=people.team, title=title,
                                   policy={"financial review": 1, "operations": 1})
    svc.save_version(decision.pk, actor=people.ana, document=document, change_note="v1",
                     if_match=IF_MATCH_ANY)
    decision.refresh_from_db()
    return decision


def approve_and_commit(people, decision, *, recommended: bool = True, alternative: str = "",
                       justification: str = ""):
    svc.submit_version(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    number = decision.current_version().number
    for user, role in ((people.fred, "financial review"), (people.olga, "operations")):
        signoff.sign(decision.pk, number, actor=user, password=PASSWORD, role=role,
                     meaning="approve", if_match=IF_MATCH_ANY)
    svc.record_strategy(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY,
                        recommended=recommended, alternative=alternative,
                        justification=justification)
    svc.commit_decision(decision.pk, actor=people.ana, if_match=IF_MATCH_ANY)
    decision.refresh_from_db()
    return decision


def committed(people, document: dict | None = None, **strategy):
    return approve_and_commit(people, draft_with(people, document or survey_table()), **strategy)


def survey_source(people, name: str = "Survey firm (invented)"):
    return sources.create_source(actor=people.ana, team=people.team, name=name,
                                 claimed=copy.deepcopy(SURVEY_CLAIM))


def tellurion_source(people, *, with_records: bool = True):
    source = sources.create_source(actor=people.ana, team=people.team,
                                   name="Tellurion Surveys (invented)", claimed=tellurion_claim())
    if with_records:
        with TELLURION_CSV.open("rb") as fh:
            sources.import_records(actor=people.ana, source=source, file=fh,
                                   filename="tellurion_records.csv")
    return source


# Invented: a claim that rates "poor" impossible when the state is hot (a claimed 0).
NEVER_POOR_WHEN_HOT = {"hot": {"good": 1.0, "poor": 0.0}, "cold": {"good": 0.2, "poor": 0.8}}


def many_records_csv(n: int) -> bytes:
    """``n`` invented records of the survey source, one a day from 2000-01-01, in bulk."""
    start = datetime.date(2000, 1, 1)
    lines = ["date,signal,state"] + [
        f"{start + datetime.timedelta(days=i)},{('good', 'poor')[i % 2]},{('hot', 'cold')[i % 3 % 2]}"
        for i in range(n)]
    return ("\n".join(lines) + "\n").encode("ascii")


def import_many(people, source, n: int) -> None:
    """Give ``source`` ``n`` records through the import service (one bulk insert)."""
    sources.import_records(actor=people.ana, source=source, file=io.BytesIO(many_records_csv(n)),
                           filename="many.csv")
