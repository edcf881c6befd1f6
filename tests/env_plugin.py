"""Loaded by pytest (``-p tests.env_plugin``) before pytest-django reads the settings.

The settings refuse to start without SECRET_KEY when DEBUG is off; tests get a
fixed, obviously fake key here. Browser tests drive the live server from the
test thread, which Django's async guard would otherwise refuse.
"""

import os

os.environ.setdefault("SECRET_KEY", "test-only-key-not-for-production-0123456789abcdef")
os.environ.setdefault("DJANGO_ALLOW_ASYNC_UNSAFE", "true")
