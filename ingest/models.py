"""Barometer's stored data: projects, components, test cases, builds, results, defects and import jobs."""

from __future__ import annotations

import hashlib
import secrets
from datetime import UTC, date, datetime, timedelta

from django.conf import settings
from django.db import models
from django.utils import timezone


def week_start(moment: datetime | date) -> date:
    """Monday (UTC) of the ISO week containing ``moment``."""
    day = moment.astimezone(UTC).date() if isinstance(moment, datetime) else moment
    return day - timedelta(days=day.weekday())


class Project(models.Model):
    slug = models.SlugField(unique=True, max_length=80)
    name = models.CharField(max_length=200)
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        ordering = ["name"]

    def __str__(self) -> str:
        return self.name


class Component(models.Model):
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="components")
    name = models.CharField(max_length=200)

    class Meta:
        ordering = ["name"]
        constraints = [models.UniqueConstraint(fields=["project", "name"], name="uniq_component_name")]

    def __str__(self) -> str:
        return self.name


class ComponentAlias(models.Model):
    """Another spelling of a component ("UI", "Front end / UI"); matched case- and space-insensitively."""

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="component_aliases")
    alias = models.CharField(max_length=200, help_text="Matched ignoring case and surrounding spaces.")
    component = models.ForeignKey(Component, on_delete=models.CASCADE, related_name="aliases")

    class Meta:
        verbose_name_plural = "component aliases"
        constraints = [models.UniqueConstraint(fields=["project", "alias"], name="uniq_component_alias")]

    def save(self, *args, **kwargs):
        self.alias = normalise_alias(self.alias)
        super().save(*args, **kwargs)

    def __str__(self) -> str:
        return f"{self.alias} → {self.component}"


def normalise_alias(text: str) -> str:
    return " ".join(text.split()).casefold()


class ComponentRule(models.Model):
    """Assigns test cases to a component by the start of their classname (longest prefix wins)."""

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="component_rules")
    classname_prefix = models.CharField(max_length=300)
    component = models.ForeignKey(Component, on_delete=models.CASCADE, related_name="rules")

    class Meta:
        ordering = ["-classname_prefix"]
        constraints = [
            models.UniqueConstraint(fields=["project", "classname_prefix"], name="uniq_component_rule")
        ]

    def __str__(self) -> str:
        return f"{self.classname_prefix}* → {self.component}"


class TestCase(models.Model):
    __test__ = False  # not a pytest test class

    # Covered by the unique (project, classname, name) index: no index of its own.
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="test_cases", db_index=False)
    classname = models.CharField(max_length=500, blank=True)
    name = models.CharField(max_length=500)
    file = models.CharField(max_length=500, blank=True)
    suite = models.CharField(max_length=500, blank=True)
    component = models.ForeignKey(
        Component, null=True, blank=True, on_delete=models.SET_NULL, related_name="test_cases"
    )
    component_locked = models.BooleanField(
        default=False, help_text="Set when a person chose the component; rules no longer change it."
    )
    first_seen = models.DateTimeField(default=timezone.now)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["project", "classname", "name"], name="uniq_test_identity")
        ]
        indexes = [models.Index(fields=["project", "component"])]

    @property
    def full_name(self) -> str:
        return f"{self.classname}::{self.name}" if self.classname else self.name

    def __str__(self) -> str:
        return self.full_name


class Build(models.Model):
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="builds")
    external_id = models.CharField(max_length=200)
    commit = models.CharField(max_length=80, blank=True)
    branch = models.CharField(max_length=250, blank=True)
    ci_job = models.CharField(max_length=250, blank=True)
    started_at = models.DateTimeField()
    week = models.DateField(help_text="Monday (UTC) of the week the build started; rollups group by it.")
    created_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["project", "external_id"], name="uniq_build_id")]
        indexes = [
            models.Index(fields=["project", "started_at"]),
            models.Index(fields=["project", "week"]),
            models.Index(fields=["project", "commit"]),
        ]

    def save(self, *args, **kwargs):
        self.week = week_start(self.started_at)
        super().save(*args, **kwargs)

    def __str__(self) -> str:
        return self.external_id


class Outcome(models.TextChoices):
    PASSED = "passed"
    FAILED = "failed"
    ERROR = "error"
    SKIPPED = "skipped"


