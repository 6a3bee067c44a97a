"""Reads behind the "This week" page: rollups (TestWeek, TestHealth, Defect counts) → DataFrames and dicts.

Nothing here scans the raw results table: every figure comes from the weekly rollups kept by ingest
(``ProjectWeek`` for the trends, ``TestWeek`` for the week's tests), what the analytics refresh stored
(``TestHealth``, ``RuntimeGrowth``) or the defects table, so the page's cost grows with the number of tests
and weeks shown, not with the history. The number of queries is fixed (the view
tests pin it).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta

import pandas as pd
from django.db import connection
from django.db.models import Count, Exists, F, OuterRef, Q, QuerySet, Subquery, Sum
from django.db.models.functions import TruncWeek

from analytics.models import RuntimeGrowth, TestHealth
from ingest.models import Build, Component, Defect, ProjectWeek, TestWeek, week_start

TREND_WEEKS = 26
GROWTH_WINDOW = 4  # weeks compared on each side for the test-time growth
GROWTH_TOP = 8  # tests shown (stored per scope by the refresh)
ROW_KINDS = ("failed", "newly-failing", "fixed", "tests", "defects-opened", "defects-closed", "backlog", "flaky")

_FAILING = Q(failed__gt=0) | Q(errors__gt=0)
NO_COMPONENT = "(no component)"


@dataclass(frozen=True)
class Scope:
    """What the page shows: one project, one week (a Monday), optionally one component."""

    project_id: int
    week: date
    component_id: int | None = None

    @property
    def previous(self) -> Scope:
        return Scope(self.project_id, self.week - timedelta(weeks=1), self.component_id)


def _moment(day: date) -> datetime:
    return datetime.combine(day, time.min, tzinfo=UTC)


def weeks_with_builds(*, project_id: int, limit: int = 104) -> list[date]:
    """Mondays of the weeks that have builds, newest first (the week picker's choices)."""
    weeks = (
        Build.objects.filter(project_id=project_id).order_by("-week").values_list("week", flat=True).distinct()
    )
    return list(weeks[:limit])


def default_week(weeks: list[date], *, today: date) -> date | None:
    """The last complete week (Monday to Sunday before ``today``'s week) that has data, else the newest."""
    if not weeks:
        return None
    current = week_start(today)
    complete = [w for w in weeks if w < current]
    return max(complete) if complete else max(weeks)


def _testweeks(scope: Scope) -> QuerySet:
    qs = TestWeek.objects.filter(project_id=scope.project_id)
    if scope.component_id is not None:
        qs = qs.filter(test_case__component_id=scope.component_id)
    return qs


def _defects(scope: Scope) -> QuerySet:
    qs = Defect.objects.filter(project_id=scope.project_id)
    if scope.component_id is not None:
        qs = qs.filter(components__id=scope.component_id)
    return qs


def _projectweeks(scope: Scope, *, weeks: int) -> QuerySet:
    first = scope.week - timedelta(weeks=weeks - 1)
    qs = ProjectWeek.objects.filter(project_id=scope.project_id, week__gte=first, week__lte=scope.week)
    if scope.component_id is not None:
        qs = qs.filter(component_key=scope.component_id)
    return qs


def weekly_runs_frame(scope: Scope, *, weeks: int = TREND_WEEKS) -> pd.DataFrame:
    """One row per week up to ``scope.week``: runs, passed, failed, errors, skipped, tests, duration (s).

    ``pass_rate`` is passed / (runs − skipped): skipped runs say nothing about quality. Weeks without
    runs are present with zeros and a missing pass rate, so a gap shows as a gap. Read from the
    per-component weekly totals (``ProjectWeek``): a few rows a week, whatever the number of tests.
    """
    first = scope.week - timedelta(weeks=weeks - 1)
    rows = (
        _projectweeks(scope, weeks=weeks)
        .values("week")
        .annotate(
            n_runs=Sum("runs"), n_passed=Sum("passed"), n_failed=Sum("failed"), n_errors=Sum("errors"),
            n_skipped=Sum("skipped"), n_tests=Sum("tests"), n_duration=Sum("duration_total"),
        )
        .order_by("week")
    )
    index = pd.Index([first + timedelta(weeks=i) for i in range(weeks)], name="week")
    columns = ["runs", "passed", "failed", "errors", "skipped", "tests", "duration"]
    frame = pd.DataFrame.from_records(
        [(r["week"], *(r["n_" + c] for c in columns)) for r in rows], columns=["week", *columns]
    )
    frame = frame.set_index("week").reindex(index).fillna(0)
    frame[columns[:-1]] = frame[columns[:-1]].astype(int)
    frame["duration"] = frame["duration"].astype(float)
    judged = frame["runs"] - frame["skipped"]
    frame["pass_rate"] = (frame["passed"] / judged.where(judged > 0)).astype(float)
    frame["failed_runs"] = frame["failed"] + frame["errors"]
    return frame.reset_index()


def component_failures_frame(scope: Scope, *, weeks: int = TREND_WEEKS) -> pd.DataFrame:
    """Failed runs (failures + errors) per week and component: columns week, component, failures.

    Read from the per-component weekly totals; totals kept under a component that was deleted since
    (its tests now have none) count as "(no component)", as those tests do now.
    """
    name = Component.objects.filter(id=OuterRef("component_key")).values("name")[:1]
    rows = (
        _projectweeks(scope, weeks=weeks)
        .filter(_FAILING)
        .values("week", "component_key")
        .annotate(failures=Sum(F("failed") + F("errors")), name=Subquery(name))
    )
    frame = pd.DataFrame.from_records(
        [(r["week"], r["name"] or NO_COMPONENT, int(r["failures"])) for r in rows],
        columns=["week", "component", "failures"],
    )
    if frame.empty:
        return frame
    return frame.groupby(["week", "component"], as_index=False)["failures"].sum().sort_values(
        ["week", "component"], ignore_index=True
    )


def _newly_failing(scope: Scope) -> QuerySet:
    before = _testweeks(scope.previous).filter(test_case_id=OuterRef("test_case_id"), week=scope.previous.week)
    return _testweeks(scope).filter(week=scope.week).filter(_FAILING).exclude(Exists(before.filter(_FAILING)))


def _fixed(scope: Scope) -> QuerySet:
    # Start from the previous week's failing tests (few, read through the partial "failing" index) and look
    # each one up in the selected week, instead of testing every passing row of the week.
    failed_before = _testweeks(scope.previous).filter(week=scope.previous.week).filter(_FAILING)
    return _testweeks(scope).filter(
        week=scope.week, failed=0, errors=0, passed__gt=0,
        test_case_id__in=Subquery(failed_before.values("test_case_id")),
    )


def transitions(scope: Scope) -> dict[str, int]:
    """Tests newly failing (failed this week, not in the previous one) and fixed (the reverse, and passed)."""
    return {"newly_failing": _newly_failing(scope).count(), "fixed": _fixed(scope).count()}


def defect_counts(scope: Scope) -> dict[str, int]:
    """Defects opened and closed in the week and in the week before, and the open backlog at each week's end."""
    start, prev_start = _moment(scope.week), _moment(scope.previous.week)
    end = start + timedelta(weeks=1)

    def backlog_at(moment: datetime) -> Q:
        return Q(created_at__lt=moment) & (Q(resolved_at__isnull=True) | Q(resolved_at__gte=moment))

    return _defects(scope).aggregate(
        opened=Count("id", filter=Q(created_at__gte=start, created_at__lt=end), distinct=True),
        closed=Count("id", filter=Q(resolved_at__gte=start, resolved_at__lt=end), distinct=True),
        backlog=Count("id", filter=backlog_at(end), distinct=True),
        prev_opened=Count("id", filter=Q(created_at__gte=prev_start, created_at__lt=start), distinct=True),
        prev_closed=Count("id", filter=Q(resolved_at__gte=prev_start, resolved_at__lt=start), distinct=True),
        prev_backlog=Count("id", filter=backlog_at(start), distinct=True),
    )


def flaky_share(scope: Scope) -> dict[str, int]:
    """Tests with a current score and how many of them the detector calls flaky (the latest scores only)."""
    qs = TestHealth.objects.filter(project_id=scope.project_id)
    if scope.component_id is not None:
        qs = qs.filter(test_case__component_id=scope.component_id)
    return qs.aggregate(scored=Count("id"), flaky=Count("id", filter=Q(verdict="flaky")))


def defect_flow_frame(scope: Scope, *, weeks: int = TREND_WEEKS) -> pd.DataFrame:
    """Defects opened and closed per week (columns week, opened, closed), every week present."""
    first = scope.week - timedelta(weeks=weeks - 1)
    start, end = _moment(first), _moment(scope.week + timedelta(weeks=1))
    index = pd.Index([first + timedelta(weeks=i) for i in range(weeks)], name="week")
    frame = pd.DataFrame(index=index)
    for column, field in (("opened", "created_at"), ("closed", "resolved_at")):
        rows = (
            _defects(scope)
            .filter(**{f"{field}__gte": start, f"{field}__lt": end})
            .annotate(w=TruncWeek(field, tzinfo=UTC))
            .values("w")
            .annotate(n=Count("id", distinct=True))
            .order_by("w")
        )
        counts = {(r["w"].date() if isinstance(r["w"], datetime) else r["w"]): r["n"] for r in rows}
        frame[column] = [int(counts.get(w, 0)) for w in index]
    return frame.reset_index()


_GROWTH_SQL = """
WITH per_test AS (
    SELECT w.test_case_id AS id,
           SUM(CASE WHEN w.week >= %(recent_from)s THEN w.duration_total END) * 1.0
             / NULLIF(SUM(CASE WHEN w.week >= %(recent_from)s THEN w.duration_count END), 0) AS recent,
           SUM(CASE WHEN w.week < %(recent_from)s THEN w.duration_total END) * 1.0
             / NULLIF(SUM(CASE WHEN w.week < %(recent_from)s THEN w.duration_count END), 0) AS before
    FROM ingest_testweek w
    WHERE w.project_id = %(project)s AND w.week >= %(before_from)s AND w.week <= %(week)s AND w.duration_count > 0
    GROUP BY w.test_case_id
), grown AS (
    SELECT id, before, recent, recent - before AS growth FROM per_test
    WHERE recent IS NOT NULL AND before IS NOT NULL AND recent - before > 0
)
SELECT grown.id, t.classname, t.name, COALESCE(t.component_id, 0), c.name, grown.before, grown.recent, grown.growth
FROM grown JOIN ingest_testcase t ON t.id = grown.id LEFT JOIN ingest_component c ON c.id = t.component_id
ORDER BY grown.growth DESC, grown.id
"""
GROWTH_COLUMNS = ["test_id", "test", "component", "before", "recent", "growth"]


def growth_by_test(*, project_id: int, week: date, window: int = GROWTH_WINDOW) -> pd.DataFrame:
    """Every test whose mean run time grew: the ``window`` weeks up to ``week`` against the ``window`` weeks
    before, largest growth first. Columns: test_id, test, component_key (0: none), component, before, recent,
    growth (seconds per run). Reads tests × 2 ``window`` weeks of the rollup: the analytics refresh calls it
    (``analytics.services.growth``), the page reads the stored top entries.
    """
    recent_from = week - timedelta(weeks=window - 1)
    adapt = connection.ops.adapt_datefield_value
    params = {"recent_from": adapt(recent_from), "before_from": adapt(recent_from - timedelta(weeks=window)),
              "week": adapt(week), "project": project_id}
    with connection.cursor() as cursor:
        cursor.execute(_GROWTH_SQL, params)
        rows = cursor.fetchall()
    frame = pd.DataFrame.from_records(
        rows, columns=["test_id", "classname", "name", "component_key", "component", "before", "recent", "growth"]
    )
    frame[["before", "recent", "growth"]] = frame[["before", "recent", "growth"]].astype(float)
    frame["test"] = [f"{c}::{n}" if c else n for c, n in zip(frame["classname"], frame["name"])]
    frame["component"] = frame["component"].fillna(NO_COMPONENT)
    return frame[["test_id", "test", "component_key", "component", "before", "recent", "growth"]]


def duration_growth_frame(scope: Scope) -> pd.DataFrame:
    """Tests whose mean run time grew most up to ``scope.week`` (columns :data:`GROWTH_COLUMNS`).

    Read from what the analytics refresh stored for the week (``RuntimeGrowth``: one row, whatever the number
    of tests). A week no refresh has covered yet (just after an upgrade, or a week outside the picker) is
    ranked here instead, at the cost of reading its tests × 2 windows of the rollup once per view.
    """
    top = RuntimeGrowth.objects.filter(
        project_id=scope.project_id, week=scope.week, window_weeks=GROWTH_WINDOW
    ).values_list("top", flat=True).first()
    if top is None:
        frame = growth_by_test(project_id=scope.project_id, week=scope.week)
        if scope.component_id is not None:
            frame = frame[frame["component_key"] == scope.component_id]
        return frame.head(GROWTH_TOP)[GROWTH_COLUMNS].reset_index(drop=True)
    entries = top.get("all" if scope.component_id is None else str(scope.component_id), [])
    return pd.DataFrame.from_records(entries, columns=GROWTH_COLUMNS)


# --------------------------------------------------------------------------------------------------- rows
def rows_queryset(scope: Scope, kind: str) -> QuerySet:
    """The rows behind one headline figure, as dicts (for the table and its CSV/JSON download)."""
    test_fields = dict(
        test_id=F("test_case_id"), classname=F("test_case__classname"), name=F("test_case__name"),
        component=F("test_case__component__name"),
    )
    week_values = ("test_id", "classname", "name", "component", "runs", "passed", "failures", "skipped",
                   "reruns", "seconds")
    week_extra = dict(failures=F("failed") + F("errors"), seconds=F("duration_total"))
    if kind in ("failed", "newly-failing", "fixed", "tests"):
        base = {
            "failed": _testweeks(scope).filter(week=scope.week).filter(_FAILING),
            "newly-failing": _newly_failing(scope),
            "fixed": _fixed(scope),
            "tests": _testweeks(scope).filter(week=scope.week, runs__gt=0),
        }[kind]
        return base.annotate(**test_fields, **week_extra).values(*week_values)
    if kind == "flaky":
        qs = TestHealth.objects.filter(project_id=scope.project_id, verdict="flaky")
        if scope.component_id is not None:
            qs = qs.filter(test_case__component_id=scope.component_id)
        return qs.annotate(**test_fields).values(
            "test_id", "classname", "name", "component", "score", "verdict", "runs", "failures", "last_failure_at"
        )
    start = _moment(scope.week)
    end = start + timedelta(weeks=1)
    defects = {
        "defects-opened": Q(created_at__gte=start, created_at__lt=end),
        "defects-closed": Q(resolved_at__gte=start, resolved_at__lt=end),
        "backlog": Q(created_at__lt=end) & (Q(resolved_at__isnull=True) | Q(resolved_at__gte=end)),
    }
    if kind not in defects:
        raise ValueError(f"unknown row kind {kind!r}; known: {', '.join(ROW_KINDS)}")
    return (
        _defects(scope).filter(defects[kind]).distinct()
        .values("key", "title", "status", "severity", "created_at", "resolved_at")
    )


ROW_SORTS = {
    "tests": {"name": "name", "component": "component", "runs": "runs", "failures": "failures",
              "seconds": "seconds", "reruns": "reruns"},
    "flaky": {"name": "name", "component": "component", "score": "score", "runs": "runs", "failures": "failures",
              "last_failure": "last_failure_at"},
    "defects": {"key": "key", "created": "created_at", "resolved": "resolved_at", "severity": "severity",
                "status": "status"},
}
