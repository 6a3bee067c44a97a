"""Flaky-test scores: load runs, call the pure scorer, store TestHealth rows."""

from __future__ import annotations

import math
from collections.abc import Iterable
from datetime import timedelta

import pandas as pd
from django.db import transaction
from django.utils import timezone

from analytics.core.flaky import DEFAULT_EVIDENCE_CONFIG, score_tests
from analytics.models import TestHealth
from analytics.selectors import runs_frame

EVIDENCE_FIELDS = (
    "same_commit_contradictions", "pass_on_rerun", "flip_rate", "entropy", "runs_z", "runs_p", "failure_rate",
    "failure_rate_low", "failure_rate_high", "message_diversity", "duration_cv", "timeout_failures",
    "longest_failure_streak", "failing_now",
)


def _jsonable(value):
    if isinstance(value, (bool, int, str)) or value is None:
        return value
    try:
        number = float(value)
    except (TypeError, ValueError):
        return str(value)
    return None if math.isnan(number) or math.isinf(number) else number


def flaky_scores_refresh(*, project_id: int, test_ids: Iterable[int] | None = None) -> int:
    """Score the given tests (or all tests) of a project; returns how many were stored."""
    now = pd.Timestamp(timezone.now())
    since = timezone.now() - timedelta(days=DEFAULT_EVIDENCE_CONFIG.window_days)
    runs = runs_frame(project_id=project_id, test_ids=test_ids, since=since)
    if runs.empty:
        return 0
    scored = score_tests(runs, now=now)
    recent = (
        runs.sort_values(["started_at", "build_id", "attempt"])
        .groupby("test_id")["outcome"]
        .apply(lambda s: "".join(o[0].upper() for o in s.tail(20)))
    )
    computed_at = timezone.now()
    objs = []
    for test_id, row in scored.iterrows():
        last = row.get("last_failure_at")
        objs.append(
            TestHealth(
                test_case_id=int(test_id),
                project_id=project_id,
                score=float(row["score"]),
                verdict=str(row["verdict"]),
                scored_by=str(row["source"]),
                runs=int(row["runs"]),
                failures=int(row["failures"]),
                last_failure_at=None if pd.isna(last) else last.to_pydatetime(),
                evidence={k: _jsonable(row[k]) for k in EVIDENCE_FIELDS if k in row},
                explanation=list(row["explanation"]),
                recent_outcomes=recent.get(test_id, ""),
                computed_at=computed_at,
            )
        )
    with transaction.atomic():
        TestHealth.objects.bulk_create(
            objs,
            update_conflicts=True,
            unique_fields=["test_case"],
            update_fields=["score", "verdict", "scored_by", "runs", "failures", "last_failure_at", "evidence",
                           "explanation", "recent_outcomes", "computed_at"],
            batch_size=1000,
        )
    return len(objs)
