"""Production settings pass Django's deployment checks; headers, CSRF and secrets.

Anchors: Django's deployment checklist (``check --deploy``), OWASP ASVS 5.0 V3
(browser security headers) and V16.5.1 (generic errors, no secrets).
"""

import os
import subprocess
import sys
from pathlib import Path

import pytest
from django.test import Client

from decisions.middleware import CONTENT_SECURITY_POLICY
from tests.personas import PASSWORD

ROOT = Path(__file__).resolve().parent.parent
PRODUCTION_ENV = {
    "DEBUG": "false",
    "SECRET_KEY": "k" * 17 + "production-like-test-key-0123456789abcdefghijkl",  # 64 chars
    "SECURE_SSL": "true",
    "ALLOWED_HOSTS": "register.example.org",
}
# Set by tests/env_plugin.py for the browser tests; never in a deployment.
_TEST_ONLY = ("DEBUG", "SECURE_SSL", "DJANGO_ALLOW_ASYNC_UNSAFE", "SECRET_KEY")


def _production_env(tmp_path) -> dict:
    env = {k: v for k, v in os.environ.items() if k not in _TEST_ONLY}
    env.update(PRODUCTION_ENV, DECISIONS_DATA_DIR=str(tmp_path))
    return env


def test_check_deploy_is_clean_with_production_settings(tmp_path):
    assert len(PRODUCTION_ENV["SECRET_KEY"]) == 64
    env = _production_env(tmp_path)
    done = subprocess.run([sys.executable, "manage.py", "check", "--deploy", "--fail-level",
                           "WARNING"], cwd=ROOT, env=env, capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "no issues" in done.stdout


@pytest.mark.django_db
@pytest.mark.parametrize("url", ["/login/", "/api/schema/", "/api/decisions/"])
def test_every_response_carries_the_security_headers(client, url):
    r = client.get(url)
    assert r["X-Content-Type-Options"] == "nosniff"
    assert r["X-Frame-Options"] == "DENY"
    assert r["Referrer-Policy"] == "same-origin"
    assert r["Cross-Origin-Opener-Policy"] == "same-origin"
    assert r["Content-Security-Policy"] == CONTENT_SECURITY_POLICY


def test_the_policy_allows_no_inline_script():
    script_src = next(d for d in CONTENT_SECURITY_POLICY.split(";")
                      if d.strip().startswith("script-src"))
    assert "unsafe-inline" not in script_src and "unsafe-eval" not in script_src
    assert "frame-ancestors 'none'" in CONTENT_SECURITY_POLICY


@pytest.mark.django_db
def test_the_pages_hold_no_inline_script(people, client):
    """The policy above would block an inline <script>: the pages must not rely on one."""
    client.force_login(people.ana)
    for url in ["/", "/decisions/new/", "/login/"]:
        body = client.get(url).content.decode()
        for chunk in body.split("<script")[1:]:
            assert chunk.split(">", 1)[0].strip().startswith("src="), (url, chunk[:80])
        assert " onclick=" not in body and "javascript:" not in body


@pytest.mark.django_db
def test_web_forms_refuse_a_post_without_the_csrf_token(people):
    client = Client(enforce_csrf_checks=True)
    r = client.post("/login/", {"username": "ana", "password": PASSWORD})
    assert r.status_code == 403
    client.force_login(people.ana)
    r = client.post("/decisions/new/", {"title": "no token", "team": people.team.pk})
    assert r.status_code == 403


@pytest.mark.django_db
def test_a_session_authenticated_api_write_needs_the_csrf_token(people):
    client = Client(enforce_csrf_checks=True)
    client.force_login(people.ana)
    r = client.post("/api/decisions/", {"team": people.team.pk, "title": "x"},
                    content_type="application/json")
    assert r.status_code == 403
    assert r.json()["code"] == "permission_denied"
    assert "CSRF" in r.json()["errors"][0]["message"]


@pytest.mark.django_db
def test_secrets_appear_in_no_response_and_no_log(people, client, settings, caplog):
    """The secret key, the password and the hashes never come back."""
    client.force_login(people.ana)
    bodies = []
    for url in ["/", "/api/teams/", "/api/decisions/", f"/api/teams/{people.team.pk}/"]:
        bodies.append(client.get(url).content.decode())
    bodies.append(Client().post("/login/", {"username": "ana", "password": PASSWORD + "x"},
                                REMOTE_ADDR="192.0.2.9").content.decode())
    text = "\n".join(bodies) + "\n".join(r.getMessage() for r in caplog.records)
    assert settings.SECRET_KEY not in text
    assert PASSWORD not in text
    assert people.ana.password not in text  # the stored hash


def test_production_settings_refuse_debug_and_keep_cookies_secure(tmp_path):
    env = _production_env(tmp_path)
    code = ("import django, os; os.environ['DJANGO_SETTINGS_MODULE']='decisions.settings'; "
            "django.setup(); from django.conf import settings as s; "
            "print(s.DEBUG, s.SESSION_COOKIE_SECURE, s.CSRF_COOKIE_SECURE, s.SECURE_SSL_REDIRECT,"
            " s.SECURE_HSTS_SECONDS >= 31536000, s.SESSION_COOKIE_HTTPONLY)")
    done = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True,
                          text=True, timeout=60)
    assert done.stdout.split() == ["False", "True", "True", "True", "True", "True"], done.stderr
