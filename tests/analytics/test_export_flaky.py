"""export_analytics --what flaky: the rows other tools rely on, as JSON and as injection-safe CSV."""

from __future__ import annotations

import csv
import io
import json

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from analytics.models import TestHealth, TriageState
from analytics.services.flaky import EVIDENCE_FIELDS, flaky_scores_refresh
from analytics.services.triage import triage_set
from tests.analytics.test_flaky_service_support import add_history, make_project

pytestmark = pytest.mark.django_db

REQUIRED = ("classname", "name", "component", "score", "verdict", "triage_state", "runs", "failures")


@pytest.fixture
def project():
    project = make_project()
    tests = add_history(project, {
        "test_flaky": ["P", "FP", "P", "P", "F", "P", "P", "FP", "P", "P"],
        "test_stable": ["P"] * 10,
        # A test name that a spreadsheet would run as a formula (OWASP CSV injection).
        "=HYPERLINK(\"http://x\")": ["P"] * 10,
    }, builds_per_commit=2)
    triage_set(test_case=tests["test_flaky"], state=TriageState.QUARANTINED, note="noisy")
    flaky_scores_refresh(project_id=project.pk)
    return project


def export(fmt: str, slug: str = "berthwise") -> str:
    out = io.StringIO()
    call_command("export_analytics", project=slug, what="flaky", format=fmt, stdout=out)
    return out.getvalue()


def test_json_has_one_row_per_scored_test_with_the_stored_figures(project):
    rows = json.loads(export("json"))
    assert len(rows) == TestHealth.objects.count() == 3
    assert rows == sorted(rows, key=lambda r: -r["score"])  # most likely flaky first
    by_name = {r["name"]: r for r in rows}
    for row in rows:
        assert set(REQUIRED) | set(EVIDENCE_FIELDS) <= set(row)
        assert row["id"] == f"{row['classname']}::{row['name']}" and row["component"] == "Booking API"
        health = TestHealth.objects.get(test_case__name=row["name"])
        assert (row["verdict"], row["runs"], row["failures"]) == (health.verdict, health.runs, health.failures)
        assert row["score"] == pytest.approx(health.score, abs=1e-6)
        assert all(row[k] == health.evidence[k] for k in EVIDENCE_FIELDS)
    assert by_name["test_flaky"]["triage_state"] == "quarantined"
    assert by_name["test_stable"]["triage_state"] == "unreviewed"
    # 12 runs, 3 failed; passed on rerun in two builds (counted by hand from the history above).
    assert (by_name["test_flaky"]["runs"], by_name["test_flaky"]["failures"]) == (12, 3)
    assert by_name["test_flaky"]["pass_on_rerun"] == 2


def test_csv_has_the_same_rows_and_neutralises_formulas(project):
    rows = json.loads(export("json"))
    table = list(csv.DictReader(io.StringIO(export("csv"))))
    assert [r["name"] for r in table] == [
        "'" + r["name"] if r["name"].startswith("=") else r["name"] for r in rows
    ]
    assert list(table[0]) == list(rows[0])
    for got, want in zip(table, rows, strict=True):
        assert float(got["score"]) == pytest.approx(want["score"])
        assert int(got["runs"]) == want["runs"] and got["verdict"] == want["verdict"]


def test_unknown_project_is_named():
    with pytest.raises(CommandError, match="no project with slug 'nowhere'"):
        export("json", slug="nowhere")


def test_project_without_scores_exports_an_empty_list():
    make_project("empty")
    assert json.loads(export("json", slug="empty")) == []
    assert export("csv", slug="empty").strip() == ""
