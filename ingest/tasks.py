"""Celery tasks of the ingest app: they receive ids, load, call one service."""

from __future__ import annotations

import logging
from datetime import timedelta

from celery import shared_task
from django.utils import timezone

from ingest.models import ImportJob

log = logging.getLogger(__name__)

SWEEP_GRACE = timedelta(seconds=60)
STALE_RUNNING = timedelta(hours=2)


@shared_task(acks_late=True, time_limit=3 * 3600, soft_time_limit=3 * 3600 - 60)
def process_import_job(job_id: int) -> str:
    from ingest.services.defects import DefectImportError, defects_job_run
    from ingest.services.results import ResultsImportError, results_job_run

    job = ImportJob.objects.select_related("project").filter(pk=job_id).first()
    if job is None:
        return "missing"
    if job.status in (ImportJob.Status.DONE, ImportJob.Status.RUNNING):
        return job.status  # delivered twice: nothing to do
    try:
        if job.kind == ImportJob.Kind.DEFECTS:
            defects_job_run(job=job)
        elif job.kind != ImportJob.Kind.RESULTS:
            return "unsupported"
        else:
            results_job_run(job=job)
    except (ResultsImportError, DefectImportError):
        pass  # the job is marked failed with its reason
    except Exception:  # noqa: BLE001 - recorded on the job; the worker keeps going
        log.exception("import job %s failed", job_id)
    job.refresh_from_db()
    return job.status


def job_enqueue(job: ImportJob) -> bool:
    """Queue the job's processing; records when it was handed to the broker."""
    from ingest.dispatch import task_enqueue

    ok = task_enqueue(process_import_job, job.pk)
    if ok:
        ImportJob.objects.filter(pk=job.pk, enqueued_at__isnull=True).update(enqueued_at=timezone.now())
    return ok


@shared_task
def sweep_unqueued_imports() -> int:
    """Enqueue jobs that were stored but never reached the broker (e.g. it was down during the upload)."""
    cutoff = timezone.now() - SWEEP_GRACE
    count = 0
    for job in ImportJob.objects.filter(status=ImportJob.Status.QUEUED, enqueued_at__isnull=True, created_at__lt=cutoff):
        count += job_enqueue(job)
    return count
