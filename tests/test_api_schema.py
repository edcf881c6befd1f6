"""The OpenAPI schema and the documentation page (served without any CDN)."""

import pytest

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
