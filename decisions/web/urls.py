"""Routes of the browser face (mounted at the site root)."""

from django.contrib.auth import views as auth_views
from django.urls import path

from decisions.web import (
    views,
    views_decision,
    views_edit,
    views_outcomes,
    views_portfolio,
    views_sources,
)
from decisions.web.login import ThrottledLoginView

urlpatterns = [
    path("", views.home, name="home"),
    path("login/", ThrottledLoginView.as_view(redirect_authenticated_user=False), name="login"),
    path("logout/", auth_views.LogoutView.as_view(), name="logout"),
    path("decisions/new/", views_edit.decision_new, name="web-decision-new"),
    path("decisions/<int:pk>/", views_decision.detail, name="web-decision"),
    path("decisions/<int:pk>/diff/", views_decision.diff, name="web-decision-diff"),
    path("decisions/<int:pk>/edit/", views_edit.edit_table, name="web-edit-table"),
    path("decisions/<int:pk>/edit/json/", views_edit.edit_json, name="web-edit-json"),
    path("decisions/<int:pk>/validate/", views_edit.validate, name="web-validate"),
    path("decisions/<int:pk>/policy/", views_decision.policy, name="web-policy"),
    path("decisions/<int:pk>/submit/", views_decision.submit, name="web-submit"),
    path("decisions/<int:pk>/sign/", views_decision.sign, name="web-sign"),
    path("decisions/<int:pk>/strategy/", views_decision.strategy, name="web-strategy"),
    path("decisions/<int:pk>/commit/", views_decision.commit, name="web-commit"),
    path("decisions/<int:pk>/close/", views_decision.close, name="web-close"),
    path("decisions/<int:pk>/apply-source/", views_sources.apply_source, name="web-apply-source"),
    path("decisions/<int:pk>/outcome/", views_outcomes.outcome, name="web-outcome"),
    path("decisions/<int:pk>/review/", views_outcomes.review, name="web-review"),
    path("sources/", views_sources.source_list, name="web-sources"),
    path("sources/<int:pk>/", views_sources.source_detail, name="web-source"),
    path("sources/<int:pk>/records/", views_sources.source_record, name="web-source-record"),
    path("sources/<int:pk>/import/", views_sources.source_import, name="web-source-import"),
    path("portfolio/", views_portfolio.portfolio, name="web-portfolio"),
]
