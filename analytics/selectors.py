"""The one place where ORM rows become DataFrames for the pure analytics core."""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd
from django.db import connection

from analytics.models import TestHealth, TriageEvent, TriageState
from ingest.models import Build, TestCase, TestResult


def runs_frame(
    *, project_id: int, test_ids: Iterable[int] | None = None, since=None, until=None
) -> pd.DataFrame:
    """One row per attempt, with the build's commit, branch and start: the flaky detector's input.

    ``since`` / ``until`` keep builds started at or after / at or before those moments. Columns:
    ``test_id``, ``build_id``, ``commit``, ``branch``, ``started_at`` (UTC), ``attempt``, ``outcome``,
    ``duration`` (float, NaN when unknown), ``failure_type``, ``message``; rows in no particular order.

    Two raw queries rather than the ORM, because this runs after every ingested build over up to 90 days
    of history: the window's builds once, then only the result columns per row, so that no datetime or
    commit string is built per result. The build columns are joined on in pandas.
    """
    q = connection.ops.quote_name
    builds_table, results_table = q(Build._meta.db_table), q(TestResult._meta.db_table)
    postgres = connection.vendor == "postgresql"
    # PostgreSQL: the start as integer microseconds since the epoch (exact, nothing parsed per row).
    # SQLite stores it as UTC text, parsed below in one vectorised call.
    started = "(extract(epoch from b.started_at) * 1000000)::bigint" if postgres else "b.started_at"
    where, params = ["b.project_id = %s"], [project_id]
    if since is not None:
        where.append("b.started_at >= %s")
        params.append(connection.ops.adapt_datetimefield_value(since))
    if until is not None:
        where.append("b.started_at <= %s")
        params.append(connection.ops.adapt_datetimefield_value(until))
    build_filter = " AND ".join(where)
    result_filter = " AND ".join(["r.project_id = %s", *where[1:]])
    result_params = list(params)
    if test_ids is not None:
        ids = sorted({int(i) for i in test_ids})
        if postgres:
            result_filter += " AND r.test_case_id = ANY(%s)"
            result_params.append(ids)
        else:
            result_filter += f" AND r.test_case_id IN ({', '.join(['%s'] * len(ids)) or 'NULL'})"
            result_params.extend(ids)
    with connection.cursor() as cursor:
        cursor.execute(f"SELECT b.id, b.{q('commit')}, b.branch, {started} FROM {builds_table} b WHERE {build_filter}", params)
        build_rows = cursor.fetchall()
        cursor.execute(
            "SELECT r.test_case_id, r.build_id, r.attempt, r.outcome, r.duration, r.failure_type, r.message "
            f"FROM {results_table} r JOIN {builds_table} b ON b.id = r.build_id WHERE {result_filter}",
            result_params,
        )
        result_rows = cursor.fetchall()
    builds = pd.DataFrame.from_records(build_rows, columns=["build_id", "commit", "branch", "started_at"])
    if postgres:
        starts = pd.to_datetime(builds["started_at"].astype("int64"), unit="us", utc=True)
    else:
        starts = pd.to_datetime(builds["started_at"], utc=True, format="ISO8601")
    builds["started_at"] = starts.astype("datetime64[us, UTC]")
    results = pd.DataFrame.from_records(
        result_rows,
        columns=["test_id", "build_id", "attempt", "outcome", "duration", "failure_type", "message"],
    )
    position = pd.Index(builds["build_id"]).get_indexer(results["build_id"])
    if (position < 0).any():
        # A build committed between the two reads (each statement has its own snapshot): its results are left
        # to that build's own after-build refresh rather than given another build's commit and start.
        results = results[position >= 0].reset_index(drop=True)
        position = position[position >= 0]
    of_build = builds.iloc[position].reset_index(drop=True)
    frame = pd.DataFrame(
        {
            "test_id": results["test_id"],
            "build_id": results["build_id"],
            "commit": of_build["commit"],
            "branch": of_build["branch"],
            "started_at": of_build["started_at"],
            "attempt": results["attempt"],
            "outcome": results["outcome"],
            "duration": results["duration"].astype(float),
            "failure_type": results["failure_type"],
            "message": results["message"],
        }
    )
    return frame


def flaky_health_qs(
    *, project_id: int, verdict: str | None = None, component: str | None = None, min_score: float | None = None
):
    """Stored flaky-test scores of a project, best suspects first, with test, component and triage joined.

    ``component`` is matched by name, ignoring case; tests without a component match ``component=""``.
    """
    qs = TestHealth.objects.filter(project_id=project_id).select_related(
        "test_case", "test_case__component", "test_case__triage"
    )
    if verdict is not None:
        qs = qs.filter(verdict=verdict)
    if component is not None:
        qs = (qs.filter(test_case__component__isnull=True) if component == ""
              else qs.filter(test_case__component__name__iexact=component))
    if min_score is not None:
        qs = qs.filter(score__gte=min_score)
    return qs.order_by("-score", "test_case__classname", "test_case__name", "test_case_id")


def quarantined_tests_qs(*, project_id: int):
    """Test cases of a project whose triage state is quarantined, by classname and name."""
    return (
        TestCase.objects.filter(project_id=project_id, triage__state=TriageState.QUARANTINED)
        .select_related("component", "triage", "triage__updated_by")
        .order_by("classname", "name")
    )


def triage_events_qs(*, test_case_id: int):
    """The audit log of one test, newest first, with who made each change."""
    return TriageEvent.objects.filter(test_case_id=test_case_id).select_related("user").order_by("-at", "-id")


def testcase_by_ref(*, project_id: int, ref: str):
    """The test case named by ``ref`` = ``classname::name`` (or just ``name`` when it has no classname).

    The classname is the part before the first ``::``. Returns ``None`` when there is no such test.
    """
    classname, sep, name = ref.partition("::")
    if not sep:
        classname, name = "", ref
    return TestCase.objects.filter(project_id=project_id, classname=classname, name=name).first()
