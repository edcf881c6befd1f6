"""The team's portfolio: expected vs realised over time, calibration, sources compared.

The sums, the calibration table and the sources' figures are the service's
(``decisions.services.portfolio``, computed by the database); the page adds
the outcomes in force one by one, oldest first, for the "over time" view.
"""

from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.http import Http404
from django.shortcuts import render

from decisions.models import Outcome
from decisions.services import portfolio as svc
from decisions.services.access import visible_teams
from decisions.services.errors import DomainError
from decisions.web.presenters_sources import portfolio_view

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
    # The team was just checked to be one of the user's: its outcomes in force, oldest first.
    rows = list(Outcome.objects.filter(decision__team_id=team.pk, superseded_by__isnull=True)
                .select_related("decision").order_by("recorded_at", "id"))
    context["p"] = portfolio_view(data, rows)
    return render(request, "web/portfolio.html", context)
