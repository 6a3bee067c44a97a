"""export_analytics --what failures|clusters: the rows other tools rely on, as JSON and as injection-safe CSV.

Ground truth: failures raised by the real Python interpreter from known causes
(tests/analytics/test_clusters_support.py); the CSV is read back with Python's csv module, and the
formula-looking test name follows the OWASP "CSV Injection" guidance (leading quote).
"""

from __future__ import annotations

import csv
import io
import json
from collections import Counter

import pytest
from django.core.management import call_command
from sklearn.metrics import adjusted_rand_score

from analytics.models import FailureCluster
from analytics.services.clusters import clusters_refresh
from ingest.models import TestResult
from tests.analytics.test_clusters_support import add_build, history, make_project

pytestmark = pytest.mark.django_db

FAILURE_FIELDS = ("build", "classname", "name", "attempt", "cluster_id", "cluster_label")
FORMULA_NAME = '=HYPERLINK("http://x")'


@pytest.fixture
def project():
    project = make_project()
    builds, truth = history(project, builds=2)
    _, more = add_build(
        project,
        "nightly-extra",
        [(FORMULA_NAME, "berth-key", 31), (FORMULA_NAME, "berth-key", 32)],
        started_at=builds[-1].started_at,
    )
    truth.update(more)
    clusters_refresh(project_id=project.pk)
    project.truth = truth
    return project


def export(what: str, fmt: str) -> str:
    out = io.StringIO()
    call_command("export_analytics", project="berthwise", what=what, format=fmt, stdout=out)
    return out.getvalue()


def test_failures_json_lists_every_failed_or_errored_result_with_its_cluster(project):
    rows = json.loads(export("failures", "json"))
    results = TestResult.objects.filter(project=project, outcome__in=["failed", "error"])
    assert len(rows) == results.count() == len(project.truth)
    assert {r["outcome"] for r in rows} == {"failed", "error"}
    expected = Counter(
        results.values_list("build__external_id", "test_case__classname", "test_case__name", "attempt")
    )
    assert Counter((r["build"], r["classname"], r["name"], r["attempt"]) for r in rows) == expected
    labels = dict(FailureCluster.objects.values_list("pk", "label"))
    for row in rows:
        assert set(FAILURE_FIELDS) <= set(row)
        assert row["cluster_label"] == labels[row["cluster_id"]]
    # The exported cluster ids group the failures by their true cause
    # (sklearn.metrics.adjusted_rand_score, 1.0 = same partition).
    pairs = []
    ordered = results.order_by(
        "build__started_at", "build_id", "test_case__classname", "test_case__name", "attempt", "id"
    ).values_list("pk", flat=True)
    for pk, row in zip(ordered, rows, strict=True):
        pairs.append((project.truth[pk], row["cluster_id"]))
    assert adjusted_rand_score([t for t, _ in pairs], [c for _, c in pairs]) >= 0.9


def test_failures_csv_has_the_same_rows_and_neutralises_formulas(project):
    as_json = json.loads(export("failures", "json"))
    text = export("failures", "csv")
    rows = list(csv.DictReader(io.StringIO(text)))
    assert list(rows[0])[: len(FAILURE_FIELDS) + 1] == [
        "build",
        "classname",
        "name",
        "attempt",
        "outcome",
        "cluster_id",
        "cluster_label",
    ]
    assert len(rows) == len(as_json)
    names = {r["name"] for r in rows}
    assert "'" + FORMULA_NAME in names and FORMULA_NAME not in names  # OWASP CSV injection guidance
    assert [int(r["cluster_id"]) for r in rows] == [r["cluster_id"] for r in as_json]


def test_clusters_export_lists_each_cluster_holding_failures(project):
    rows = json.loads(export("clusters", "json"))
    active = FailureCluster.objects.filter(project=project, failures__gt=0, merged_into__isnull=True)
    assert {r["cluster_id"] for r in rows} == set(active.values_list("pk", flat=True))
    assert sum(r["failures"] for r in rows) == len(project.truth)
    assert [r["failures"] for r in rows] == sorted((r["failures"] for r in rows), reverse=True)
    per_cluster = Counter(r["cluster_id"] for r in json.loads(export("failures", "json")))
    assert {r["cluster_id"]: r["failures"] for r in rows} == dict(per_cluster)
    csv_rows = list(csv.DictReader(io.StringIO(export("clusters", "csv"))))
    assert [int(r["cluster_id"]) for r in csv_rows] == [r["cluster_id"] for r in rows]


def test_failures_before_any_refresh_are_listed_without_a_cluster():
    project = make_project()
    add_build(project, "b-1", [("test_one", "zero-capacity", 1)])
    rows = json.loads(export("failures", "json"))
    assert len(rows) == 1 and rows[0]["cluster_id"] is None and rows[0]["cluster_label"] is None
    assert json.loads(export("clusters", "json")) == []
