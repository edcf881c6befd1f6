"""WSGI entry point (gunicorn decisions.wsgi)."""

import gc
import os

from django.core.wsgi import get_wsgi_application

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "decisions.settings")
application = get_wsgi_application()

# Django, DRF, numpy and our modules are loaded once and live as long as the worker.
# Moving them out of the collector's generations (gc.freeze) keeps each full
# collection from re-walking a few hundred thousand objects that can never be
# garbage, which under load showed up as a slower, spikier request (the API
# benchmark, tests/benchmarks/RESULTS.md). Under ``--preload`` it also keeps the
# forked workers from touching, and so copying, those pages.
gc.collect()
gc.freeze()
