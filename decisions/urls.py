"""URL map: the browser pages, the REST API and the admin."""

from django.contrib import admin
from django.urls import include, path

from decisions.web import views as web_views

urlpatterns = [
    path("", web_views.home, name="home"),
    path("admin/", admin.site.urls),
    path("api/", include("decisions.api.urls")),
]
