"""Admin site: teams, memberships and policies are administered here; versions, sign-offs
and audit events are read-only (the database refuses changes to them anyway).

Every change made here goes through the services, so it is audited with the
staff user as the actor, like any other change.
"""

from django.contrib import admin, messages
from django.core.exceptions import ValidationError

from decisions.models import (
    AuditEvent,
    Decision,
    Membership,
    ModelVersion,
    SignOff,
    SignOffPolicy,
    Team,
)
from decisions.services import teams
from decisions.services.errors import DomainError
from decisions.services.locking import IF_MATCH_ANY


class ReadOnlyAdmin(admin.ModelAdmin):
    def has_add_permission(self, request, obj=None):
        return False

    def has_change_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False


@admin.register(Team)
class TeamAdmin(admin.ModelAdmin):
    list_display = ("name", "created_at")
    search_fields = ("name",)

    def has_delete_permission(self, request, obj=None):
        return False

    def save_model(self, request, obj, form, change):
        if change:
            raise ValidationError("teams are renamed by creating a new team")  # pragma: no cover
        created = teams.create_team(actor=request.user, name=obj.name)
        obj.pk = created.pk


@admin.register(Membership)
class MembershipAdmin(admin.ModelAdmin):
    list_display = ("user", "team", "role")
    list_filter = ("team", "role")

    def get_readonly_fields(self, request, obj=None):
        return ("user", "team") if obj else ()

    def save_model(self, request, obj, form, change):
        try:
            if change:
                teams.change_role(actor=request.user, membership=obj, role=obj.role)
            else:
                created = teams.add_member(actor=request.user, team=obj.team, user=obj.user,
                                           role=obj.role)
                obj.pk = created.pk
        except DomainError as exc:
            messages.error(request, str(exc))

    def delete_model(self, request, obj):
        teams.remove_member(actor=request.user, membership=obj)

    def delete_queryset(self, request, queryset):
        # One service call (and one audit event) per membership, never a bulk delete.
        for membership in queryset:
            teams.remove_member(actor=request.user, membership=membership)


@admin.register(SignOffPolicy)
class SignOffPolicyAdmin(admin.ModelAdmin):
    """Policies are changed through the service so the change is audited and ETag-checked."""

    list_display = ("decision", "summary", "updated_at")
    readonly_fields = ("decision", "updated_at", "summary")
    fields = ("decision", "summary", "financial_review", "operations", "budget_holder")

    def has_add_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False

    @admin.display(description="requirements")
    def summary(self, obj):
        return ", ".join(f"{count} × {role}" for role, count in obj.as_dict().items()) or "none"

    def get_form(self, request, obj=None, change=False, **kwargs):
        from django import forms

        current = obj.as_dict() if obj else {}

        class PolicyForm(forms.ModelForm):
            financial_review = forms.IntegerField(
                min_value=0, max_value=10, initial=current.get("financial review", 0))
            operations = forms.IntegerField(
                min_value=0, max_value=10, initial=current.get("operations", 0))
            budget_holder = forms.IntegerField(
                min_value=0, max_value=10, initial=current.get("budget holder", 0))

            class Meta:
                model = SignOffPolicy
                fields = ()

        return PolicyForm

    def save_model(self, request, obj, form, change):
        from decisions.services.decisions import set_policy

        data = form.cleaned_data
        wanted = {"financial review": data["financial_review"], "operations": data["operations"],
                  "budget holder": data["budget_holder"]}
        try:
            set_policy(obj.decision_id, actor=request.user, if_match=IF_MATCH_ANY,
                       requirements={k: v for k, v in wanted.items() if v})
        except DomainError as exc:
            messages.error(request, str(exc))

    def save_related(self, request, form, formsets, change):
        pass


@admin.register(Decision)
class DecisionAdmin(ReadOnlyAdmin):
    list_display = ("title", "team", "owner", "status", "updated_at")
    list_filter = ("status", "team")


@admin.register(ModelVersion)
class ModelVersionAdmin(ReadOnlyAdmin):
    list_display = ("decision", "number", "author", "created_at", "content_sha256")
    exclude = ("results",)


@admin.register(SignOff)
class SignOffAdmin(ReadOnlyAdmin):
    list_display = ("manifestation", "version", "bound_sha256")


@admin.register(AuditEvent)
class AuditEventAdmin(ReadOnlyAdmin):
    list_display = ("seq", "created_at", "actor_username", "action", "object_type", "object_id")
    list_filter = ("action", "object_type")
