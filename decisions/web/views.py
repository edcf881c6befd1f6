"""Pages of the browser face. Views stay short: they read, then call services.

Reads go through ``decisions.web.queries`` (scoped to the user's teams, so a
foreign decision is a 404); changes go through ``decisions.services`` and their
``DomainError`` messages are shown on the page, never a traceback.
"""

from __future__ import annotations

from django.contrib.auth import views as auth_views
from django.shortcuts import render

from decisions.services.access import visible_teams
from decisions.web.queries import dashboard_groups


def home(request):
    """The dashboard: what waits for the user's sign-off first, then every decision by status.

    A visitor who is not signed in gets the sign-in form here rather than a redirect
    (every other page redirects to it), so the site's front door always answers.
    """
    if not request.user.is_authenticated:
        return auth_views.LoginView.as_view()(request)
    waiting, groups = dashboard_groups(request.user)
    return render(request, "web/dashboard.html", {
        "waiting": waiting, "groups": groups, "teams": list(visible_teams(request.user)),
    })
