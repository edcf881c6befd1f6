"""Serializers: explicit fields only; server-owned fields are never writable.

Write serializers refuse unknown fields (a client sending ``status`` or
``author`` learns that the field is not accepted, and nothing changes).
Model documents are checked by the valuation core through the services, so the
messages read the same as everywhere else.
"""

from __future__ import annotations

import hashlib
import json

from rest_framework import serializers

from decisions.models import (
    SIGNING_ROLES,
    AuditEvent,
    ChosenStrategy,
    Decision,
    Meaning,
    Membership,
    ModelVersion,
    Role,
    SignOff,
    Status,
    Team,
)
from decisions.services.signoff import policy_progress


class StrictSerializer(serializers.Serializer):
    """Refuses fields it does not declare (mass-assignment guard)."""

    def to_internal_value(self, data):
        if isinstance(data, dict):
            unknown = sorted(set(data) - set(self.fields))
            if unknown:
                raise serializers.ValidationError(
                    {name: ["is not an accepted field here"] for name in unknown})
        return super().to_internal_value(data)


class ParsedJSONField(serializers.JSONField):
    """A JSON value that has already been through the strict body parser.

    DRF's field re-encodes the whole value only to prove it is JSON; what our parser
    produced is JSON by construction, and for a large model the re-encoding cost
    as much as the parse.
    """

    def to_internal_value(self, data):
        return data


# ---- read shapes -------------------------------------------------------------------------

class SignOffSerializer(serializers.ModelSerializer):
    version = serializers.IntegerField(source="version.number", read_only=True)
    signer = serializers.CharField(source="signer.username", read_only=True)
    manifestation = serializers.CharField(read_only=True)
    binds_current_content = serializers.SerializerMethodField()

    class Meta:
        model = SignOff
        fields = ("id", "version", "signer", "signer_printed_name", "role", "meaning", "reason",
                  "signed_at", "bound_sha256", "binds_current_content", "manifestation")
        read_only_fields = fields

    def get_binds_current_content(self, obj) -> bool:
        """The signature is bound to the bytes it signed: the stored content still hashes
        to the value the signature carries."""
        stored = hashlib.sha256(obj.version.canonical_json.encode("utf-8")).hexdigest()
        return obj.bound_sha256 == obj.version.content_sha256 == stored


class StrategySerializer(serializers.ModelSerializer):
    version = serializers.IntegerField(source="version.number", read_only=True)
    chosen_by = serializers.CharField(source="chosen_by.username", read_only=True)

    class Meta:
        model = ChosenStrategy
        fields = ("id", "version", "plan", "recommended", "justification", "value_given_up",
                  "chosen_by", "chosen_at")
        read_only_fields = fields


class VersionSummarySerializer(serializers.ModelSerializer):
    author = serializers.CharField(source="author.username", read_only=True)

    class Meta:
        model = ModelVersion
        fields = ("number", "content_sha256", "results_sha256", "author", "created_at",
                  "change_note", "source_note")
        read_only_fields = fields


class VersionSerializer(VersionSummarySerializer):
    document = serializers.SerializerMethodField()
    signoffs = SignOffSerializer(many=True, read_only=True)

    class Meta(VersionSummarySerializer.Meta):
        fields = (*VersionSummarySerializer.Meta.fields, "document", "results", "signoffs")
        read_only_fields = fields

    def get_document(self, obj) -> dict:
        return json.loads(obj.canonical_json)


class DecisionSerializer(serializers.ModelSerializer):
    team_name = serializers.CharField(source="team.name", read_only=True)
    owner = serializers.CharField(source="owner.username", read_only=True)
    etag = serializers.CharField(read_only=True)
    current_version = serializers.SerializerMethodField()
    policy = serializers.SerializerMethodField()
    strategy = serializers.SerializerMethodField()

    class Meta:
        model = Decision
        fields = ("id", "title", "team", "team_name", "owner", "status", "lock_version", "etag",
                  "created_at", "updated_at", "current_version", "policy", "strategy")
        read_only_fields = fields

    def _current(self, obj):
        # Looked up once per decision: the three fields below all need it.
        if not hasattr(obj, "_current_version_cache"):
            obj._current_version_cache = obj.current_version()
        return obj._current_version_cache

    def get_current_version(self, obj) -> dict | None:
        version = self._current(obj)
        if version is None:
            return None
        data = VersionSummarySerializer(version).data
        data["signoffs"] = SignOffSerializer(version.signoffs.all(), many=True).data
        return data

    def get_policy(self, obj) -> dict:
        return policy_progress(obj, self._current(obj))

    def get_strategy(self, obj) -> dict | None:
        version = self._current(obj)
        if version is None:
            return None
        strategies = sorted(version.strategies.all(), key=lambda st: (st.chosen_at, st.id))
        return StrategySerializer(strategies[-1]).data if strategies else None


