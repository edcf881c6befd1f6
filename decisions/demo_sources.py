"""Invented demo data for study sources and outcomes (called by ``load_demo``).

Everything here is invented: the survey firm "Tellurion Surveys (invented)",
its claimed accuracy (fixtures/tellurion_claimed.json), its thirty past studies
(fixtures/tellurion_records.csv, each row marked "invented demo record"), the
decisions and the money made or lost.

What it adds to the demo team:

- the source with its claim and the thirty records, imported from the CSV
  through the same service as an upload;
- a draft whose study takes the source's *claimed* accuracy, so the
  claimed-vs-calibrated comparison has something to show (with the record's
  calibrated accuracy the survey no longer pays for itself);
- a committed decision that bought the survey, with a recorded outcome: the
  survey said "favourable", the well was drilled and the reservoir came out
  cold (an invented loss), which also adds the 31st record to the source.
"""

from __future__ import annotations

import json
from pathlib import Path

from django.conf import settings

from decisions.services import decisions as svc
from decisions.services import outcomes, signoff, sources
from decisions.services.locking import IF_MATCH_ANY

__all__ = ["SOURCE_NAME", "load_demo_sources"]

SOURCE_NAME = "Tellurion Surveys (invented)"
STUDY = "Tellurion seismic survey"
FIXTURES = Path(settings.BASE_DIR) / "fixtures"


def _fixture(name: str):
    return FIXTURES / name


def load_demo_sources(*, team, users: dict, password: str) -> None:
    """Create the invented source, its records, a sourced draft and a reviewed decision.

    ``users`` maps the demo usernames (``ana``, ``fred``, ``olga``) to users;
    ``password`` is the demo password (signing asks for it again).
    """
    ana, fred, olga = users["ana"], users["fred"], users["olga"]
    claimed = json.loads(_fixture("tellurion_claimed.json").read_text(encoding="utf-8"))
    source = sources.create_source(actor=ana, team=team, name=SOURCE_NAME, claimed=claimed)
    with _fixture("tellurion_records.csv").open("rb") as fh:
        sources.import_records(actor=ana, source=source, file=fh,
                               filename="tellurion_records.csv")
    table = json.loads(_fixture("heating_payoff_table.json").read_text(encoding="utf-8"))
    policy = {"financial review": 1, "operations": 1}

    def sourced(title: str):
        d = svc.create_decision(actor=ana, team=team, title=title, policy=policy)
        svc.save_version(d.pk, actor=ana, document=table, change_note="survey as quoted",
                         source_note="Invented demo model", if_match=IF_MATCH_ANY)
        sources.apply_source_to_study(actor=ana, decision=d, study_name=STUDY, source=source,
                                      mode="claimed", if_match=IF_MATCH_ANY)
        return d

    # A draft: the comparison shows the calibrated accuracy flipping the recommendation.
    sourced("Heat source for the east network: survey or not? (invented)")

    # Committed in 2025 on the claimed accuracy; the outcome is recorded (invented).
    d = sourced("Deep well at the south field (invented)")
    svc.submit_version(d.pk, actor=ana, if_match=IF_MATCH_ANY)
    number = d.current_version().number
    for user, role in ((fred, "financial review"), (olga, "operations")):
        signoff.sign(d.pk, number, actor=user, password=password, role=role,
                     meaning="approve", if_match=IF_MATCH_ANY)
    svc.record_strategy(d.pk, actor=ana, if_match=IF_MATCH_ANY, recommended=True)
    svc.commit_decision(d.pk, actor=ana, if_match=IF_MATCH_ANY)
    outcomes.record_outcome(
        d.pk, actor=ana, if_match=IF_MATCH_ANY,
        path={"study0/signal": "favourable", "study0/g0/a0": "cold reservoir"},
        realised_value=-1_650_000,
        note="Invented: the survey read favourable, the well found a cold reservoir; the loss "
             "was smaller than modelled because the well was reused for a ground loop.")
