"""Study sources, their track records, and the recorded outcomes of committed decisions.

- A :class:`StudySource` belongs to one team (only its members see it) and
  claims an accuracy ``claimed[state][signal] = P(signal | state)``.
- A :class:`StudyRecord` is one past study of a source: what it said and what
  came true. Records are facts: never updated or deleted (database triggers in
  migration 0003 refuse it), so a calibration can always be recomputed.
- An :class:`Outcome` is what actually happened after a committed decision.
  There is one per decision; a correction is a new row that ``supersedes`` the
  previous one (the chain cannot fork: ``supersedes`` is unique and only one
  row per decision may supersede nothing).
- An :class:`OutcomeForecast` is one probability the model gave, at the time of
  the outcome's version, to one branch of a chance node on the realised path,
  with whether that branch happened. They are rows, not a JSON list on the
  outcome, so the team's calibration table and Brier score are computed by the
  database (``GROUP BY`` over a bin expression) on SQLite and PostgreSQL alike.
"""

from django.conf import settings
from django.db import models

from decisions.models.register import Decision, ModelVersion
from decisions.models.teams import Team
from valuation.reliability import DEFAULT_PRIOR_STRENGTH


class StudySource(models.Model):
    team = models.ForeignKey(Team, on_delete=models.PROTECT, related_name="study_sources")
    name = models.CharField(max_length=200)
    states = models.JSONField()
    signals = models.JSONField()
    claimed = models.JSONField()
    # How many past studies of each state the claim is worth (the core's documented
    # default, valuation.reliability.DEFAULT_PRIOR_STRENGTH = 10).
    prior_strength = models.FloatField(default=DEFAULT_PRIOR_STRENGTH)
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="created_sources"
    )
    created_at = models.DateTimeField()

    class Meta:
        ordering = ("team_id", "name")
        constraints = (
            models.UniqueConstraint(fields=["team", "name"], name="study_source_name_unique"),
            models.CheckConstraint(condition=models.Q(prior_strength__gt=0),
                                   name="study_source_prior_strength_positive"),
        )

    def __str__(self) -> str:
        return self.name


class RecordOrigin(models.TextChoices):
    OUTCOME = "outcome", "outcome"
    MANUAL = "manual", "manual"
    IMPORT = "import", "import"


class StudyRecord(models.Model):
    source = models.ForeignKey(StudySource, on_delete=models.PROTECT, related_name="records")
    date = models.DateField()
    signal = models.CharField(max_length=200)
    state = models.CharField(max_length=200)
    decision = models.ForeignKey(Decision, null=True, blank=True, on_delete=models.PROTECT,
                                 related_name="study_records")
    note = models.TextField(blank=True)
    origin = models.CharField(max_length=16, choices=RecordOrigin.choices)
    # SHA-256 of the imported file (imports only): the same file is not imported twice.
    import_sha256 = models.CharField(max_length=64, blank=True)
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="study_records"
    )
    created_at = models.DateTimeField()

    class Meta:
        ordering = ("source_id", "date", "id")
        # Calibration counts group by (source, state, signal); the list pages sort by date.
        indexes = (
            models.Index(fields=["source", "state", "signal"]),
            models.Index(fields=["source", "date"]),
            models.Index(fields=["source", "import_sha256"]),
        )

    def __str__(self) -> str:
        return f"{self.source}: {self.date} said {self.signal!r}, was {self.state!r}"


class Outcome(models.Model):
    decision = models.ForeignKey(Decision, on_delete=models.PROTECT, related_name="outcomes")
    version = models.ForeignKey(ModelVersion, on_delete=models.PROTECT, related_name="outcomes")
    supersedes = models.OneToOneField("self", null=True, blank=True, on_delete=models.PROTECT,
                                      related_name="superseded_by")
    recorded_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="recorded_outcomes"
    )
    recorded_at = models.DateTimeField()
    path = models.JSONField()  # {chance node id: branch label} as recorded
    study_signal = models.CharField(max_length=200, blank=True)  # "" when no study was bought
    realised_value = models.FloatField()
    note = models.TextField(blank=True)
    # Snapshots taken at record time from the version's saved results, so the
    # portfolio sums them in SQL without re-evaluating any model.
    currency = models.CharField(max_length=16)
    objective = models.CharField(max_length=8)
    expected_value = models.FloatField()  # of the chosen plan, at approval
    path_probability = models.FloatField()  # product of branch probabilities on the path
    walk = models.JSONField()  # the full path: decisions taken and chance outcomes, in order

    class Meta:
        ordering = ("decision_id", "recorded_at", "id")
        constraints = (
            # One first outcome per decision; later rows each supersede exactly one.
            models.UniqueConstraint(fields=["decision"], condition=models.Q(supersedes__isnull=True),
                                    name="outcome_one_first_per_decision"),
        )

    def __str__(self) -> str:
        return f"Outcome of {self.decision}"


class OutcomeForecast(models.Model):
    """P(branch) given by the model at a chance node on the realised path; happened 1 or 0."""

    outcome = models.ForeignKey(Outcome, on_delete=models.PROTECT, related_name="forecasts")
    node = models.CharField(max_length=200)
    branch = models.CharField(max_length=200)
    probability = models.FloatField()
    happened = models.FloatField()  # 1.0 or 0.0: a number so SQL can average (p - o)^2

    class Meta:
        ordering = ("outcome_id", "id")
        constraints = (
            models.CheckConstraint(condition=models.Q(happened__in=[0.0, 1.0]),
                                   name="outcome_forecast_happened_binary"),
        )

    def __str__(self) -> str:
        return f"{self.node}: {self.branch} p={self.probability:g}"
