"""Pages of the browser face. Views stay short: they read, then call services."""

from django.shortcuts import render


def home(request):
    """Landing page; the dashboard takes over once a user signs in."""
    return render(request, "web/home.html")
