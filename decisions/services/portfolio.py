"""The team's portfolio: expected vs realised, calibration of its probabilities,
and each study source's calibrated accuracy against its claim.

Every figure over decisions is computed by the database (``SUM``, ``AVG``,
``COUNT``, ``GROUP BY``) over the outcome rows in force and the
``OutcomeForecast`` rows stored when each outcome was recorded, so the number
of queries does not grow with the number of decisions. Python loops only over
the (few) bins, distinct probabilities and sources.

Calibration of binary forecasts: every branch of every chance node on a
realised path is one forecast ``p`` with outcome 1 if that branch happened,
else 0. Brier score ``mean((p - o)^2)`` (Brier 1950, today's one-category
form); Murphy's partition by distinct forecast value (Murphy 1973); the binned
table as in ``valuation.reliability.calibration_table`` (equal-width bins,
``[lower, upper)``, the last bin includes 1).
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from django.db.models import Avg, Count, ExpressionWrapper, F, FloatField, Sum, Value
from django.db.models.functions import Floor, Least, Round

from decisions.models import Outcome, OutcomeForecast, Role, StudyRecord, StudySource, Team
from decisions.services.access import require_role, visible_teams
from decisions.services.errors import InvalidInput, NotFoundError
from valuation.errors import ModelValidationError
from valuation.reliability import Record, calibrate

__all__ = ["DEFAULT_BINS", "portfolio", "resolve_team"]

DEFAULT_BINS = 10
_EVERY_ROLE = [r.value for r in Role]


def resolve_team(user, team_id) -> Team:
    """The team asked for; without one, the user's only team."""
    teams = visible_teams(user)
    if team_id in (None, ""):
        mine = list(teams[:2])
        if len(mine) != 1:
            raise InvalidInput("give the team's id (you belong to "
                               f"{'no team' if not mine else 'several teams'})", location="team")
        return mine[0]
    try:
        return teams.get(pk=int(team_id))
    except (Team.DoesNotExist, ValueError, TypeError):
        raise NotFoundError("team: not found", location="team") from None


def portfolio(user, team, *, bins: int = DEFAULT_BINS) -> dict[str, Any]:
    """Portfolio figures of ``team`` for a member of it (see the module notes)."""
    team_id = getattr(team, "pk", team)
    require_role(user, team_id, _EVERY_ROLE, "see the portfolio")
    if isinstance(bins, bool) or not isinstance(bins, int) or not 1 <= bins <= 100:
        raise InvalidInput(f"must be a whole number from 1 to 100, got {bins!r}", location="bins")
    current = Outcome.objects.filter(decision__team_id=team_id, superseded_by__isnull=True)

    # Sums per currency: adding euros to pounds would be meaningless.
    totals = [
        {"currency": row["currency"], "decisions": row["decisions"],
         "expected": row["expected"], "realised": row["realised"],
         "realised_minus_expected": row["realised"] - row["expected"],
         "mean_probability_of_what_happened": row["mean_path_probability"]}
        for row in current.values("currency").annotate(
            decisions=Count("decision_id", distinct=True), expected=Sum("expected_value"),
            realised=Sum("realised_value"), mean_path_probability=Avg("path_probability"),
        ).order_by("currency")
    ]

    forecasts = OutcomeForecast.objects.filter(outcome__in=current.values("pk"))
    sq_error = ExpressionWrapper((F("probability") - F("happened")) * (F("probability") -
                                                                      F("happened")),
                                 output_field=FloatField())
    overall = forecasts.aggregate(n=Count("id"), brier=Avg(sq_error), base=Avg("happened"))
    # floor(p * bins) puts a forecast on an edge in the bin above it; rounding to 9
    # places first keeps 0.3 * 10 = 3.0000000000000004 from drifting (as the core does).
    bin_expr = Least(Floor(Round(F("probability") * Value(float(bins)), 9)),
                     Value(float(bins - 1)), output_field=FloatField())
    by_bin = {
        int(row["bin"]): row
        for row in forecasts.annotate(bin=bin_expr).values("bin").annotate(
            count=Count("id"), mean_forecast=Avg("probability"), observed=Avg("happened"),
        ).order_by("bin")
    }
    table = []
    for b in range(bins):
        row = by_bin.get(b)
        table.append({"lower": b / bins, "upper": (b + 1) / bins,
                      "count": row["count"] if row else 0,
                      "mean_forecast": row["mean_forecast"] if row else None,
                      "observed_frequency": row["observed"] if row else None})
    n = overall["n"]
    calibration: dict[str, Any] = {"forecasts": n, "brier": overall["brier"], "table": table}
    if n:
        base = overall["base"]
        distinct = list(forecasts.values("probability").annotate(k=Count("id"),
                                                                 o=Avg("happened")))
        calibration["reliability"] = sum(r["k"] * (r["probability"] - r["o"]) ** 2
                                         for r in distinct) / n
        calibration["resolution"] = sum(r["k"] * (r["o"] - base) ** 2 for r in distinct) / n
        calibration["uncertainty"] = base * (1.0 - base)
    return {"team": team_id, "totals": totals, "calibration": calibration,
            "sources": _sources(team_id),
            "caution": ("These figures are model outputs resting on stated assumptions; weigh "
                        "them with professional judgment and your organisation's own rules.")}


def _sources(team_id: int) -> list[dict[str, Any]]:
    """Each source's calibrated accuracy against its claim, from counts grouped in SQL."""
    sources = list(StudySource.objects.filter(team_id=team_id).order_by("name"))
    counts: dict[int, list[tuple[str, str, int]]] = {}
    for row in (StudyRecord.objects.filter(source__team_id=team_id)
                .values("source_id", "state", "signal").annotate(n=Count("id"))):
        counts.setdefault(row["source_id"], []).append((row["state"], row["signal"], row["n"]))
    out = []
    day = dt.date(2000, 1, 1)  # the calibration uses counts only; dates play no part
    for source in sources:
        records = [Record(day, signal, state) for state, signal, k in counts.get(source.pk, [])
                   for _ in range(k)]
        try:
            cal = calibrate(source.claimed, records, prior_strength=source.prior_strength)
        except ModelValidationError as exc:
            out.append({"id": source.pk, "name": source.name, "error": str(exc)})
            continue
        states = {}
        for state, block in cal["states"].items():
            top = block["most_likely_signal"]
            cell = block["signals"][top]
            states[state] = {"signal": top, "claimed": cell["claimed"],
                             "observed": cell["observed"], "posterior_mean": cell["posterior_mean"],
                             "interval_90": cell.get("interval_90"), "records": block["records"],
                             "prob_below_claim": block["prob_below_claim"]}
        out.append({"id": source.pk, "name": source.name, "records": cal["records"],
                    "prior_strength": source.prior_strength, "states": states})
    return out
