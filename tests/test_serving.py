"""decisions/serving.py: the app server's start-up step (views imported, start-up objects
frozen out of later garbage collections), its switch, and its wiring into decisions.wsgi."""

from __future__ import annotations

import gc
import os
import subprocess
import sys
import weakref
from pathlib import Path

import pytest
from django.core.exceptions import ImproperlyConfigured
from django.urls import clear_url_caches, get_resolver

from decisions.serving import prepare_process

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture
def unfrozen():
    """Leave the test process as it was: nothing frozen before or after the test."""
    gc.unfreeze()
    yield
    gc.unfreeze()


def test_it_freezes_the_objects_alive_at_start_up(monkeypatch, unfrozen):
    monkeypatch.delenv("GC_FREEZE", raising=False)
    clear_url_caches()  # earlier tests' requests may have read the URL configuration already
    assert "url_patterns" not in get_resolver().__dict__
    assert gc.get_freeze_count() == 0
    assert prepare_process() is True
    # Python's own count of the objects moved to the permanent generation; the test
    # process holds far more than a thousand (Django alone does).
    assert gc.get_freeze_count() > 1000
    # The URL configuration was read, so every view module was imported before the freeze.
    assert "url_patterns" in get_resolver().__dict__


def test_objects_made_after_the_freeze_are_still_collected(monkeypatch, unfrozen):
    monkeypatch.setenv("GC_FREEZE", "true")
    assert prepare_process() is True
    assert gc.get_freeze_count() > 0
    assert gc.isenabled()  # freezing leaves the collector on for what comes after

    class Node:
        pass

    a, b = Node(), Node()
    a.other, b.other = b, a  # a reference cycle: only the cyclic collector frees it
    probe = weakref.ref(a)
    del a, b
    gc.collect()
    assert probe() is None


@pytest.mark.parametrize("value", ["false", "0", "no", "off"])
def test_it_can_be_turned_off(monkeypatch, unfrozen, value):
    monkeypatch.setenv("GC_FREEZE", value)
    assert prepare_process() is False
    assert gc.get_freeze_count() == 0


def test_a_mistyped_switch_stops_the_start_and_names_the_variable(monkeypatch, unfrozen):
    monkeypatch.setenv("GC_FREEZE", "maybe")
    with pytest.raises(ImproperlyConfigured, match="GC_FREEZE"):
        prepare_process()
    assert gc.get_freeze_count() == 0


def _freeze_count_after_loading_wsgi(data_dir: Path, **env) -> int:
    script = "import gc, decisions.wsgi; print(gc.get_freeze_count())"
    base = {k: v for k, v in os.environ.items() if k != "GC_FREEZE"}
    base.update({"DJANGO_SETTINGS_MODULE": "decisions.settings", "DEBUG": "false",
                 "SECRET_KEY": "serving-test-only-" + "s" * 40,
                 "DECISIONS_DATA_DIR": str(data_dir)}, **env)
    run = subprocess.run([sys.executable, "-c", script], cwd=ROOT, env=base, check=True,
                         capture_output=True, text=True, timeout=120)
    return int(run.stdout.split()[-1])


def test_loading_the_wsgi_application_runs_it_unless_turned_off(tmp_path):
    assert _freeze_count_after_loading_wsgi(tmp_path) > 1000
    assert _freeze_count_after_loading_wsgi(tmp_path, GC_FREEZE="false") == 0
