"""The team's portfolio: expected vs realised, calibration of its probabilities,
and each study source's calibrated accuracy against its claim.

Every sum over decisions is computed by the database (``SUM``, ``AVG``,
``COUNT``, ``GROUP BY``) over the outcome rows in force and the
``OutcomeForecast`` rows stored when each outcome was recorded, so the number
of queries does not grow with the number of decisions. The forecasts are read
once, grouped by distinct probability; the calibration figures follow from
those groups in Python (:func:`calibration_from_groups`), which loops only
over the (few) distinct probabilities, bins and sources.

Calibration of binary forecasts: every branch of every chance node on a
realised path is one forecast ``p`` with outcome 1 if that branch happened,
else 0. Brier score ``mean((p - o)^2)`` (Brier 1950, today's one-category
form); Murphy's partition by distinct forecast value (Murphy 1973); the binned
table as in ``valuation.reliability.calibration_table`` (equal-width bins,
``[lower, upper)``, the last bin includes 1).
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Any

import numpy as np
from django.db import DataError, transaction
from django.db.models import Avg, Count, Exists, OuterRef, Sum

from decisions.models import Outcome, OutcomeForecast, Role, StudyRecord, StudySource, Team
from decisions.services.access import require_role, visible_teams
from decisions.services.errors import InvalidInput, NotFoundError
from valuation.errors import ModelValidationError
from valuation.reliability import Record, calibrate

__all__ = ["DEFAULT_BINS", "MAX_RECENT", "calibration_from_groups", "portfolio", "resolve_team"]

DEFAULT_BINS = 10
#: Most outcomes listed by ``portfolio(recent=...)``: a page of them, not the whole table.
MAX_RECENT = 1000
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


def portfolio(user, team, *, bins: int = DEFAULT_BINS, recent: int = 0) -> dict[str, Any]:
    """Portfolio figures of ``team`` for a member of it (see the module notes).

    With ``recent`` > 0 the answer also holds ``"recent"``: the ``recent`` most
    recent outcomes in force, oldest first, and the sums of the earlier ones
    (see :func:`_recent`), for a page that lists outcomes with running totals.
    """
    team_id = getattr(team, "pk", team)
    require_role(user, team_id, _EVERY_ROLE, "see the portfolio")
    if isinstance(bins, bool) or not isinstance(bins, int) or not 1 <= bins <= 100:
        raise InvalidInput(f"must be a whole number from 1 to 100, got {bins!r}", location="bins")
    if isinstance(recent, bool) or not isinstance(recent, int) or not 0 <= recent <= MAX_RECENT:
        raise InvalidInput(f"must be a whole number from 0 to {MAX_RECENT}, got {recent!r}",
                           location="recent")
    current = _in_force(team_id)
    sums = _sums_per_currency(current)
    totals = [_total(row) for row in sums]
    # One GROUP BY over the forecasts, by distinct probability: every calibration
    # figure follows from (p, how many, how many happened), so the database reads
    # the forecast rows once instead of once per figure.
    groups = [(row["probability"], row["k"], row["hits"]) for row in
              OutcomeForecast.objects.filter(outcome__in=current.values("pk"))
              .values("probability").annotate(k=Count("id"), hits=Sum("happened"))
              .order_by()]
    out = {"team": team_id, "totals": totals, "calibration": calibration_from_groups(groups, bins),
           "sources": _sources(team_id),
           "caution": ("These figures are model outputs resting on stated assumptions; weigh "
                       "them with professional judgment and your organisation's own rules.")}
    if recent:
        out["recent"] = _recent(current, sums, recent)
    return out


def _sums_per_currency(current) -> list[dict[str, Any]]:
    """Counts and sums of the outcomes in force, per currency (adding euros to pounds
    would be meaningless), by the database.

    PostgreSQL refuses a sum of doubles beyond a double's range ("value out of range:
    overflow") where SQLite gives inf. Then the same figures are added up here, where
    such a sum is inf as on SQLite, and ``_total`` reports it as null with a note. The
    query runs in a savepoint so that the refused statement leaves the request's
    transaction usable.
    """
    try:
        with transaction.atomic():
            return list(current.values("currency").annotate(
                decisions=Count("decision_id", distinct=True), outcomes=Count("id"),
                expected=Sum("expected_value"), realised=Sum("realised_value"),
                mean_path_probability=Avg("path_probability"),
            ).order_by("currency"))
    except DataError:
        return _sums_added_here(current)


def _sums_added_here(current) -> list[dict[str, Any]]:
    """``_sums_per_currency``'s figures from the rows, one pass in currency order."""
    rows = current.order_by("currency").values_list(
        "currency", "decision_id", "expected_value", "realised_value", "path_probability")
    sums: list[dict[str, Any]] = []
    for currency, decision_id, expected, realised, probability in rows.iterator():
        if not sums or sums[-1]["currency"] != currency:
            sums.append({"currency": currency, "decision_ids": set(), "outcomes": 0,
                         "expected": 0.0, "realised": 0.0, "probability_sum": 0.0})
        row = sums[-1]
        row["decision_ids"].add(decision_id)
        row["outcomes"] += 1
        row["expected"] += expected
        row["realised"] += realised
        row["probability_sum"] += probability
    for row in sums:
        row["decisions"] = len(row.pop("decision_ids"))
        row["mean_path_probability"] = row.pop("probability_sum") / row["outcomes"]
    return sums


