"""The sign-in page behind the lockout of :mod:`decisions.throttle` (429 while locked)."""

from __future__ import annotations

import math

from django.contrib.auth import views as auth_views

from decisions.throttle import client_address, lockout_remaining

__all__ = ["ThrottledLoginView"]


class ThrottledLoginView(auth_views.LoginView):
    """Django's login view; a locked-out (username, address) gets the form back with 429."""

    def form_invalid(self, form):
        username = (self.request.POST.get("username") or "").strip()
        remaining = lockout_remaining(username, client_address(self.request)) if username else 0
        response = super().form_invalid(form)
        if remaining:
            response.context_data["locked_out_minutes"] = max(1, math.ceil(remaining / 60))
            response.status_code = 429
            response["Retry-After"] = str(remaining)
        return response
