"""URL map: the browser pages, the REST API and the admin."""

from django.contrib import admin
from django.urls import include, path

from decisions.health import healthz

urlpatterns = [
    path("healthz", healthz, name="healthz"),
    path("admin/", admin.site.urls),
    path("api/", include("decisions.api.urls")),
    path("", include("decisions.web.urls")),
]

# A database failure outside a view (session or auth middleware) answers 503, not 500.
handler500 = "decisions.middleware.server_error"
# Under /api/ every error is JSON, even for paths no route matches.
handler400 = "decisions.middleware.bad_request"
handler403 = "decisions.middleware.permission_denied"
handler404 = "decisions.middleware.page_not_found"