class TestResult(models.Model):
    __test__ = False

    # No single-column index on the foreign keys: each leads one of the composite indexes below, and every
    # index costs the bulk load of results time.
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+", db_index=False)
    build = models.ForeignKey(Build, on_delete=models.CASCADE, related_name="results", db_index=False)
    test_case = models.ForeignKey(TestCase, on_delete=models.CASCADE, related_name="results", db_index=False)
    outcome = models.CharField(max_length=7, choices=Outcome.choices)
    duration = models.FloatField(null=True, blank=True, help_text="Seconds.")
    attempt = models.PositiveSmallIntegerField(default=1, help_text="1 for the first run in a build; reruns 2, 3…")
    failure_type = models.CharField(max_length=300, blank=True)
    message = models.TextField(blank=True)
    details = models.TextField(blank=True, help_text="Traceback or failure text.")
    system_out = models.TextField(blank=True)
    system_err = models.TextField(blank=True)
    truncated = models.JSONField(
        default=dict, blank=True, help_text="Field → original length, for each field cut to its size cap."
    )
    signature = models.CharField(
        max_length=32, blank=True, db_index=True, help_text="Failure-cause signature key (failures only)."
    )  # on PostgreSQL without Django's extra LIKE index (migration 0003): signatures are compared for equality

    class Meta:
        indexes = [
            models.Index(fields=["test_case", "build"]),
            models.Index(fields=["build", "outcome"]),
            models.Index(fields=["project", "outcome"]),
        ]

    def __str__(self) -> str:
        return f"{self.test_case_id}@{self.build_id}#{self.attempt}: {self.outcome}"


class WeeklyCounts(models.Model):
    """The counts both weekly rollups keep (``rollup_add_counts`` adds to all of them in one statement)."""

    runs = models.IntegerField(default=0)
    passed = models.IntegerField(default=0)
    failed = models.IntegerField(default=0)
    errors = models.IntegerField(default=0)
    skipped = models.IntegerField(default=0)
    reruns = models.IntegerField(default=0)
    duration_total = models.FloatField(default=0.0)
    duration_count = models.IntegerField(default=0)

    class Meta:
        abstract = True


class TestWeek(WeeklyCounts):
    """Per-test, per-week rollup kept up to date by ingest: pages read this, not the results table.

    Derived data (``rollup_rebuild`` recomputes it from the results), so its foreign keys are not database
    constraints: a constraint trigger per written row more than doubled the rollup's share of each import.
    Deletes still cascade (Django's collector), and the single-column indexes are covered by the composite
    ones.
    """

    __test__ = False

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+", db_index=False,
                                db_constraint=False)
    test_case = models.ForeignKey(TestCase, on_delete=models.CASCADE, related_name="weeks", db_index=False,
                                  db_constraint=False)
    week = models.DateField()

    class Meta:
        constraints = [models.UniqueConstraint(fields=["test_case", "week"], name="uniq_test_week")]
        indexes = [
            models.Index(fields=["project", "week"]),
            # The week's failing tests (a few per cent of the rows): newly failing, fixed, the failed table.
            models.Index(fields=["project", "week"], name="ingest_testweek_failing",
                         condition=models.Q(failed__gt=0) | models.Q(errors__gt=0)),
        ]


class ProjectWeek(WeeklyCounts):
    """Per-project, per-week, per-component totals of :class:`TestWeek`, kept up to date by ingest.

    The weekly trend charts read these few rows (weeks × components) instead of every test's week, so their
    cost does not grow with the number of tests or the length of the history. ``component_key`` is the
    test's component id at the time of writing, 0 for tests without a component (a plain integer, not a
    foreign key, so that "no component" has a key the unique constraint can use). The component rules and
    the admin rebuild these rows when they move or delete tests (``ingest.services.results.project_weeks_rebuild``);
    totals left under a component deleted otherwise are read as "(no component)". ``tests`` counts
    the tests with at least one run in the week.
    """

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    week = models.DateField()
    component_key = models.BigIntegerField(default=0)
    tests = models.IntegerField(default=0)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["project", "week", "component_key"], name="uniq_project_week_component")
        ]


class ApiToken(models.Model):
    """A per-project upload/read token. Only a SHA-256 hash is stored; the key is shown once on creation."""

    PREFIX = "bmt_"

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="api_tokens")
    name = models.CharField(max_length=200, help_text="What uses it, e.g. 'main pipeline'.")
    key_prefix = models.CharField(max_length=12, editable=False)
    key_hash = models.CharField(max_length=64, unique=True, editable=False)
    created_at = models.DateTimeField(auto_now_add=True)
    last_used_at = models.DateTimeField(null=True, blank=True, editable=False)
    revoked = models.BooleanField(default=False)

    def __str__(self) -> str:
        return f"{self.name} ({self.key_prefix}…)"

    @staticmethod
    def hash_key(key: str) -> str:
        return hashlib.sha256(key.encode("utf-8")).hexdigest()

    @classmethod
    def issue(cls, *, project: Project, name: str) -> tuple[ApiToken, str]:
        key = cls.PREFIX + secrets.token_urlsafe(32)
        token = cls.objects.create(project=project, name=name, key_prefix=key[:12], key_hash=cls.hash_key(key))
        return token, key


