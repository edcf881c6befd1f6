"""WSGI entry point (gunicorn decisions.wsgi)."""

import os

from django.core.wsgi import get_wsgi_application

from decisions.serving import prepare_process

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "decisions.settings")
application = get_wsgi_application()
# Import the views and freeze the long-lived start-up objects (decisions/serving.py says why).
prepare_process()
