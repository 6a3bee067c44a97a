"""Celery tasks of the analytics app: receive ids, call one service."""

from __future__ import annotations

from celery import shared_task

from ingest.models import Project


@shared_task(acks_late=True, time_limit=3600)
def refresh_after_build(project_id: int, build_id: int) -> dict:
    """Incremental refresh after an ingest: only what the new build touched."""
    from analytics.services.refresh import analytics_refresh_after_build

    return analytics_refresh_after_build(project_id=project_id, build_id=build_id)


@shared_task(acks_late=True, time_limit=6 * 3600)
def refresh_project(project_id: int) -> dict:
    """Full refresh of one project (after a backfill, a defect import, or on demand)."""
    from analytics.services.refresh import analytics_refresh

    return analytics_refresh(project_id=project_id)


@shared_task(acks_late=True, time_limit=3600)
def refresh_after_defects(project_id: int) -> dict:
    """After a defect import: refit what reads defects."""
    from analytics.services.refresh import analytics_refresh_after_defects

    return analytics_refresh_after_defects(project_id=project_id)


@shared_task(acks_late=True, time_limit=6 * 3600)
def refresh_all_projects() -> int:
    """The scheduled full refit (Celery beat)."""
    from analytics.services.refresh import analytics_refresh

    pids = list(Project.objects.values_list("pk", flat=True))
    for pid in pids:
        analytics_refresh(project_id=pid)
    return len(pids)
