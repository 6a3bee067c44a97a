"""What happens after an import commits: the analytics refresh for that project is queued."""

from __future__ import annotations

from ingest.dispatch import task_enqueue


def after_results_import(*, project_id: int, build_id: int) -> None:
    from analytics.tasks import refresh_after_build

    task_enqueue(refresh_after_build, project_id, build_id)

