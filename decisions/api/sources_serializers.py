"""Serializers of study sources, their records, outcomes and the source-related requests.

Write serializers refuse unknown fields (``StrictSerializer``); the rules about
content (likelihood tables, states and signals, paths) are the services' and
the core's, so a message reads the same on the API, the web and the command line.
"""

from __future__ import annotations

from rest_framework import serializers

from decisions.api.serializers import MAX_ROW_ID, StrictSerializer
from decisions.models import Outcome, StudyRecord, StudySource
from decisions.services.sources import ACCURACY_MODES

# ---- read shapes -------------------------------------------------------------------------


class StudySourceSerializer(serializers.ModelSerializer):
    team = serializers.IntegerField(source="team_id", read_only=True)
    created_by = serializers.CharField(source="created_by.username", read_only=True)
    records = serializers.SerializerMethodField()

    class Meta:
        model = StudySource
        fields = ("id", "team", "name", "states", "signals", "claimed", "prior_strength",
                  "created_by", "created_at", "records")
        read_only_fields = fields

    def get_records(self, obj) -> int:
        annotated = getattr(obj, "record_count", None)
        return annotated if annotated is not None else obj.records.count()


class StudyRecordSerializer(serializers.ModelSerializer):
    decision = serializers.IntegerField(source="decision_id", read_only=True, allow_null=True)
    created_by = serializers.CharField(source="created_by.username", read_only=True)

    class Meta:
        model = StudyRecord
        fields = ("id", "date", "signal", "state", "decision", "note", "origin", "created_by",
                  "created_at")
        read_only_fields = fields


class OutcomeSerializer(serializers.ModelSerializer):
    version = serializers.IntegerField(source="version.number", read_only=True)
    recorded_by = serializers.CharField(source="recorded_by.username", read_only=True)
    supersedes = serializers.IntegerField(source="supersedes_id", read_only=True,
                                          allow_null=True)

    class Meta:
        model = Outcome
        fields = ("id", "version", "supersedes", "recorded_by", "recorded_at", "path",
                  "study_signal", "realised_value", "note", "currency", "expected_value",
                  "path_probability", "walk")
        read_only_fields = fields


# ---- write shapes ------------------------------------------------------------------------


class StudySourceCreateSerializer(StrictSerializer):
    team = serializers.IntegerField(min_value=1, max_value=MAX_ROW_ID)
    name = serializers.CharField(max_length=200)
    claimed = serializers.JSONField(help_text="state -> signal -> claimed P(signal | state)")
    prior_strength = serializers.FloatField(required=False, allow_null=True)


class StudyRecordCreateSerializer(StrictSerializer):
    date = serializers.CharField(help_text="YYYY-MM-DD")
    signal = serializers.CharField(max_length=200)
    state = serializers.CharField(max_length=200)
    note = serializers.CharField(required=False, allow_blank=True, max_length=5000)
    decision = serializers.IntegerField(required=False, allow_null=True)


class OutcomeCreateSerializer(StrictSerializer):
    path = serializers.JSONField(help_text="{chance node id: branch label taken}")
    study_signal = serializers.CharField(required=False, allow_blank=True, max_length=200)
    realised_value = serializers.FloatField()
    note = serializers.CharField(required=False, allow_blank=True, max_length=5000)


class ApplySourceSerializer(StrictSerializer):
    study = serializers.CharField(max_length=200)
    source = serializers.IntegerField()
    mode = serializers.ChoiceField(choices=ACCURACY_MODES, default="claimed")
