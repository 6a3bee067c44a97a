"""The overview's "tests whose run time grew" against a recomputation from the raw results with pandas
(mean duration per test over the last 4 weeks vs the 4 weeks before: the definition the page states)."""

from __future__ import annotations

import io
from datetime import date, timedelta

import pandas as pd
import pytest

from analytics.models import RuntimeGrowth
from analytics.selectors_overview import (
    GROWTH_TOP,
    GROWTH_WINDOW,
    Scope,
    duration_growth_frame,
    growth_by_test,
)
from analytics.services.growth import runtime_growth_refresh
from analytics.services.refresh import analytics_refresh_after_build
from ingest.models import Build, Component, ComponentRule, Project, TestResult
from ingest.services.results import BuildMeta, results_job_create, results_job_run

pytestmark = pytest.mark.django_db

WEEK = date(2026, 11, 23)  # a Monday


def _import(project: Project, build: str, day: date, durations: dict[tuple[str, str], float | None]) -> None:
    cases = "".join(
        f'<testcase classname="{c}" name="{n}"' + (f' time="{d}"/>' if d is not None else "/>")
        for (c, n), d in durations.items()
    )
    job = results_job_create(project=project, files=[("r.xml", io.BytesIO(f"<testsuite>{cases}</testsuite>".encode()))],
                             meta=BuildMeta(build=build, started=f"{day.isoformat()}T06:00:00Z"), via="cli")
    results_job_run(job=job, refresh=False)


def _reference(project: Project, week: date, component: str | None = None) -> pd.DataFrame:
    rows = TestResult.objects.filter(project=project, duration__isnull=False).values_list(
        "test_case_id", "build__week", "duration", "test_case__component__name")
    frame = pd.DataFrame(list(rows), columns=["test_id", "week", "duration", "component"])
    if component is not None:
        frame = frame[frame["component"] == component]
    recent_from = week - timedelta(weeks=GROWTH_WINDOW - 1)
    before_from = recent_from - timedelta(weeks=GROWTH_WINDOW)
    recent = frame[(frame["week"] >= recent_from) & (frame["week"] <= week)].groupby("test_id")["duration"].mean()
    before = frame[(frame["week"] >= before_from) & (frame["week"] < recent_from)].groupby("test_id")["duration"].mean()
    growth = (recent - before).dropna()
    growth = growth[growth > 0]
    return growth.sort_values(ascending=False, kind="stable")


@pytest.fixture
def project():
    project = Project.objects.create(slug="marina", name="Marina")
    docks = Component.objects.create(project=project, name="Docks")
    ComponentRule.objects.create(project=project, classname_prefix="docks.", component=docks)
    tests = [("docks.api", f"test_{i}") for i in range(6)] + [("billing", f"test_{i}") for i in range(6)]
    for k in range(12):  # twelve weekly builds, two runs a week for some tests
        day = WEEK - timedelta(weeks=11 - k)
        base = {t: 1.0 + i * 0.1 + k * 0.013 * (i - 4) for i, t in enumerate(tests)}  # distinct slopes
        base[tests[3]] = None  # a test that never reports a time
        _import(project, f"b{k}", day, base)
        if k % 3 == 0:
            _import(project, f"b{k}x", day + timedelta(days=2), {t: 5.0 for t in tests[:2]})
    return project


def test_growth_equals_the_raw_results_recomputation(project):
    got = growth_by_test(project_id=project.pk, week=WEEK)
    want = _reference(project, WEEK)
    assert list(got["test_id"]) == list(want.index)
    assert got["growth"].to_numpy() == pytest.approx(want.to_numpy(), rel=1e-9)
    assert (got["recent"] - got["before"]).to_numpy() == pytest.approx(got["growth"].to_numpy(), rel=1e-9)


def test_the_page_reads_the_stored_top_of_each_scope(project):
    docks = Component.objects.get(name="Docks")
    want = _reference(project, WEEK)
    want_docks = _reference(project, WEEK, component="Docks")
    # Before any refresh the page ranks the week itself; after it, it reads the stored row: same answer.
    for stored in (False, True):
        if stored:
            assert runtime_growth_refresh(project_id=project.pk) == 12
            assert RuntimeGrowth.objects.filter(project=project).count() == 12
        shown = duration_growth_frame(Scope(project.pk, WEEK))
        assert list(shown["test_id"]) == list(want.index[:GROWTH_TOP])
        assert shown["growth"].to_numpy() == pytest.approx(want.to_numpy()[:GROWTH_TOP], rel=1e-9)
        scoped = duration_growth_frame(Scope(project.pk, WEEK, docks.pk))
        assert list(scoped["test_id"]) == list(want_docks.index[:GROWTH_TOP])
        assert set(scoped["component"]) == {"Docks"} and all(t.startswith("docks.api::") for t in scoped["test"])


def test_a_new_build_refreshes_its_week(project):
    runtime_growth_refresh(project_id=project.pk)
    before = duration_growth_frame(Scope(project.pk, WEEK))
    slow = {("docks.api", "test_2"): 60.0}  # a test that shrank so far becomes the fastest-growing one
    _import(project, "late", WEEK + timedelta(days=3), slow)
    build = Build.objects.get(external_id="late")
    analytics_refresh_after_build(project_id=project.pk, build_id=build.pk)
    after = duration_growth_frame(Scope(project.pk, WEEK))
    assert after["test"].iloc[0] == "docks.api::test_2" and "docks.api::test_2" not in set(before["test"])
    assert list(after["test_id"]) == list(_reference(project, WEEK).index[:GROWTH_TOP])
