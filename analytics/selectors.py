"""The one place where ORM rows become DataFrames for the pure analytics core."""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

from ingest.models import TestResult


def runs_frame(*, project_id: int, test_ids: Iterable[int] | None = None, since=None) -> pd.DataFrame:
    """One row per attempt, with the build's commit, branch and start: the flaky detector's input."""
    qs = TestResult.objects.filter(project_id=project_id)
    if test_ids is not None:
        qs = qs.filter(test_case_id__in=list(test_ids))
    if since is not None:
        qs = qs.filter(build__started_at__gte=since)
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
