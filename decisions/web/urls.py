"""Routes of the browser face (mounted at the site root)."""

from django.contrib.auth import views as auth_views
from django.urls import path

from decisions.web import views, views_decision, views_edit
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
]
