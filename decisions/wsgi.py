"""WSGI entry point (gunicorn decisions.wsgi)."""

import os

from django.core.wsgi import get_wsgi_application

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "decisions.settings")
application = get_wsgi_application()

# Import the views and freeze the long-lived start-up objects (decisions/serving.py says why).
from decisions.serving import prepare_process  # noqa: E402 - needs the settings loaded above

prepare_process()
