"""Celery tasks of the analytics app: receive ids, call one service."""

from __future__ import annotations

from celery import shared_task

from ingest.models import Project, TestResult


@shared_task(acks_late=True, time_limit=3600)
def refresh_after_build(project_id: int, build_id: int) -> int:
    """Incremental refresh after an ingest: re-score only the tests the new build touched."""
    from analytics.services.flaky import flaky_scores_refresh

    test_ids = set(TestResult.objects.filter(build_id=build_id).values_list("test_case_id", flat=True))
    return flaky_scores_refresh(project_id=project_id, test_ids=test_ids)


@shared_task(acks_late=True, time_limit=6 * 3600)
def refresh_all_projects() -> int:
    from analytics.services.flaky import flaky_scores_refresh

    return sum(flaky_scores_refresh(project_id=pid) for pid in Project.objects.values_list("pk", flat=True))


@shared_task(acks_late=True, time_limit=6 * 3600)
def refresh_project(project_id: int) -> int:
    """Full refresh of one project (after a backfill, or on demand)."""
    from analytics.services.flaky import flaky_scores_refresh

    return flaky_scores_refresh(project_id=project_id)
