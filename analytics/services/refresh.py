"""One entry point that runs every detector of a project, in order, and records each run."""

from __future__ import annotations

import time
from collections.abc import Callable

from django.utils import timezone

from analytics.models import AnalyticsRun


def _recorded(*, project_id: int, detector: str, scope: str, run: Callable[[], int]) -> tuple[int, float]:
    record = AnalyticsRun.objects.create(project_id=project_id, detector=detector, scope=scope,
                                         started_at=timezone.now())
    started = time.perf_counter()
    try:
        count = run()
    except Exception as exc:
        record.finished_at, record.details = timezone.now(), {"error": f"{type(exc).__name__}: {exc}"}
        record.save(update_fields=["finished_at", "details"])
        raise
    seconds = time.perf_counter() - started
    record.finished_at, record.ok = timezone.now(), True
    record.details = {"count": count, "seconds": round(seconds, 3)}
    record.save(update_fields=["finished_at", "ok", "details"])
    return count, seconds


def _run_steps(*, project_id: int, scope: str, steps: dict[str, Callable[[], int]]) -> dict[str, tuple[int, float]]:
    """Run the detectors in order, each recorded; a failing one is recorded and stops the rest."""
    return {name: _recorded(project_id=project_id, detector=name, scope=scope, run=run) for name, run in steps.items()}


def analytics_refresh(*, project_id: int) -> dict[str, tuple[int, float]]:
    """Full refresh: every detector on the whole window. Returns {detector: (rows written, seconds)}."""
    from analytics.services.clusters import clusters_refresh
    from analytics.services.duplicates import defect_duplicates_refresh
    from analytics.services.flaky import flaky_scores_refresh
    from analytics.services.forecasts import forecasts_refresh
    from analytics.services.growth import runtime_growth_refresh

    steps: dict[str, Callable[[], int]] = {
        "flaky": lambda: flaky_scores_refresh(project_id=project_id),
        "clusters": lambda: clusters_refresh(project_id=project_id),
        "runtime_growth": lambda: runtime_growth_refresh(project_id=project_id),
        "forecasts": lambda: forecasts_refresh(project_id=project_id),
        "duplicates": lambda: defect_duplicates_refresh(project_id=project_id),
    }
    return _run_steps(project_id=project_id, scope="full", steps=steps)


def analytics_refresh_after_defects(*, project_id: int) -> dict[str, tuple[int, float]]:
    """After a defect import: what reads defects (forecasts, duplicate suggestions, cause ↔ defect links)."""
    from analytics.services.clusters import cluster_defect_links_refresh
    from analytics.services.duplicates import defect_duplicates_refresh
    from analytics.services.forecasts import forecasts_refresh

    steps: dict[str, Callable[[], int]] = {
        "forecasts": lambda: forecasts_refresh(project_id=project_id),
        "duplicates": lambda: defect_duplicates_refresh(project_id=project_id),
        "cluster_defects": lambda: cluster_defect_links_refresh(project_id=project_id),
    }
    return _run_steps(project_id=project_id, scope="defects", steps=steps)


def analytics_refresh_after_build(*, project_id: int, build_id: int) -> dict[str, tuple[int, float]]:
    """Incremental refresh after one build: cost grows with the build, not with the history."""
    from analytics.services.clusters import clusters_assign_build
    from analytics.services.flaky import flaky_scores_refresh
    from analytics.services.growth import runtime_growth_refresh, weeks_after_build
    from ingest.models import Build, TestResult

    test_ids = set(TestResult.objects.filter(build_id=build_id).values_list("test_case_id", flat=True))
    week = Build.objects.filter(pk=build_id).values_list("week", flat=True).first()
    steps: dict[str, Callable[[], int]] = {
        "flaky": lambda: flaky_scores_refresh(project_id=project_id, test_ids=test_ids),
        "clusters": lambda: clusters_assign_build(project_id=project_id, build_id=build_id),
        "runtime_growth": lambda: runtime_growth_refresh(
            project_id=project_id, weeks=[] if week is None else weeks_after_build(project_id=project_id, week=week)),
    }
    return _run_steps(project_id=project_id, scope="build", steps=steps)
