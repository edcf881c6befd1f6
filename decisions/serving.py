"""What an app server process does once, after loading the application, before serving.

Python's cyclic garbage collector walks every container object it tracks when it runs a
collection of the oldest generation. After start-up a worker holds about 110,000 of them
(Django, DRF, numpy, our views and their module data), nearly all alive for the life of
the process, so each such collection walks them all again: measured in-process on
2026-12-02 (``gc.callbacks`` around 3,000 requests to ``POST /api/evaluate/`` with a
199-node tree), one came every 300 requests or so and took 64-79 ms, and the collector
as a whole took 13 % of the CPU. Every request queued behind that worker waits out the
pause, which shows in the 95th percentile of a loaded server.

``gc.freeze()`` is Python's documented way out: it moves every object tracked at that
moment to a permanent generation that later collections skip. After it, in the same
measurement, the longest pause was 5.6 ms and the collector took 8 % of the CPU. The
objects frozen are the ones that live as long as the process anyway; cyclic garbage
made later is collected as before.
(The in-process figures came from a scratch script, not kept: the WSGI application called
directly in a loop, with a ``gc.callbacks`` timer. Under load the API benchmark compares
the two in one run, a server with ``GC_FREEZE=false`` beside the default one:
``python -m pytest tests/benchmarks/test_bench_api.py -m benchmark -s``, figures in
tests/benchmarks/RESULTS.md; in its five runs of 2026-12-02, median rounds, the frozen
workers' p99 was 55-70 ms against 80-100 ms, their longest answer 61-100 ms against
133-159 ms, their p95 49-65 ms against 55-72 ms.)

Django imports the views on the first request; importing the URL configuration first
puts them and everything they import among the frozen objects too. Under
``gunicorn --preload`` this runs once in the master and the workers inherit the frozen
generation with the rest of its memory.

``GC_FREEZE=false`` turns it off (to compare, or should a later Python change the trade).
"""

from __future__ import annotations

import gc

from decisions.envconfig import env_bool

__all__ = ["prepare_process"]


def prepare_process() -> bool:
    """Import every view, then freeze the objects alive now; False when turned off."""
    if not env_bool("GC_FREEZE", True):
        return False
    from django.urls import get_resolver

    get_resolver().url_patterns  # noqa: B018 - the property imports every view module
    gc.collect()  # so that start-up's own garbage is not frozen with the rest
    gc.freeze()
    return True
