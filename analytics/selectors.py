"""The one place where ORM rows become DataFrames for the pure analytics core."""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

from analytics.models import TestHealth, TriageEvent, TriageState
from ingest.models import TestCase, TestResult


def runs_frame(
    *, project_id: int, test_ids: Iterable[int] | None = None, since=None, until=None
) -> pd.DataFrame:
    """One row per attempt, with the build's commit, branch and start: the flaky detector's input.

    ``since`` / ``until`` keep builds started at or after / at or before those moments.
    """
    qs = TestResult.objects.filter(project_id=project_id)
    if test_ids is not None:
        qs = qs.filter(test_case_id__in=list(test_ids))
    if since is not None:
        qs = qs.filter(build__started_at__gte=since)
    if until is not None:
        qs = qs.filter(build__started_at__lte=until)
    rows = qs.values_list(
        "test_case_id", "build_id", "build__commit", "build__branch", "build__started_at", "attempt", "outcome",
        "duration", "failure_type", "message",
    )
    frame = pd.DataFrame.from_records(
        list(rows),
        columns=["test_id", "build_id", "commit", "branch", "started_at", "attempt", "outcome", "duration",
                 "failure_type", "message"],
    )
    frame["started_at"] = pd.to_datetime(frame["started_at"], utc=True)
    frame["duration"] = frame["duration"].astype(float)
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
