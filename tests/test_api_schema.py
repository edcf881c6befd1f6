"""The OpenAPI schema and the documentation page (served without any CDN)."""

import pytest

from decisions.middleware import CONTENT_SECURITY_POLICY

pytestmark = pytest.mark.django_db


def test_schema_lists_the_register_endpoints(client):
    response = client.get("/api/schema/?format=json")
    assert response.status_code == 200
    paths = response.json()["paths"]
    for path in ["/api/decisions/", "/api/decisions/{id}/submit/", "/api/evaluate/",
                 "/api/decisions/{decision_pk}/versions/{number}/signoffs/", "/api/token/"]:
        assert path in paths


def test_docs_page_uses_only_local_assets(client):
    response = client.get("/api/docs/")
    assert response.status_code == 200
    html = response.content.decode()
    assert "/api/schema/?format=json" in html
    assert "http://" not in html and "https://" not in html and "cdn" not in html.lower()
    assert "model outputs" in html


def test_docs_page_runs_no_inline_script_and_keeps_the_strict_policy(client):
    # The page's script is a static file, so the page needs no exemption from the
    # Content-Security-Policy that forbids inline script everywhere else.
    response = client.get("/api/docs/")
    html = response.content.decode()
    chunks = html.split("<script")[1:]
    assert chunks, "the page loads its script"
    for chunk in chunks:
        assert chunk.split(">", 1)[0].strip().startswith("src="), chunk[:80]
    assert 'src="/static/decisions/api_docs' in html
    assert response["Content-Security-Policy"] == CONTENT_SECURITY_POLICY
