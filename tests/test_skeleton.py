"""The project's frame: the core stays free of Django, the server answers, settings are strict."""

import os
import subprocess
import sys

import pytest
from django.core.exceptions import ImproperlyConfigured

from decisions import envconfig


def test_importing_the_valuation_core_loads_no_django_module():
    code = (
        "import sys, valuation, valuation.cli\n"
        "bad = sorted(m for m in sys.modules if m == 'django' or m.startswith('django.')"
        " or m == 'decisions' or m.startswith('decisions.'))\n"
        "print(','.join(bad))\n"
    )
    env = {k: v for k, v in os.environ.items() if k != "DJANGO_SETTINGS_MODULE"}
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True
    )
    assert result.stdout.strip() == ""


@pytest.mark.django_db
def test_home_page_answers(client):
    response = client.get("/")
    assert response.status_code == 200
    assert b"model outputs" in response.content


def test_missing_secret_key_is_refused_when_debug_is_off(tmp_path, monkeypatch):
    monkeypatch.delenv("SECRET_KEY", raising=False)
    with pytest.raises(ImproperlyConfigured, match="SECRET_KEY: must be set"):
        envconfig.secret_key(tmp_path, debug=False)


def test_local_secret_key_is_generated_once_and_kept(tmp_path, monkeypatch):
    monkeypatch.delenv("SECRET_KEY", raising=False)
    first = envconfig.secret_key(tmp_path, debug=True)
    second = envconfig.secret_key(tmp_path, debug=True)
    assert first == second and len(first) >= 50
    assert (tmp_path / "secret_key").stat().st_mode & 0o077 == 0


def test_short_secret_key_is_refused(tmp_path, monkeypatch):
    monkeypatch.setenv("SECRET_KEY", "short")
    with pytest.raises(ImproperlyConfigured, match="at least 32"):
        envconfig.secret_key(tmp_path, debug=False)


@pytest.mark.parametrize(
    ("raw", "expected"), [("true", True), ("1", True), ("off", False), ("", False)]
)
def test_boolean_variables_accept_clear_values(monkeypatch, raw, expected):
    monkeypatch.setenv("SOME_FLAG", raw)
    assert envconfig.env_bool("SOME_FLAG") is expected


def test_boolean_variables_refuse_a_typo(monkeypatch):
    monkeypatch.setenv("SOME_FLAG", "ture")
    with pytest.raises(ImproperlyConfigured, match="SOME_FLAG: must be one of"):
        envconfig.env_bool("SOME_FLAG")


@pytest.mark.parametrize("raw", ["abc", "30", "0/min", "30/fortnight", "-5/min", "/min"])
def test_a_malformed_throttle_rate_stops_start_up_naming_the_variable(monkeypatch, raw):
    monkeypatch.setenv("API_MEMO_RATE", raw)
    with pytest.raises(ImproperlyConfigured, match=r"^API_MEMO_RATE: must be a number of requests"):
        envconfig.env_rate("API_MEMO_RATE", "30/min")


@pytest.mark.parametrize(("raw", "expected"), [(None, "30/min"), ("5/second", "5/second"),
                                               (" 100/hour ", "100/hour"), ("1/d", "1/d")])
def test_well_formed_throttle_rates_are_taken(monkeypatch, raw, expected):
    if raw is None:
        monkeypatch.delenv("API_MEMO_RATE", raising=False)
    else:
        monkeypatch.setenv("API_MEMO_RATE", raw)
    assert envconfig.env_rate("API_MEMO_RATE", "30/min") == expected