class AuditEventSerializer(serializers.ModelSerializer):
    class Meta:
        model = AuditEvent
        fields = ("seq", "created_at", "actor_username", "action", "object_type", "object_id",
                  "payload", "prev_hash", "hash")
        read_only_fields = fields


class MembershipSerializer(serializers.ModelSerializer):
    username = serializers.CharField(source="user.username", read_only=True)
    name = serializers.SerializerMethodField()

    class Meta:
        model = Membership
        fields = ("username", "name", "role")
        read_only_fields = fields

    def get_name(self, obj) -> str:
        return obj.user.get_full_name() or obj.user.username


class TeamSerializer(serializers.ModelSerializer):
    members = MembershipSerializer(source="memberships", many=True, read_only=True)

    class Meta:
        model = Team
        fields = ("id", "name", "members")
        read_only_fields = fields


# ---- write shapes ------------------------------------------------------------------------

#: Largest row id (a signed 64-bit integer): a larger one cannot even be looked up on
#: SQLite (OverflowError), so it is refused as input instead.
MAX_ROW_ID = 2**63 - 1


def _policy_field():
    return serializers.DictField(
        child=serializers.IntegerField(), required=False,
        help_text=f"signing role -> number of sign-offs; roles: {', '.join(SIGNING_ROLES)}")


class DecisionCreateSerializer(StrictSerializer):
    team = serializers.IntegerField(min_value=1, max_value=MAX_ROW_ID)
    title = serializers.CharField(max_length=200)
    policy = _policy_field()


class DecisionUpdateSerializer(StrictSerializer):
    title = serializers.CharField(max_length=200, required=False)
    owner = serializers.CharField(required=False, help_text="username of an analyst of the team")


class VersionCreateSerializer(StrictSerializer):
    document = ParsedJSONField(help_text="a model document (payoff table or tree)")
    change_note = serializers.CharField(required=False, allow_blank=True, max_length=2000)
    source_note = serializers.CharField(required=False, allow_blank=True, max_length=2000)


class PolicySerializer(StrictSerializer):
    requirements = _policy_field()


class SignOffCreateSerializer(StrictSerializer):
    role = serializers.ChoiceField(choices=[str(r) for r in SIGNING_ROLES])
    meaning = serializers.ChoiceField(choices=Meaning.values)
    reason = serializers.CharField(required=False, allow_blank=True, max_length=2000)
    password = serializers.CharField(write_only=True, trim_whitespace=False,
                                     style={"input_type": "password"},
                                     help_text="your own password, entered again to sign")


class StrategyCreateSerializer(StrictSerializer):
    recommended = serializers.BooleanField()
    alternative = serializers.CharField(required=False, allow_blank=True, max_length=200)
    plan_text = serializers.CharField(required=False, allow_blank=True, max_length=4000)
    justification = serializers.CharField(required=False, allow_blank=True, max_length=4000)
    value_given_up = serializers.FloatField(required=False, min_value=0)


class MemberSerializer(StrictSerializer):
    username = serializers.CharField(max_length=150)
    role = serializers.ChoiceField(choices=Role.values)


class RoleSerializer(StrictSerializer):
    role = serializers.ChoiceField(choices=Role.values)


class CloseSerializer(StrictSerializer):
    note = serializers.CharField(required=False, allow_blank=True, max_length=4000)


class EmptySerializer(StrictSerializer):
    """An action that takes no body."""


class EvaluateSerializer(StrictSerializer):
    document = ParsedJSONField(help_text="a model document (payoff table or tree)")
    risk_tolerance = serializers.FloatField(required=False, allow_null=True)


class DecisionFilterSerializer(serializers.Serializer):
    status = serializers.ChoiceField(choices=Status.values, required=False)
    team = serializers.IntegerField(required=False, min_value=1, max_value=MAX_ROW_ID)
    owner = serializers.CharField(required=False)
    created_after = serializers.DateField(required=False)
    created_before = serializers.DateField(required=False)
