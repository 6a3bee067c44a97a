"""Reads for the "Flaky tests" and "Failure causes" pages.

Every read here is bounded: list pages read the stored ``TestHealth`` / ``FailureCluster`` rows (one row per
test or per cluster, already aggregated by the refresh), and detail pages read one test's or one cluster's raw
rows through indexed lookups (``TestResult(test_case, build)``, ``TestResult.signature``) with a limit.
Nothing here scans the whole results table.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime

from django.db.models import Count, Max, Prefetch, Q, QuerySet

from analytics.models import (
    ClusterDefectLink,
    FailureCluster,
    FailureSignature,
    TestHealth,
    TriageEvent,
    TriageState,
)
from analytics.selectors_causes import cluster_summary
from ingest.models import Build, Component, Outcome, TestCase, TestResult

#: Public sort keys of the flaky-test table → ORM field.
FLAKY_SORTS = {
    "score": "score",
    "verdict": "verdict",
    "runs": "runs",
    "failures": "failures",
    "last_failure": "last_failure_at",
    "name": "test_case__name",
    "component": "test_case__component__name",
}
FLAKY_DEFAULT_SORT = "-score"

#: Public sort keys of the failure-cause table → ORM field.
CAUSE_SORTS = {
    "failures": "failures",
    "tests": "tests_affected",
    "builds": "builds_affected",
    "first_seen": "first_seen",
    "last_seen": "last_seen",
    "label": "label",
}
CAUSE_DEFAULT_SORT = "-failures"

#: Attempts of one test read for its detail page (newest first): bounds the page's cost.
HISTORY_LIMIT = 600
#: Suggested defects shown per cluster in the list.
LIST_DEFECTS = 3
#: Other clusters offered as merge targets on a cluster page.
MERGE_TARGETS = 300

NO_COMPONENT = "-"  # the filter value for tests without a component


# --------------------------------------------------------------------------------------------- flaky list


def component_names(*, project_id: int) -> list[str]:
    return list(Component.objects.filter(project_id=project_id).order_by("name").values_list("name", flat=True))


def health_verdicts(*, project_id: int) -> list[str]:
    return list(
        TestHealth.objects.filter(project_id=project_id).order_by("verdict").values_list("verdict", flat=True)
        .distinct()
    )


def flaky_table_qs(
    *,
    project_id: int,
    component: str | None = None,
    verdict: str | None = None,
    triage_state: str | None = None,
    min_score: float | None = None,
    search: str | None = None,
    order: str = FLAKY_DEFAULT_SORT,
) -> QuerySet[TestHealth]:
    """Scored tests of a project, filtered and ordered, with test, component and triage joined (one query).

    ``component``: a component name (case-insensitive) or :data:`NO_COMPONENT`; ``triage_state``: one of
    ``TriageState.values`` (``unreviewed`` also matches tests nobody has triaged yet); ``search``: words that
    must all appear in the test's classname or name.
    """
    qs = TestHealth.objects.filter(project_id=project_id).select_related(
        "test_case", "test_case__component", "test_case__triage"
    )
    if component:
        qs = (qs.filter(test_case__component__isnull=True) if component == NO_COMPONENT
              else qs.filter(test_case__component__name__iexact=component))
    if verdict:
        qs = qs.filter(verdict=verdict)
    if triage_state:
        if triage_state == TriageState.UNREVIEWED:
            qs = qs.filter(Q(test_case__triage__isnull=True) | Q(test_case__triage__state=triage_state))
        else:
            qs = qs.filter(test_case__triage__state=triage_state)
    if min_score is not None:
        qs = qs.filter(score__gte=min_score)
    for word in (search or "").split():
        qs = qs.filter(Q(test_case__name__icontains=word) | Q(test_case__classname__icontains=word))
    # Ties (many clear-cut suspects score ~1.0) go to the test that failed most, then by name.
    return qs.order_by(order, "-failures", "test_case__classname", "test_case__name", "test_case_id")


def triage_state_of(test_case: TestCase) -> str:
    triage = getattr(test_case, "triage", None)
    return triage.state if triage is not None else TriageState.UNREVIEWED.value


def flaky_table_row(health: TestHealth) -> dict:
    """One flat row of the flaky-test table (page and download alike)."""
    test = health.test_case
    return {
        "test_id": test.pk,
        "classname": test.classname,
        "name": test.name,
        "component": test.component.name if test.component_id else "",
        "score": round(float(health.score), 4),
        "verdict": health.verdict,
        "scored_by": health.scored_by,
        "triage_state": triage_state_of(test),
        "runs": health.runs,
        "failures": health.failures,
        "last_failure_at": health.last_failure_at,
        "recent_outcomes": health.recent_outcomes,
    }


FLAKY_DOWNLOAD_FIELDS = ["test_id", "classname", "name", "component", "score", "verdict", "scored_by",
                         "triage_state", "runs", "failures", "last_failure_at", "recent_outcomes"]


# ------------------------------------------------------------------------------------------- flaky detail


def flaky_test_get(*, project_id: int, test_id: int) -> TestCase | None:
    return (
        TestCase.objects.filter(project_id=project_id, pk=test_id)
        .select_related("component", "triage", "triage__updated_by", "health")
        .first()
    )


@dataclass
class BuildRuns:
    """The attempts of one test in one build, in attempt order."""

    build_id: int
    external_id: str
    commit: str
    branch: str
    started_at: datetime
    attempts: list[dict] = field(default_factory=list)

    @property
    def reran(self) -> bool:
        return len(self.attempts) > 1

    @property
    def final_outcome(self) -> str:
        return self.attempts[-1]["outcome"] if self.attempts else ""


def test_history(*, test_id: int, limit: int = HISTORY_LIMIT) -> list[BuildRuns]:
    """The latest ``limit`` attempts of one test grouped by build, newest build first (indexed per test)."""
    rows = (
        TestResult.objects.filter(test_case_id=test_id)
        .order_by("-build__started_at", "-build_id", "attempt")
        .values_list("build_id", "build__external_id", "build__commit", "build__branch", "build__started_at",
                     "attempt", "outcome", "duration", "failure_type", "message", "signature")[:limit]
    )
    builds: dict[int, BuildRuns] = {}
    for build_id, ext, commit, branch, started, attempt, outcome, duration, ftype, message, sig in rows:
        entry = builds.get(build_id)
        if entry is None:
            entry = builds[build_id] = BuildRuns(build_id, ext, commit, branch, started)
        entry.attempts.append({"attempt": attempt, "outcome": outcome, "duration": duration,
                               "failure_type": ftype, "message": message, "signature": sig})
    for entry in builds.values():
        entry.attempts.sort(key=lambda a: a["attempt"])
    return list(builds.values())


def history_points(history: list[BuildRuns]) -> list[dict]:
    """Flat attempts, oldest first, for the duration chart: build start, attempt, outcome, duration."""
    points = []
    for entry in reversed(history):
        for a in entry.attempts:
            points.append({"started_at": entry.started_at, "build": entry.external_id, "commit": entry.commit,
                           "attempt": a["attempt"], "outcome": a["outcome"], "duration": a["duration"]})
    return points


@dataclass
class ClusterShare:
    cluster: FailureCluster | None
    failures: int
    signatures: list[FailureSignature]


def test_failure_causes(*, project_id: int, test_id: int) -> list[ClusterShare]:
    """The failure causes of one test's failures: clusters (or unclustered signatures) with failure counts."""
    per_key = dict(
        TestResult.objects.filter(test_case_id=test_id, outcome__in=[Outcome.FAILED, Outcome.ERROR])
        .exclude(signature="")
        .values("signature").annotate(n=Count("id")).values_list("signature", "n")
    )
    if not per_key:
        return []
    signatures = FailureSignature.objects.filter(project_id=project_id, key__in=list(per_key)).select_related(
        "cluster"
    )
    groups: dict[int | None, ClusterShare] = {}
    for sig in signatures:
        share = groups.get(sig.cluster_id)
        if share is None:
            share = groups[sig.cluster_id] = ClusterShare(sig.cluster, 0, [])
        share.failures += per_key.get(sig.key, 0)
        share.signatures.append(sig)
    return sorted(groups.values(), key=lambda s: (-s.failures, s.cluster.pk if s.cluster else 0))


