"""Pages of the browser face. Views stay short: they read, then call services.

Reads go through ``decisions.web.queries`` (scoped to the user's teams, so a
foreign decision is a 404); changes go through ``decisions.services`` and their
``DomainError`` messages are shown on the page, never a traceback.
"""

from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.shortcuts import render

from decisions.services.access import visible_teams
from decisions.web.queries import dashboard_groups


@login_required
def home(request):
    """The dashboard: what waits for the user's sign-off first, then every decision by status."""
    waiting, groups = dashboard_groups(request.user)
    return render(request, "web/dashboard.html", {
        "waiting": waiting, "groups": groups, "teams": list(visible_teams(request.user)),
    })
