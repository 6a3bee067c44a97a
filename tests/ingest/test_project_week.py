"""The per-component weekly totals (ProjectWeek) kept by ingest, checked against a recomputation from the
stored results themselves (pandas group-by over TestResult ⨝ Build ⨝ TestCase): the reference is the raw
rows, not the rollup code under test."""

from __future__ import annotations

import io
from datetime import date

import pandas as pd
import pytest

from analytics.selectors_overview import NO_COMPONENT, Scope, component_failures_frame, weekly_runs_frame
from ingest.models import Component, ComponentRule, Project, ProjectWeek, TestResult
from ingest.services.components import components_apply_rules
from ingest.services.results import BuildMeta, project_weeks_rebuild, results_job_create, results_job_run

pytestmark = pytest.mark.django_db

FIELDS = ["tests", "runs", "passed", "failed", "errors", "skipped", "reruns", "duration_count"]


def _case(classname: str, name: str, outcome: str, time: str = "1") -> str:
    body = {"passed": "/>", "failed": '><failure message="m"/></testcase>',
            "error": '><error message="e"/></testcase>', "skipped": "><skipped/></testcase>"}[outcome]
    return f'<testcase classname="{classname}" name="{name}" time="{time}"{body}'


def _import(project: Project, build: str, started: str, cases: list[str], name: str = "r.xml") -> None:
    xml = f'<testsuite name="s">{"".join(cases)}</testsuite>'.encode()
    job = results_job_create(project=project, files=[(name, io.BytesIO(xml))],
                             meta=BuildMeta(build=build, started=started), via="cli")
    results_job_run(job=job, refresh=False)
    job.refresh_from_db()
    assert job.status == "done", job.error


def _reference(project: Project) -> dict[tuple[date, int], dict[str, float]]:
    rows = TestResult.objects.filter(project=project).values_list(
        "test_case_id", "test_case__component_id", "build__week", "outcome", "attempt", "duration")
    frame = pd.DataFrame(list(rows), columns=["test", "component", "week", "outcome", "attempt", "duration"])
    frame["component"] = frame["component"].fillna(0).astype(int)
    out = {}
    for (week, comp), g in frame.groupby(["week", "component"]):
        out[(week, comp)] = {
            "tests": g["test"].nunique(), "runs": len(g), "passed": int((g["outcome"] == "passed").sum()),
            "failed": int((g["outcome"] == "failed").sum()), "errors": int((g["outcome"] == "error").sum()),
            "skipped": int((g["outcome"] == "skipped").sum()), "reruns": int((g["attempt"] > 1).sum()),
            "duration_count": int(g["duration"].notna().sum()),
        }
    return out


def _stored(project: Project) -> dict[tuple[date, int], dict[str, float]]:
    return {(r["week"], r["component_key"]): {f: r[f] for f in FIELDS}
            for r in ProjectWeek.objects.filter(project=project).values("week", "component_key", *FIELDS)}


@pytest.fixture
def history():
    project = Project.objects.create(slug="marina", name="Marina")
    berths = Component.objects.create(project=project, name="Berths")
    ComponentRule.objects.create(project=project, classname_prefix="berths.", component=berths)
    week1 = [_case("berths.api", "test_book", "passed"), _case("berths.api", "test_cancel", "failed"),
             _case("billing.core", "test_invoice", "error"), _case("misc", "test_docs", "skipped")]
    _import(project, "b1", "2026-10-05T08:00:00Z", week1)
    # Second job into the same build: one test seen already this week, one new; a third build the same week.
    _import(project, "b1", "2026-10-05T08:00:00Z",
            [_case("berths.api", "test_book", "failed"), _case("berths.ui", "test_map", "passed")], name="r2.xml")
    _import(project, "b2", "2026-10-07T08:00:00Z", [_case("berths.api", "test_cancel", "passed", "2.5")])
    _import(project, "b3", "2026-10-13T08:00:00Z", week1)  # the next week
    return project, berths


def test_incremental_totals_equal_a_recomputation_from_the_raw_results(history):
    project, _ = history
    stored = _stored(project)
    assert stored == _reference(project)
    # A test run by two jobs of one week counts once in "tests" (test_book: b1 twice, so 5 distinct tests).
    assert sum(v["tests"] for (w, _), v in stored.items() if w == date(2026, 10, 5)) == 5
    project_weeks_rebuild(project_id=project.pk)
    assert _stored(project) == stored


def test_reassigned_components_move_the_totals(history):
    project, berths = history
    billing = Component.objects.create(project=project, name="Billing")
    ComponentRule.objects.create(project=project, classname_prefix="billing.", component=billing)
    assert components_apply_rules(project=project) == 1
    assert _stored(project) == _reference(project)
    assert any(key == billing.pk for _, key in _stored(project))


def test_overview_trends_read_the_totals_and_a_deleted_component_counts_as_none(history):
    project, berths = history
    scope = Scope(project.pk, date(2026, 10, 12))
    weekly = weekly_runs_frame(scope, weeks=2).set_index("week")
    assert weekly.loc[date(2026, 10, 5), "runs"] == 7 and weekly.loc[date(2026, 10, 5), "tests"] == 5
    assert weekly.loc[date(2026, 10, 12), "failed_runs"] == 2
    berth_only = weekly_runs_frame(Scope(project.pk, date(2026, 10, 12), berths.pk), weeks=2).set_index("week")
    assert berth_only.loc[date(2026, 10, 5), "runs"] == 5
    before = component_failures_frame(scope, weeks=2)
    assert set(before["component"]) == {"Berths", NO_COMPONENT}
    berths.delete()  # its tests now have no component; the stored totals still carry its id
    after = component_failures_frame(scope, weeks=2)
    assert set(after["component"]) == {NO_COMPONENT}
    assert after.groupby("week")["failures"].sum().to_dict() == before.groupby("week")["failures"].sum().to_dict()