def triage_history(*, test_id: int, limit: int = 100) -> list[TriageEvent]:
    return list(
        TriageEvent.objects.filter(test_case_id=test_id).select_related("user").order_by("-at", "-id")[:limit]
    )


# ------------------------------------------------------------------------------------------ causes list


def cluster_table_qs(
    *,
    project_id: int,
    search: str | None = None,
    min_failures: int | None = None,
    defects: str | None = None,
    seen_since: datetime | None = None,
    order: str = CAUSE_DEFAULT_SORT,
) -> QuerySet[FailureCluster]:
    """Live failure causes of a project (merged ones left out), filtered and ordered.

    ``defects``: ``"confirmed"`` (a person confirmed a linked defect), ``"suggested"`` (suggestions only),
    ``"none"`` (no defect at all). The defect links are prefetched in one extra query, best first.
    """
    qs = FailureCluster.objects.filter(project_id=project_id, merged_into__isnull=True)
    for word in (search or "").split():
        qs = qs.filter(Q(label__icontains=word) | Q(exception__icontains=word)
                       | Q(representative_text__icontains=word))
    if min_failures is not None:
        qs = qs.filter(failures__gte=min_failures)
    if seen_since is not None:
        qs = qs.filter(last_seen__gte=seen_since)
    if defects == "confirmed":
        qs = qs.filter(defect_links__confirmed=True).distinct()
    elif defects == "suggested":
        qs = qs.filter(defect_links__isnull=False).exclude(defect_links__confirmed=True).distinct()
    elif defects == "none":
        qs = qs.filter(defect_links__isnull=True)
    links = ClusterDefectLink.objects.select_related("defect").order_by("-confirmed", "-score", "defect__key")
    return qs.defer("representative_text", "note").prefetch_related(
        Prefetch("defect_links", queryset=links)
    ).order_by(order, "pk")


