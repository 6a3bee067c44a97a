"""The demo load step on a fresh database: data arrives through the real ingest paths, twice is once.

Ground truth: the demo generator's own ``ground_truth.json`` (planted defect counts per component) and the
files it writes (one CSV data row per defect, read back with Python's csv module, RFC 4180).
"""

from __future__ import annotations

import csv
import io
import json

import pytest
from django.contrib.auth import get_user_model
from django.core.management import call_command

from analytics.models import TestHealth
from demo_fixtures.generate import generate
from demo_fixtures.scenario import ScenarioParams
from ingest.management.commands.load_demo import DEMO_LOGINS, DEMO_MAP_NAME
from ingest.models import Build, Component, Defect, DefectColumnMap, ImportJob, TestCase, TestResult, TestWeek


def counts():
    User = get_user_model()
    models = (Build, TestCase, TestResult, TestWeek, Defect, Component, TestHealth, ImportJob, User)
    return {m.__name__: m.objects.count() for m in models}


@pytest.mark.django_db
def test_load_demo_twice_leaves_the_same_rows(tmp_path):
    data = tmp_path / "demo"
    generate(data, params=ScenarioParams.for_scale("demo", n_tests=60, n_days=21, n_defects=40))
    truth = json.loads((data / "ground_truth.json").read_text(encoding="utf-8"))
    planted = sum(c["base"] + c["surge"] for c in truth["defect_inflow"]["counts"])
    with open(data / "defects.csv", encoding="utf-8", newline="") as fh:
        assert planted == sum(1 for _ in csv.DictReader(fh))  # the export holds every planted defect
    out = io.StringIO()
    call_command("load_demo", data=data, stdout=out)
    first = counts()
    assert first["TestResult"] > 1000 and first["TestHealth"] == first["TestCase"]
    assert first["Defect"] == planted
    # the defects came through the real import path, with the map saved for the upload page
    job = ImportJob.objects.get(kind=ImportJob.Kind.DEFECTS)
    assert job.status == ImportJob.Status.DONE and job.counts["created"] == planted and job.row_errors == []
    assert DefectColumnMap.objects.filter(name=DEMO_MAP_NAME).exists()
    # every test case landed in a component through the classname rules
    assert not TestCase.objects.filter(component__isnull=True).exists()
    # three kinds of user; the printed logins work
    User = get_user_model()
    for username, password, _ in DEMO_LOGINS:
        assert User.objects.get(username=username).check_password(password)
        assert username in out.getvalue() and password in out.getvalue()
    demo, triager, viewer = (User.objects.get(username=u) for u in ("demo", "triager", "viewer"))
    assert demo.is_staff and demo.has_perm("analytics.triage")
    assert triager.has_perm("analytics.triage") and not triager.is_staff
    assert triager.groups.filter(name="triagers").exists()
    assert not viewer.is_staff and not viewer.get_all_permissions()
    assert "change" in out.getvalue()  # the note to change the demo passwords
    pages_have_data(demo)

    call_command("load_demo", data=data, stdout=io.StringIO())
    second = counts()
    # Only the defect import leaves a (no-change) job record; the results backfill is skipped outright.
    assert second == {**first, "ImportJob": first["ImportJob"] + 1}
    assert Defect.objects.count() == planted


def pages_have_data(user) -> None:
    """Every dashboard page of the loaded demo shows rows or drawn charts, not an empty state."""
    from django.test import Client
    from django.urls import reverse
    from lxml import html as lxml_html

    from analytics.models import FailureCluster, ForecastSnapshot
    from demo_fixtures.texts import PROJECT_SLUG

    assert FailureCluster.objects.exists() and ForecastSnapshot.objects.exists()
    client = Client()
    client.force_login(user)
    # (page, id of the table whose body must have rows, or None, least number of plotly charts)
    expected = [("overview", None, 4), ("flaky-list", "flaky-table", 0), ("causes-list", "causes-table", 0),
                ("forecasts", "forecast-table", 1), ("imports", "jobs-table", 0)]
    for name, table_id, charts in expected:
        response = client.get(reverse(name, kwargs={"slug": PROJECT_SLUG}))
        assert response.status_code == 200, name
        tree = lxml_html.fromstring(response.content)
        if table_id:
            rows = tree.xpath(f'//table[@id="{table_id}"]/tbody/tr[td and not(td[@colspan])]')
            assert len(rows) > 0, f"{name}: no rows in #{table_id}"
        assert len(tree.xpath('//div[contains(@class, "plotly-graph-div")]')) >= charts, name
