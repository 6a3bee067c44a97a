"""Flaky-test scores: load runs, call the pure scorer, store TestHealth rows."""

from __future__ import annotations

import math
from collections.abc import Iterable
from datetime import datetime, timedelta

import numpy as np
import pandas as pd
from django.db import transaction
from django.db.models import Max
from django.utils import timezone

from analytics.core.flaky import DEFAULT_EVIDENCE_CONFIG, score_tests
from analytics.models import TestHealth, TriageState
from analytics.selectors import flaky_health_qs, runs_frame
from analytics.services.triage import triage_green_runs_refresh, triage_labels
from ingest.models import Build, Project

#: Seed of the classifier's cross-validation folds: the same data always gives the same scores.
RANDOM_STATE = 0
#: Labelled tests of each class below which the classifier is not even tried (``choose_scorer``'s default).
MIN_LABELS_PER_CLASS = 20

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


def recent_outcomes(runs: pd.DataFrame, *, last: int = 20) -> pd.Series:
    """Per test, its latest ``last`` runs (oldest first) as one letter each: P, F, E, S (skipped)."""
    keys = runs[["test_id", "started_at", "build_id", "attempt"]].reset_index(drop=True)
    order = keys.sort_values(list(keys.columns), kind="stable").index.to_numpy()
    test_id = keys["test_id"].to_numpy()[order]
    # Keep the rows less than ``last`` from the end of their test's block.
    group_end = np.flatnonzero(np.concatenate((test_id[1:] != test_id[:-1], [True])))
    ends = np.repeat(group_end, np.diff(np.concatenate(([-1], group_end))))
    latest = order[ends - np.arange(order.size) < last]
    codes, outcomes = pd.factorize(runs["outcome"].to_numpy()[latest])
    letters = np.array([str(o)[0].upper() for o in outcomes] or [""], dtype=object)[codes]
    return pd.Series(letters).groupby(pd.Series(keys["test_id"].to_numpy()[latest], name="test_id")).agg("".join)


def flaky_scores_refresh(
    *, project_id: int, test_ids: Iterable[int] | None = None, now: datetime | None = None
) -> int:
    """Score the given tests (or all tests) of a project and store their ``TestHealth`` rows.

    People's triage decisions are the labels (confirmed flaky and quarantined = flaky, not flaky = not
    flaky): when there are enough of them, ``score_tests`` trains the labelled classifier and uses it if it
    beats the unsupervised score on held-out labels; ``TestHealth.scored_by`` records which one scored each
    test. So that an incremental refresh scores like a full one, the labelled tests' runs are loaded (and
    their rows rewritten) too whenever the classifier may be tried. The fold seed is fixed
    (:data:`RANDOM_STATE`): refreshing twice on unchanged data stores the same numbers.

    Also recounts the green runs of quarantined tests among them (release suggestions). A full refresh
    (``test_ids=None``) removes the rows of tests that have no run left in the evidence window.

    ``now`` ends the evidence window. Default: the project's latest build (or the current time if that is
    earlier, or if there is no build), so that a project whose CI went quiet, or the demo's fixed history,
    still shows the scores of its last 90 days instead of nothing.

    Returns
    -------
    int
        How many ``TestHealth`` rows were written.
    """
    if now is None:
        latest = Build.objects.filter(project_id=project_id).aggregate(latest=Max("started_at"))["latest"]
        now = min(timezone.now(), latest) if latest is not None else timezone.now()
    now = pd.Timestamp(now)
    since = now.to_pydatetime() - timedelta(days=DEFAULT_EVIDENCE_CONFIG.window_days)
    labels = triage_labels(project_id=project_id)
    per_class = labels.value_counts()
    may_train = min(int(per_class.get(0, 0)), int(per_class.get(1, 0))) >= MIN_LABELS_PER_CLASS
    wanted = None if test_ids is None else {int(i) for i in test_ids}
    load_ids = None if wanted is None else set(wanted)
    if load_ids is not None and may_train:
        load_ids |= {int(i) for i in labels.index}
    runs = runs_frame(project_id=project_id, test_ids=load_ids, since=since, until=now.to_pydatetime())
    triage_green_runs_refresh(project_id=project_id, test_ids=wanted)
    if wanted is None:
        # Full refresh: a test without any run in the window has nothing left to judge it by.
        stale = TestHealth.objects.filter(project_id=project_id)
        if not runs.empty:
            stale = stale.exclude(test_case_id__in=[int(i) for i in runs["test_id"].unique()])
        stale.delete()
    if runs.empty:
        return 0
    scored = score_tests(runs, now=now, labels=labels if len(labels) else None, random_state=RANDOM_STATE)
    recent = recent_outcomes(runs)
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


#: Evidence figures in the export and the API, in this order (see ``analytics.core.flaky.evidence_frame``).
EXPORT_EVIDENCE = EVIDENCE_FIELDS


def testcase_ref(test_case) -> str:
    """The id CI uses for a test: ``classname::name`` (just ``name`` when the test has no classname)."""
    return test_case.full_name


def flaky_row(health: TestHealth) -> dict:
    """One flat row: the test, its score and verdict, its triage state and the main evidence figures."""
    test = health.test_case
    triage = getattr(test, "triage", None)
    row = {
        "id": testcase_ref(test),
        "classname": test.classname,
        "name": test.name,
        "component": test.component.name if test.component_id else "",
        "score": round(float(health.score), 6),
        "verdict": health.verdict,
        "scored_by": health.scored_by,
        "triage_state": triage.state if triage is not None else TriageState.UNREVIEWED.value,
        "runs": health.runs,
        "failures": health.failures,
        "last_failure_at": health.last_failure_at,
        "recent_outcomes": health.recent_outcomes,
    }
    evidence = health.evidence or {}
    row.update({key: evidence.get(key) for key in EXPORT_EVIDENCE})
    row["computed_at"] = health.computed_at
    return row


def flaky_export_rows(*, project: Project) -> list[dict]:
    """Every scored test of ``project``, most likely flaky first, as flat rows (see :func:`flaky_row`).

    Keys: ``id`` (``classname::name``), ``classname``, ``name``, ``component``, ``score`` (P(flaky)),
    ``verdict``, ``scored_by``, ``triage_state``, ``runs``, ``failures``, ``last_failure_at``,
    ``recent_outcomes`` (latest runs, oldest first: P passed, F failed, E error), the figures in
    :data:`EXPORT_EVIDENCE` and ``computed_at``. Tests never scored (no refresh since they appeared) are absent.
    """
    return [flaky_row(h) for h in flaky_health_qs(project_id=project.pk)]
