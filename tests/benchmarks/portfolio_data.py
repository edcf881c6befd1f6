"""Bulk copies of one recorded outcome, for the portfolio query-count test and benchmark.

Each copy is a committed decision with version 1 and the same outcome and forecasts,
written with ``bulk_create`` (a fixture: the portfolio only reads these rows, and the
append-only triggers allow INSERT). Invented data throughout.
"""

from __future__ import annotations

import datetime as dt

from decisions.models import Decision, ModelVersion, Outcome, OutcomeForecast, Status

__all__ = ["clone_outcomes"]


def clone_outcomes(template: Outcome, n: int, *, batch: int = 2_000) -> None:
    """``n`` more decisions with an outcome in force, copied from ``template``, oldest first."""
    version = template.version
    forecasts = list(template.forecasts.all())
    start = template.recorded_at - dt.timedelta(days=n + 1)
    for first in range(0, n, batch):
        k = range(first, min(n, first + batch))
        when = [start + dt.timedelta(days=i) for i in k]
        decisions = Decision.objects.bulk_create(
            Decision(title=f"Clone {i} (invented)", team=template.decision.team,
                     owner=template.decision.owner, status=Status.COMMITTED, created_at=w,
                     updated_at=w) for i, w in zip(k, when, strict=True))
        versions = ModelVersion.objects.bulk_create(
            ModelVersion(decision=d, number=1, canonical_json=version.canonical_json,
                         content_sha256=version.content_sha256, results=version.results,
                         results_sha256=version.results_sha256, author=version.author, created_at=w)
            for d, w in zip(decisions, when, strict=True))
        outcomes = Outcome.objects.bulk_create(
            Outcome(decision=d, version=v, recorded_by=template.recorded_by, recorded_at=w,
                    path=template.path, study_signal=template.study_signal,
                    realised_value=template.realised_value + 1_000 * (i % 7),
                    currency=template.currency, objective=template.objective,
                    expected_value=template.expected_value, path_probability=template.path_probability,
                    walk=template.walk)
            for i, d, v, w in zip(k, decisions, versions, when, strict=True))
        OutcomeForecast.objects.bulk_create(
            OutcomeForecast(outcome=o, node=f.node, branch=f.branch, probability=f.probability,
                            happened=f.happened) for o in outcomes for f in forecasts)