#: Said beside a total that a double cannot hold (reported as null, not as a 500).
OVERFLOW_NOTE = ("a sum is beyond the largest number a double holds (about 1.8e308) and is "
                 "given as null; amounts are held below 1e300 each, so only outcomes recorded "
                 "before that rule (or some 1e8 outcomes near it) can cause this")


def _total(row: dict[str, Any]) -> dict[str, Any]:
    """One currency's sums, with any sum a double cannot hold as None and a note.

    SQLite adds REAL values up to inf; JSON has no inf, so an unguarded total
    would fail the whole answer.
    """
    expected, realised = _finite(row["expected"]), _finite(row["realised"])
    difference = _finite(realised - expected) if None not in (expected, realised) else None
    out = {"currency": row["currency"], "decisions": row["decisions"],
           "expected": expected, "realised": realised, "realised_minus_expected": difference,
           "mean_probability_of_what_happened": row["mean_path_probability"]}
    if difference is None:
        out["note"] = OVERFLOW_NOTE
    return out


def _finite(value: float | None) -> float | None:
    return value if value is not None and math.isfinite(value) else None


def _in_force(team_id: int):
    """The team's outcomes that no later row supersedes.

    ``NOT EXISTS`` rather than Django's ``superseded_by__isnull`` (a LEFT JOIN
    ... IS NULL on the superseding row's id): PostgreSQL cannot tell that the
    join leaves that id NULL only where no row matched, estimates one row in
    force, and plans nested loops over every outcome; ``NOT EXISTS`` becomes a
    hash anti-join there, and an index lookup per row on SQLite as before.
    """
    superseding = Outcome.objects.filter(supersedes=OuterRef("pk"))
    return Outcome.objects.filter(~Exists(superseding), decision__team_id=team_id)


def calibration_from_groups(groups: list[tuple[float, int, float]], bins: int) -> dict[str, Any]:
    """Brier score, Murphy's partition and the binned table from grouped forecasts.

    ``groups`` holds one ``(probability, forecasts, happened)`` per distinct
    forecast probability: how many forecasts gave it and how many of those
    happened. The figures equal ``valuation.forecast_scores``' over the
    forecasts one by one (tested): the Brier score sums ``(p - 1)^2`` over the
    ``happened`` and ``p^2`` over the others; Murphy's partition groups by
    distinct value already; the bins use the core's rule.
    """
    n = sum(k for _, k, _ in groups)
    table = [{"lower": b / bins, "upper": (b + 1) / bins, "count": 0, "mean_forecast": None,
              "observed_frequency": None} for b in range(bins)]
    calibration: dict[str, Any] = {"forecasts": n, "brier": None, "table": table}
    if not n:
        return calibration
    p = np.array([g[0] for g in groups], dtype=float)
    k = np.array([g[1] for g in groups], dtype=float)
    hits = np.array([g[2] for g in groups], dtype=float)
    # The bin of each distinct probability by valuation.forecast_scores.calibration_table's
    # own rule (rounding to 9 places keeps 0.3 * 10 = 3.0000000000000004 in bin 3).
    index = np.clip(np.floor(np.round(p * bins, 9)).astype(int), 0, bins - 1)
    count = np.bincount(index, weights=k, minlength=bins)
    sum_p = np.bincount(index, weights=k * p, minlength=bins)
    sum_hits = np.bincount(index, weights=hits, minlength=bins)
    for b, row in enumerate(table):
        if count[b]:
            row.update(count=int(count[b]), mean_forecast=float(sum_p[b] / count[b]),
                       observed_frequency=float(sum_hits[b] / count[b]))
    base = float(hits.sum() / n)
    observed = hits / k
    calibration.update(
        brier=float((hits * (p - 1.0) ** 2 + (k - hits) * p ** 2).sum() / n),
        reliability=float((k * (p - observed) ** 2).sum() / n),
        resolution=float((k * (observed - base) ** 2).sum() / n),
        uncertainty=base * (1.0 - base))
    return calibration


def _recent(current, sums: list[dict[str, Any]], limit: int) -> dict[str, Any]:
    """The ``limit`` most recent outcomes in force (oldest first), and the earlier ones' sums.

    Only the columns a listing shows are read (not the recorded path and walk).
    The earlier outcomes' sums per currency are the totals minus the listed
    rows, so no second pass over the team's outcomes; ``earlier`` maps a
    currency to ``(expected, realised)`` and holds only currencies with earlier
    outcomes. The totals and the listing are two statements: an outcome
    recorded between them shifts the earlier sums by that outcome until the
    next reading (``earlier_count`` never goes below 0).
    """
    rows = list(current.select_related("decision")
                .only("recorded_at", "currency", "expected_value", "realised_value",
                      "path_probability", "decision__title")
                .order_by("-recorded_at", "-id")[:limit])[::-1]
    earlier: dict[str, tuple[float, float]] = {}
    hidden = 0
    for row in sums:
        mine = [o for o in rows if o.currency == row["currency"]]
        count = row["outcomes"] - len(mine)
        if count > 0:
            hidden += count
            earlier[row["currency"]] = (row["expected"] - sum(o.expected_value for o in mine),
                                        row["realised"] - sum(o.realised_value for o in mine))
    return {"outcomes": rows, "earlier": earlier, "earlier_count": hidden}


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
