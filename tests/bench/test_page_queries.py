"""Every dashboard page and list API issues the same number of SQL queries at a short and at a longer history.

The histories come from the demo generator at a reduced size (ground truth: the generator's own manifest),
imported through the real ingest service and scored by the real refresh, like the benchmark does at scale.
"""

from __future__ import annotations

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from bench.sections.pages import targets

#: Upper bound of SQL queries for any page or list API (the design limit the benchmark reports against).
MAX_QUERIES = 40


@pytest.fixture(scope="module")
def history(tmp_path_factory):
    from demo_fixtures.generate import generate
    from demo_fixtures.scenario import ScenarioParams

    out = tmp_path_factory.mktemp("history")
    generate(out, params=ScenarioParams.for_scale("demo", n_tests=40, n_days=14, builds_per_day=1.0, n_defects=20))
    return out


def _import(project, history, rows) -> None:
    from ingest.services.results import BuildMeta, results_job_create, results_job_run

    for row in rows:
        with open(history / row["file"], "rb") as fh:
            job = results_job_create(project=project, files=[(row["file"], fh)], via="cli", meta=BuildMeta(
                build=row["build"], commit=row["commit"], branch=row["branch"], ci_job=row["ci_job"],
                started=row["started"]))
        results_job_run(job=job, refresh=False)


def _query_counts(client, urls: dict[str, str]) -> dict[str, tuple[int, int]]:
    out = {}
    for label, url in urls.items():
        client.get(url)  # first request may fill caches
        with CaptureQueriesContext(connection) as ctx:
            response = client.get(url)
        out[label] = (response.status_code, len(ctx.captured_queries))
    return out


@pytest.mark.django_db
def test_query_count_does_not_grow_with_history(history, client, django_user_model):
    import csv

    from analytics.services.refresh import analytics_refresh
    from ingest.models import Project

    rows = list(csv.DictReader(open(history / "manifest.csv", encoding="utf-8")))
    assert len(rows) >= 12
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    urls, missing = targets(project.slug)
    if not urls:
        pytest.skip(f"no page or list API resolves yet: {missing}")
    client.force_login(django_user_model.objects.create(username="viewer", is_staff=True))

    _import(project, history, rows[:3])
    analytics_refresh(project_id=project.pk)
    short = _query_counts(client, urls)
    _import(project, history, rows[3:])
    analytics_refresh(project_id=project.pk)
    long = _query_counts(client, urls)

    for label in urls:
        assert short[label][0] == 200 and long[label][0] == 200, (label, short[label], long[label])
        assert long[label][1] == short[label][1], f"{label}: {short[label][1]} queries, then {long[label][1]}"
        assert long[label][1] <= MAX_QUERIES, label