def latest_build_week(*, project_id: int):
    """Monday of the project's latest build (indexed on ``Build(project, week)``), or None: trends end there."""
    return Build.objects.filter(project_id=project_id).aggregate(last=Max("week"))["last"]


def cluster_table_row(cluster: FailureCluster) -> dict:
    links = list(cluster.defect_links.all())
    return {
        **cluster_summary(cluster),
        "weekly_trend": " ".join(f"{week}:{n}" for week, n in (cluster.weekly_trend or [])),
        "defects": " ".join(f"{ln.defect.key}{'' if ln.confirmed else '?'}" for ln in links[:LIST_DEFECTS]),
    }


CAUSE_DOWNLOAD_FIELDS = ["cluster_id", "label", "exception", "failures", "tests_affected", "builds_affected",
                         "first_seen", "last_seen", "weekly_trend", "defects"]


# ---------------------------------------------------------------------------------------- cluster detail


def cluster_get(*, project_id: int, cluster_id: int) -> FailureCluster | None:
    return FailureCluster.objects.filter(project_id=project_id, pk=cluster_id).select_related("merged_into").first()


def cluster_signatures_qs(*, cluster_id: int) -> QuerySet[FailureSignature]:
    return FailureSignature.objects.filter(cluster_id=cluster_id).order_by("-occurrences", "key")


def cluster_failures_qs(*, project_id: int, keys: list[str]) -> QuerySet[TestResult]:
    """Failed attempts carrying one of ``keys`` (indexed on ``signature``), newest first, test and build joined."""
    return (
        TestResult.objects.filter(project_id=project_id, signature__in=keys)
        .select_related("test_case", "build")
        .only("id", "outcome", "attempt", "message", "failure_type", "signature", "test_case__classname",
              "test_case__name", "build__external_id", "build__commit", "build__started_at")
        .order_by("-build_id", "-id")
    )


def cluster_defect_links(*, cluster_id: int) -> list[ClusterDefectLink]:
    return list(
        ClusterDefectLink.objects.filter(cluster_id=cluster_id).select_related("defect", "confirmed_by")
        .order_by("-confirmed", "-score", "defect__key")
    )


def cluster_merge_targets(*, project_id: int, exclude_id: int, limit: int = MERGE_TARGETS) -> list[FailureCluster]:
    return list(
        FailureCluster.objects.filter(project_id=project_id, merged_into__isnull=True).exclude(pk=exclude_id)
        .only("id", "label", "failures").order_by("-failures", "pk")[:limit]
    )
