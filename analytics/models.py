"""Stored analytics results. The computation lives in analytics.core (pure); services fill these tables."""

from __future__ import annotations

from django.conf import settings
from django.db import models

from ingest.models import Component, Defect, Project, TestCase


class TestHealth(models.Model):
    """The latest flakiness score of one test, with the evidence behind it."""

    __test__ = False

    test_case = models.OneToOneField(TestCase, on_delete=models.CASCADE, related_name="health")
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    score = models.FloatField(help_text="Probability in [0, 1] that the test is flaky.")
    verdict = models.CharField(max_length=20, db_index=True)
    scored_by = models.CharField(max_length=40, help_text="Which scorer produced the score.")
    runs = models.IntegerField(default=0)
    failures = models.IntegerField(default=0)
    last_failure_at = models.DateTimeField(null=True, blank=True)
    evidence = models.JSONField(default=dict)
    explanation = models.JSONField(default=list, help_text="Plain-words sentences behind the score.")
    recent_outcomes = models.CharField(max_length=40, blank=True, help_text="Last runs, oldest first: P F E.")
    computed_at = models.DateTimeField()

    class Meta:
        indexes = [models.Index(fields=["project", "verdict", "score"]), models.Index(fields=["project", "score"])]


class TriageState(models.TextChoices):
    UNREVIEWED = "unreviewed", "not reviewed"
    CONFIRMED = "confirmed", "confirmed flaky"
    QUARANTINED = "quarantined", "quarantined"
    NOT_FLAKY = "not_flaky", "not flaky"


class TestTriage(models.Model):
    """A person's decision about one test. These decisions are also the labels for the classifier."""

    __test__ = False

    test_case = models.OneToOneField(TestCase, on_delete=models.CASCADE, related_name="triage")
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    state = models.CharField(max_length=20, choices=TriageState.choices, default=TriageState.UNREVIEWED)
    note = models.TextField(blank=True)
    updated_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, on_delete=models.SET_NULL, related_name="+")
    updated_at = models.DateTimeField(auto_now=True)
    green_runs_since_quarantine = models.IntegerField(default=0)

    class Meta:
        indexes = [models.Index(fields=["project", "state"])]
        permissions = [("triage", "Can change triage states and failure clusters")]


class TriageEvent(models.Model):
    """Audit log: every triage change, who made it and when."""

    test_case = models.ForeignKey(TestCase, on_delete=models.CASCADE, related_name="triage_events")
    from_state = models.CharField(max_length=20, choices=TriageState.choices)
    to_state = models.CharField(max_length=20, choices=TriageState.choices)
    note = models.TextField(blank=True)
    user = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, on_delete=models.SET_NULL, related_name="+")
    at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["-at", "-id"]


class FailureCluster(models.Model):
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="failure_clusters")
    label = models.CharField(max_length=300)
    exception = models.CharField(max_length=300, blank=True)
    representative_key = models.CharField(max_length=32, blank=True)
    representative_text = models.TextField(blank=True)
    failures = models.IntegerField(default=0)
    tests_affected = models.IntegerField(default=0)
    builds_affected = models.IntegerField(default=0)
    first_seen = models.DateTimeField(null=True, blank=True)
    last_seen = models.DateTimeField(null=True, blank=True)
    weekly_trend = models.JSONField(default=list, blank=True, help_text="[[week, failures], …] oldest first.")
    merged_into = models.ForeignKey("self", null=True, blank=True, on_delete=models.SET_NULL, related_name="+")
    note = models.TextField(blank=True)
    created_at = models.DateTimeField(auto_now_add=True)
    updated_at = models.DateTimeField(auto_now=True)

    class Meta:
        indexes = [models.Index(fields=["project", "failures"])]

    def __str__(self) -> str:
        return f"#{self.pk} {self.label}"


class FailureSignature(models.Model):
    """A distinct normalised failure signature and the cluster it belongs to."""

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    key = models.CharField(max_length=32)
    text = models.TextField()
    exception = models.CharField(max_length=300, blank=True)
    language = models.CharField(max_length=20, blank=True)
    cluster = models.ForeignKey(
        FailureCluster, null=True, blank=True, on_delete=models.SET_NULL, related_name="signatures"
    )
    pinned = models.BooleanField(default=False, help_text="A person moved it here (split or merge); refits keep it.")
    occurrences = models.IntegerField(default=0)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["project", "key"], name="uniq_signature")]


class ClusterDefectLink(models.Model):
    cluster = models.ForeignKey(FailureCluster, on_delete=models.CASCADE, related_name="defect_links")
    defect = models.ForeignKey(Defect, on_delete=models.CASCADE, related_name="cluster_links")
    score = models.FloatField()
    confirmed = models.BooleanField(default=False)
    confirmed_by = models.ForeignKey(settings.AUTH_USER_MODEL, null=True, on_delete=models.SET_NULL, related_name="+")
    confirmed_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["cluster", "defect"], name="uniq_cluster_defect")]
        ordering = ["-confirmed", "-score"]


class DefectDuplicate(models.Model):
    class Status(models.TextChoices):
        SUGGESTED = "suggested"
        CONFIRMED = "confirmed"
        DISMISSED = "dismissed"

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    defect_a = models.ForeignKey(Defect, on_delete=models.CASCADE, related_name="+")
    defect_b = models.ForeignKey(Defect, on_delete=models.CASCADE, related_name="+")
    score = models.FloatField()
    status = models.CharField(max_length=12, choices=Status.choices, default=Status.SUGGESTED)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["defect_a", "defect_b"], name="uniq_duplicate_pair")]
        ordering = ["-score"]


class ForecastSnapshot(models.Model):
    """The latest defect-inflow forecast of one series (a component, or the project total)."""

    TOTAL = "__total__"

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="forecasts")
    component = models.ForeignKey(Component, null=True, blank=True, on_delete=models.CASCADE, related_name="+")
    series_name = models.CharField(max_length=200)
    computed_at = models.DateTimeField()
    as_of = models.DateField()
    horizon_weeks = models.IntegerField()
    model = models.CharField(max_length=60)
    note = models.TextField(blank=True)
    history = models.JSONField(default=list)
    forecast = models.JSONField(default=list)
    backtest = models.JSONField(default=list)
    residual = models.JSONField(null=True, blank=True)
    trend = models.JSONField(default=dict)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["project", "series_name"], name="uniq_forecast_series")]


class RuntimeGrowth(models.Model):
    """The tests whose mean run time grew most up to one week, precomputed by the analytics refresh.

    ``top`` maps a scope to its ranked entries: ``"all"`` for the whole project and the component id (as a
    string; ``"0"`` for tests without a component) for each component, each a list of
    ``{"test_id", "test", "component", "before", "recent", "growth"}``, largest growth first. The overview
    reads this one row instead of ranking every test's weeks per request.
    """

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    week = models.DateField()
    window_weeks = models.IntegerField()
    top = models.JSONField(default=dict)
    computed_at = models.DateTimeField()

    class Meta:
        constraints = [models.UniqueConstraint(fields=["project", "week"], name="uniq_runtime_growth_week")]


class AnalyticsRun(models.Model):
    """One detector run, for the record: what ran, how long, with what outcome."""

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    detector = models.CharField(max_length=30)
    scope = models.CharField(max_length=20, default="full")
    started_at = models.DateTimeField()
    finished_at = models.DateTimeField(null=True, blank=True)
    ok = models.BooleanField(default=False)
    details = models.JSONField(default=dict)

    class Meta:
        ordering = ["-started_at"]
