"""What happens after an import commits: the analytics refresh for that project is queued."""

from __future__ import annotations

from ingest.dispatch import task_enqueue


def after_results_import(*, project_id: int, build_id: int) -> None:
    from analytics.tasks import refresh_after_build

    task_enqueue(refresh_after_build, project_id, build_id)


def after_defects_import(*, project_id: int, job_id: int) -> None:
    """After a defect import commits: queue the defect analytics (likely duplicates, defect inflow)."""
    from analytics.tasks import refresh_after_defects

    task_enqueue(refresh_after_defects, project_id)
