"""End to end: a source that claims more accuracy than its record shows flips a decision.

The invented demo source "Tellurion Surveys (invented)" claims P(favourable |
hot reservoir) = 0.85 and P(favourable | cold reservoir) = 0.20
(fixtures/tellurion_claimed.json). Its thirty invented past studies
(fixtures/tellurion_records.csv) say 8 of 13 favourable when hot and 6 of 17
when cold. With the default prior strength (10 studies per state, the core's
documented default) the calibrated accuracy is 33/46 and 8/27.

On the invented heating model (fixtures/heating_payoff_table.json, with only
the Tellurion survey kept as the study) the figures, worked by hand with exact
fractions below, are:

- claimed: EVSI 450,000, net value 230,000 (the survey costs 220,000): buy it;
- calibrated: EVSI 211,497.58, net value -8,502.42: it no longer pays; the
  recommendation flips to no study and the shallow ground loop.

The draft is taken through the API as a user would; the flip is not tuned for:
the default prior strength and the fixture records give it as they are.
"""

from __future__ import annotations

from fractions import Fraction

import pytest

from decisions.models import Decision
from tests.source_helpers import TELLURION_CSV, heating_table, tellurion_claim

pytestmark = pytest.mark.django_db

PAYOFFS = {  # fixtures/heating_payoff_table.json (invented)
    "Deep geothermal well": (3_000_000, -1_500_000),
    "Shallow ground loop": (900_000, 700_000),
    "Stay on gas": (0, 0),
}
PRIOR_HOT = Fraction(2, 5)


def _exact_evsi(p_fav_hot: Fraction, p_fav_cold: Fraction) -> Fraction:
    """Preposterior analysis with exact fractions (common practice: EVSI = E[max after the
    signal] - max before it)."""
    def best(p_hot_weight: Fraction, p_cold_weight: Fraction) -> Fraction:
        return max(p_hot_weight * hot + p_cold_weight * cold for hot, cold in PAYOFFS.values())

    prior_cold = 1 - PRIOR_HOT
    with_info = best(PRIOR_HOT * p_fav_hot, prior_cold * p_fav_cold) + best(
        PRIOR_HOT * (1 - p_fav_hot), prior_cold * (1 - p_fav_cold))
    return with_info - best(PRIOR_HOT, prior_cold)


def test_thirty_records_flip_the_recommendation_from_buying_the_survey(people, client_for):
    ana = client_for(people.ana)
    # The source and its invented record, through the API.
    r = ana.post("/api/sources/", {"team": people.team.pk, "name": "Tellurion Surveys (invented)",
                                   "claimed": tellurion_claim()}, format="json")
    assert r.status_code == 201, r.data
    source_id = r.data["id"]
    with TELLURION_CSV.open("rb") as fh:
        r = ana.post(f"/api/sources/{source_id}/import/", {"file": fh}, format="multipart")
    assert r.status_code == 201, r.data
    assert r.data["records"] == 30

    r = ana.get(f"/api/sources/{source_id}/")
    cal = r.data["calibration"]["states"]
    assert cal["hot reservoir"]["signals"]["favourable"]["observed"] == pytest.approx(8 / 13)
    assert cal["hot reservoir"]["signals"]["favourable"]["posterior_mean"] == pytest.approx(33 / 46)
    assert cal["hot reservoir"]["prob_below_claim"] > 0.9

    # A new draft that takes the source's claimed accuracy.
    r = ana.post("/api/decisions/", {"team": people.team.pk, "title": "East network (invented)",
                                     "policy": {"financial review": 1}}, format="json")
    pk, etag = r.data["id"], r["ETag"]
    r = ana.post(f"/api/decisions/{pk}/versions/", {"document": heating_table()}, format="json",
                 HTTP_IF_MATCH=etag)
    assert r.status_code == 201, r.data
    r = ana.post(f"/api/decisions/{pk}/apply-source/",
                 {"study": "Tellurion seismic survey", "source": source_id, "mode": "claimed"},
                 format="json", HTTP_IF_MATCH=r["ETag"])
    assert r.status_code == 201, r.data
    claimed_evsi = _exact_evsi(Fraction(85, 100), Fraction(20, 100))
    assert claimed_evsi == 450_000  # hand-worked: 1,230,000 - 780,000
    assert r.data["evsi"] == pytest.approx(float(claimed_evsi))
    assert r.data["net_value"] == pytest.approx(230_000)
    assert r.data["policy"].startswith("Commission 'Tellurion seismic survey'")

    # The comparison on that version flags the flip.
    r = ana.get(f"/api/decisions/{pk}/versions/2/sources-comparison/")
    assert r.status_code == 200, r.data
    (study,) = r.data["studies"]
    calibrated_evsi = _exact_evsi(Fraction(33, 46), Fraction(8, 27))
    assert study["claimed"]["evsi"] == pytest.approx(450_000)
    assert study["calibrated"]["evsi"] == pytest.approx(float(calibrated_evsi))
    assert float(calibrated_evsi) == pytest.approx(211_497.584541, abs=1e-5)
    assert study["calibrated"]["net_value"] == pytest.approx(float(calibrated_evsi) - 220_000)
    assert study["claimed"]["buys_study"] is True and study["calibrated"]["buys_study"] is False
    assert study["flips"] is True and r.data["flips"] is True
    assert study["message"].endswith("With the calibrated accuracy the study no longer pays for "
                                     "itself.")

    # Applying the calibrated accuracy: the new version no longer buys the survey.
    etag = Decision.objects.get(pk=pk).etag
    r = ana.post(f"/api/decisions/{pk}/apply-source/",
                 {"study": "Tellurion seismic survey", "source": source_id, "mode": "calibrated"},
                 format="json", HTTP_IF_MATCH=etag)
    assert r.status_code == 201, r.data
    assert r.data["version"] == 3
    assert r.data["source"]["accuracy"] == "calibrated" and r.data["source"]["records"] == 30
    assert r.data["net_value"] == pytest.approx(-8_502.415459, abs=1e-5)
    assert r.data["policy"] == "Commission no study; choose 'Shallow ground loop'."
