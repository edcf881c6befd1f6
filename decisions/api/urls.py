"""Routes of the REST API (mounted at /api/)."""

from django.urls import path
from drf_spectacular.views import SpectacularAPIView
from rest_framework.routers import SimpleRouter

from decisions.api import sources_views, views, views_extra
from decisions.api.memo_views import VersionMemoView
from decisions.api.token import TokenView

router = SimpleRouter()
router.register("decisions", views.DecisionViewSet, basename="decision")
router.register("teams", views_extra.TeamViewSet, basename="team")

versions = views.VersionViewSet
signoffs = views.SignOffViewSet

urlpatterns = [
    path("token/", TokenView.as_view(), name="api-token"),
    path("schema/", SpectacularAPIView.as_view(), name="api-schema"),
    path("docs/", views_extra.docs_page, name="api-docs"),
    path("evaluate/", views_extra.EvaluateView.as_view(), name="api-evaluate"),
    path("audit/verify/", views_extra.AuditVerifyView.as_view(), name="api-audit-verify"),
    path("decisions/<int:decision_pk>/versions/",
         versions.as_view({"get": "list", "post": "create"}), name="version-list"),
    path("decisions/<int:decision_pk>/versions/<int:number>/",
         versions.as_view({"get": "retrieve"}), name="version-detail"),
    path("decisions/<int:decision_pk>/versions/<int:number>/diff/<int:other>/",
         versions.as_view({"get": "diff"}), name="version-diff"),
    path("decisions/<int:decision_pk>/versions/<int:number>/signoffs/",
         signoffs.as_view({"get": "list", "post": "create"}), name="signoff-list"),
    path("decisions/<int:decision_pk>/versions/<int:number>/memo.pdf",
         VersionMemoView.as_view(), name="version-memo"),
    *sources_views.urlpatterns,
    *router.urls,
]
