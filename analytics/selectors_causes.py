"""Reads for failure causes: ORM rows become DataFrames for :mod:`analytics.services.clusters`."""

from __future__ import annotations

from collections.abc import Iterable, Iterator

import pandas as pd
from django.db.models import Count, QuerySet

from analytics.models import FailureCluster, FailureSignature
from ingest.models import Defect, Outcome, TestResult

FAILED_OUTCOMES = (Outcome.FAILED, Outcome.ERROR)
_CHUNK = 500


def failed_results_qs(*, project_id: int) -> QuerySet[TestResult]:
    """Every failed or errored result of a project."""
    return TestResult.objects.filter(project_id=project_id, outcome__in=FAILED_OUTCOMES)


def unsigned_failures(*, project_id: int, build_id: int | None = None) -> Iterator[tuple[int, str, str, str]]:
    """``(result id, failure type, message, details)`` of failures that have no signature key yet."""
    qs = failed_results_qs(project_id=project_id).filter(signature="")
    if build_id is not None:
        qs = qs.filter(build_id=build_id)
    yield from (
        qs.order_by("id").values_list("id", "failure_type", "message", "details").iterator(chunk_size=2000)
    )


def failure_text_of(*, project_id: int, key: str) -> tuple[str, str, str] | None:
    """``(failure type, message, details)`` of one failure carrying signature ``key``."""
    return (
        failed_results_qs(project_id=project_id)
        .filter(signature=key)
        .order_by("id")
        .values_list("failure_type", "message", "details")
        .first()
    )


def signature_keys_in(*, project_id: int, build_id: int | None = None) -> set[str]:
    """Distinct signature keys of the failures of a project (or of one build)."""
    qs = failed_results_qs(project_id=project_id).exclude(signature="")
    if build_id is not None:
        qs = qs.filter(build_id=build_id)
    return set(qs.values_list("signature", flat=True).distinct())


def signature_occurrences(*, project_id: int, keys: Iterable[str] | None = None) -> dict[str, int]:
    """Failures per signature key (all keys of the project, or the given ones)."""
    qs = failed_results_qs(project_id=project_id).exclude(signature="")
    if keys is None:
        return dict(qs.values("signature").annotate(n=Count("id")).values_list("signature", "n"))
    counts: dict[str, int] = {}
    keys = sorted(set(keys))
    for start in range(0, len(keys), _CHUNK):
        chunk = keys[start : start + _CHUNK]
        sub = qs.filter(signature__in=chunk).values("signature").annotate(n=Count("id"))
        counts.update(sub.values_list("signature", "n"))
    return counts


def signatures_frame(*, project_id: int, keys: Iterable[str] | None = None) -> pd.DataFrame:
    """Stored signatures: ``key``, ``text``, ``count`` (occurrences), ``cluster_id`` (or -1), ``pinned``."""
    qs = FailureSignature.objects.filter(project_id=project_id)
    rows: list[tuple] = []
    fields = ("key", "text", "occurrences", "cluster_id", "pinned")
    if keys is None:
        rows = list(qs.values_list(*fields))
    else:
        keys = sorted(set(keys))
        for start in range(0, len(keys), _CHUNK):
            rows.extend(qs.filter(key__in=keys[start : start + _CHUNK]).values_list(*fields))
    frame = pd.DataFrame.from_records(rows, columns=["key", "text", "count", "cluster_id", "pinned"])
    frame["cluster_id"] = frame["cluster_id"].fillna(-1).astype("int64")
    frame["count"] = frame["count"].astype("int64")
    frame["pinned"] = frame["pinned"].astype(bool)
    return frame.sort_values("key", kind="stable").reset_index(drop=True)


def cluster_failures_frame(*, project_id: int, keys: Iterable[str] | None = None) -> pd.DataFrame:
    """One row per failure with a signature: ``signature``, ``test_id``, ``build_id``, ``started_at``, ``week``."""
    qs = failed_results_qs(project_id=project_id).exclude(signature="")
    fields = ("signature", "test_case_id", "build_id", "build__started_at", "build__week")
    rows: list[tuple] = []
    if keys is None:
        rows = list(qs.values_list(*fields).iterator(chunk_size=5000))
    else:
        keys = sorted(set(keys))
        for start in range(0, len(keys), _CHUNK):
            rows.extend(qs.filter(signature__in=keys[start : start + _CHUNK]).values_list(*fields))
    frame = pd.DataFrame.from_records(
        rows, columns=["signature", "test_id", "build_id", "started_at", "week"]
    )
    frame["started_at"] = pd.to_datetime(frame["started_at"], utc=True)
    return frame


def defects_frame(*, project_id: int) -> pd.DataFrame:
    """``id``, ``key``, ``title``, ``description`` of every defect of a project, by key."""
    rows = (
        Defect.objects.filter(project_id=project_id)
        .order_by("key")
        .values_list("id", "key", "title", "description")
    )
    return pd.DataFrame.from_records(list(rows), columns=["id", "key", "title", "description"])


def active_clusters_qs(*, project_id: int) -> QuerySet[FailureCluster]:
    """Clusters that currently hold failures (merged-away and emptied ones are left out), largest first."""
    return FailureCluster.objects.filter(
        project_id=project_id, merged_into__isnull=True, failures__gt=0
    ).order_by("-failures", "id")


def cluster_results_qs(*, cluster: FailureCluster) -> QuerySet[TestResult]:
    """The failed or errored results of one cluster, newest build first."""
    keys = FailureSignature.objects.filter(cluster=cluster).values("key")
    return (
        failed_results_qs(project_id=cluster.project_id)
        .filter(signature__in=keys)
        .select_related("build", "test_case")
        .order_by("-build__started_at", "-id")
    )


def cluster_summary(cluster: FailureCluster) -> dict:
    """The fields every listing of a cause shows (page table, downloads, ``export_analytics``)."""
    return {
        "cluster_id": cluster.pk,
        "label": cluster.label,
        "exception": cluster.exception,
        "failures": cluster.failures,
        "tests_affected": cluster.tests_affected,
        "builds_affected": cluster.builds_affected,
        "first_seen": cluster.first_seen,
        "last_seen": cluster.last_seen,
    }
