"""URL map: the browser pages, the REST API and the admin."""

from django.contrib import admin
from django.urls import include, path

urlpatterns = [
    path("admin/", admin.site.urls),
    path("api/", include("decisions.api.urls")),
    path("", include("decisions.web.urls")),
]
