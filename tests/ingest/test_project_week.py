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


def test_reimporting_a_build_keeps_both_rollups_equal_to_the_raw_results(history):
    from ingest.models import Build, TestWeek
    from ingest.services.results import build_results_reset

    project, _ = history
    build = Build.objects.get(project=project, external_id="b1")
    jobs = build_results_reset(build=build)
    assert jobs and _stored(project) == _reference(project)
    tw = TestWeek.objects.filter(project=project, week=date(2026, 10, 5))
    assert sum(tw.values_list("runs", flat=True)) == TestResult.objects.filter(build__week=date(2026, 10, 5)).count()


def test_admin_deletes_rebuild_the_rollups(history, admin_client):
    from ingest.models import Build, TestCase

    project, berths = history
    build = Build.objects.get(project=project, external_id="b2")
    response = admin_client.post(f"/admin/ingest/build/{build.pk}/delete/", {"post": "yes"})
    assert response.status_code == 302 and not Build.objects.filter(pk=build.pk).exists()
    assert _stored(project) == _reference(project)
    docs = TestCase.objects.get(project=project, name="test_docs")
    response = admin_client.post("/admin/ingest/testcase/", {"action": "delete_selected", "_selected_action": [docs.pk],
                                                             "post": "yes"})
    assert response.status_code == 302 and not TestCase.objects.filter(pk=docs.pk).exists()
    assert _stored(project) == _reference(project)
    response = admin_client.post(f"/admin/ingest/component/{berths.pk}/delete/", {"post": "yes"})
    assert response.status_code == 302
    assert _stored(project) == _reference(project) and {k for _, k in _stored(project)} == {0}


def test_rebuild_rollups_command_recomputes_from_the_results(history):
    from django.core.management import call_command

    project, _ = history
    ProjectWeek.objects.filter(project=project).update(runs=0, tests=0)  # drifted, e.g. by a raw delete
    call_command("rebuild_rollups", "--project", project.slug, stdout=io.StringIO())
    assert _stored(project) == _reference(project)


def test_rollup_of_an_unknown_test_case_id_asks_for_the_import_to_be_retried(history):
    # A test-case id this process cached may belong to a row deleted since. On PostgreSQL the results' foreign
    # key fails at commit; on SQLite the rollup notices first. Either way an IntegrityError, which makes
    # results_job_run forget the cached ids and import once more (not an "internal error").
    from django.db import IntegrityError, connection, transaction

    from ingest.services.results import rollup_add_counts

    project, _ = history
    if connection.vendor != "sqlite":
        pytest.skip("PostgreSQL reports it through the results' foreign key at commit")
    with pytest.raises(IntegrityError), transaction.atomic():
        rollup_add_counts(project_id=project.pk, week=date(2026, 10, 12), counts={10**9: [1, 1, 0, 0, 0, 0, 1.0, 1]})
