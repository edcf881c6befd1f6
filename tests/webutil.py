"""Helpers for the tests of the web pages: a signed-in browser client and a page's text."""

from __future__ import annotations

from django.test import Client


def client_as(user=None, **kwargs) -> Client:
    """A Django test client signed in as ``user`` (None: anonymous); ``kwargs`` go to Client."""
    client = Client(**kwargs)
    if user is not None:
        client.force_login(user)
    return client


def html(response) -> str:
    return response.content.decode()
