"""The team's portfolio: expected vs realised over time, calibration, sources compared.

The sums, the calibration table, the sources' figures and the most recent
outcomes in force with the sums of the earlier ones are the service's
(``decisions.services.portfolio``, computed by the database, in a number of
queries that does not grow with the team); the page lists those outcomes,
oldest first, with running totals, for the "over time" view.
"""

from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.http import Http404
from django.shortcuts import render

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
    data = svc.portfolio(request.user, team, bins=context["bins"], recent=HISTORY_ROWS)
    recent = data["recent"]
    context["p"] = portfolio_view(data, recent["outcomes"], recent["earlier"],
                                  recent["earlier_count"])
    return render(request, "web/portfolio.html", context)