class ImportJob(models.Model):
    class Kind(models.TextChoices):
        RESULTS = "results", "test results"
        DEFECTS = "defects", "defect export"

    class Status(models.TextChoices):
        QUEUED = "queued"
        RUNNING = "running"
        DONE = "done"
        FAILED = "failed"

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="import_jobs")
    kind = models.CharField(max_length=10, choices=Kind.choices)
    status = models.CharField(max_length=10, choices=Status.choices, default=Status.QUEUED)
    original_name = models.CharField(max_length=500, help_text="File name(s) as uploaded.")
    size = models.BigIntegerField(default=0)
    sha256 = models.CharField(max_length=64, blank=True)
    parameters = models.JSONField(default=dict, blank=True, help_text="Build metadata or column map used.")
    counts = models.JSONField(default=dict, blank=True)
    warnings = models.JSONField(default=list, blank=True)
    row_errors = models.JSONField(default=list, blank=True, help_text="Rejected rows: line, column, reason.")
    error = models.TextField(blank=True)
    progress = models.FloatField(default=0.0, help_text="0 to 1.")
    build = models.ForeignKey(Build, null=True, blank=True, on_delete=models.SET_NULL, related_name="import_jobs")
    created_by = models.ForeignKey(
        settings.AUTH_USER_MODEL, null=True, blank=True, on_delete=models.SET_NULL, related_name="+"
    )
    created_via = models.CharField(max_length=20, default="cli")
    created_at = models.DateTimeField(auto_now_add=True)
    enqueued_at = models.DateTimeField(null=True, blank=True)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)
    attempts = models.PositiveIntegerField(default=0)

    class Meta:
        ordering = ["-created_at"]
        indexes = [models.Index(fields=["project", "status"]), models.Index(fields=["status", "enqueued_at"])]

    def __str__(self) -> str:
        return f"{self.kind} import #{self.pk} ({self.status})"


class StoredFile(models.Model):
    """One raw uploaded file, kept content-addressed on disk so it can be re-parsed."""

    job = models.ForeignKey(ImportJob, on_delete=models.CASCADE, related_name="files")
    original_name = models.CharField(max_length=500)
    size = models.BigIntegerField()
    sha256 = models.CharField(max_length=64, db_index=True)
    path = models.CharField(max_length=500, help_text="Relative to MEDIA_ROOT.")

    class Meta:
        ordering = ["id"]


class ImportedReport(models.Model):
    """Idempotency record: this report file (by content) was imported into this build."""

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="+")
    build = models.ForeignKey(Build, on_delete=models.CASCADE, related_name="reports")
    sha256 = models.CharField(max_length=64)
    original_name = models.CharField(max_length=500)
    job = models.ForeignKey(ImportJob, null=True, on_delete=models.SET_NULL, related_name="+")
    results = models.IntegerField(default=0)
    imported_at = models.DateTimeField(auto_now_add=True)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["project", "build", "sha256"], name="uniq_report_per_build")
        ]


class DefectColumnMap(models.Model):
    """A saved, named mapping from a tracker export's columns to Barometer's defect fields."""

    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="column_maps")
    name = models.CharField(max_length=200)
    definition = models.JSONField(help_text="Column map JSON: fields, closed_statuses, severity_order, …")
    updated_at = models.DateTimeField(auto_now=True)

    class Meta:
        constraints = [models.UniqueConstraint(fields=["project", "name"], name="uniq_column_map")]

    def __str__(self) -> str:
        return self.name


class Defect(models.Model):
    project = models.ForeignKey(Project, on_delete=models.CASCADE, related_name="defects")
    key = models.CharField(max_length=200)
    title = models.TextField()
    description = models.TextField(blank=True)
    created_at = models.DateTimeField()
    resolved_at = models.DateTimeField(null=True, blank=True)
    status = models.CharField(max_length=100, blank=True)
    is_closed = models.BooleanField(default=False)
    severity = models.CharField(max_length=100, blank=True)
    severity_rank = models.IntegerField(null=True, blank=True)
    priority = models.CharField(max_length=100, blank=True)
    priority_rank = models.IntegerField(null=True, blank=True)
    components = models.ManyToManyField(Component, blank=True, related_name="defects")
    type = models.CharField(max_length=100, blank=True)
    found_in = models.CharField(max_length=100, blank=True)
    fixed_in = models.CharField(max_length=100, blank=True)
    reporter = models.CharField(max_length=200, blank=True)
    assignee = models.CharField(max_length=200, blank=True)
    labels = models.JSONField(default=list, blank=True)
    first_imported = models.DateTimeField(default=timezone.now)
    last_imported = models.DateTimeField(default=timezone.now)
    last_import_job = models.ForeignKey(ImportJob, null=True, blank=True, on_delete=models.SET_NULL, related_name="+")

    class Meta:
        constraints = [models.UniqueConstraint(fields=["project", "key"], name="uniq_defect_key")]
        indexes = [models.Index(fields=["project", "created_at"]), models.Index(fields=["project", "resolved_at"])]

    def __str__(self) -> str:
        return f"{self.key}: {self.title[:60]}"
