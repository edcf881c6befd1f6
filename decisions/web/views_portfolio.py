"""The team's portfolio: expected vs realised over time, calibration, sources compared.

The sums, the calibration table and the sources' figures are the service's
(``decisions.services.portfolio``, computed by the database); the page adds
the outcomes in force one by one, oldest first, for the "over time" view.
"""

from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.db.models import Count, Sum
from django.http import Http404
from django.shortcuts import render

from decisions.models import Outcome
from decisions.services import portfolio as svc
from decisions.services.access import visible_teams
from decisions.services.errors import DomainError
from decisions.web.presenters_sources import HISTORY_ROWS, portfolio_view

__all__ = ["portfolio"]


def _bins(request) -> int:
    try:
        value = int(request.GET.get("bins", svc.DEFAULT_BINS))
    except ValueError:
        return svc.DEFAULT_BINS
    return min(max(value, 1), 100)


@login_required
def portfolio(request):
    teams = list(visible_teams(request.user).order_by("name"))
    context = {"teams": teams, "team": None, "p": None, "bins": _bins(request)}
    if not teams:
        return render(request, "web/portfolio.html", context)
    wanted = request.GET.get("team") or teams[0].pk
    try:
        team = svc.resolve_team(request.user, wanted)
    except DomainError:  # NotFoundError, or a team id that is not a number
        raise Http404("no such team among yours") from None
    context["team"] = team
    data = svc.portfolio(request.user, team, bins=context["bins"])
    # The team was just checked to be one of the user's: its most recent outcomes in
    # force, oldest first, and the sums of the earlier ones (for the running totals),
    # in two queries whatever the team's size.
    in_force = Outcome.objects.filter(decision__team_id=team.pk, superseded_by__isnull=True)
    rows = list(in_force.select_related("decision")
                .order_by("-recorded_at", "-id")[:HISTORY_ROWS])[::-1]
    earlier_rows = in_force.exclude(pk__in=[o.pk for o in rows])
    sums = list(earlier_rows.values("currency").order_by("currency").annotate(
        expected=Sum("expected_value"), realised=Sum("realised_value"), count=Count("id")))
    earlier = {row["currency"]: (row["expected"], row["realised"]) for row in sums}
    hidden = sum(row["count"] for row in sums)
    context["p"] = portfolio_view(data, rows, earlier, hidden)
    return render(request, "web/portfolio.html", context)
