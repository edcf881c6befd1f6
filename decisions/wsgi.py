"""WSGI entry point (gunicorn decisions.wsgi)."""

import os

from django.core.wsgi import get_wsgi_application

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "decisions.settings")
application = get_wsgi_application()
