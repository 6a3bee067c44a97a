"""A stored upload whose enqueue failed is picked up by the periodic sweep: no upload is lost."""

from __future__ import annotations

import io
from datetime import timedelta

import pytest
from django.utils import timezone

from ingest import tasks
from ingest.models import ImportJob, Project
from ingest.services.results import BuildMeta, results_job_create


@pytest.mark.django_db
def test_sweep_enqueues_jobs_that_never_reached_the_broker(monkeypatch):
    project = Project.objects.create(slug="p", name="P")
    job = results_job_create(project=project, files=[("r.xml", io.BytesIO(b'<testsuite name="s"/>'))],
                             meta=BuildMeta(build="1"))
    monkeypatch.setattr("ingest.dispatch.task_enqueue", lambda task, *args: False)
    assert tasks.job_enqueue(job) is False
    ImportJob.objects.filter(pk=job.pk).update(created_at=timezone.now() - timedelta(minutes=5))
    monkeypatch.undo()
    assert tasks.sweep_unqueued_imports() == 1
    job.refresh_from_db()
    assert job.status == "done" and job.enqueued_at is not None


@pytest.mark.django_db
def test_upload_with_unreachable_broker_still_answers_202(django_capture_on_commit_callbacks, monkeypatch):
    # The broker refuses the message (as kombu does when Redis is down): the job must be stored and
    # left for the sweep. Patching the publish step keeps the test independent of any pooled connection
    # to a real broker that an earlier test may have opened.
    from kombu.exceptions import OperationalError
    from rest_framework.test import APIClient

    from config.celery import app
    from ingest.models import ApiToken

    def refuse(*args, **kwargs):
        raise OperationalError("Error 111 connecting to 127.0.0.1:6379. Connection refused.")

    project = Project.objects.create(slug="p", name="P")
    key = ApiToken.issue(project=project, name="ci")[1]
    monkeypatch.setattr(tasks.process_import_job, "apply_async", refuse)
    saved_eager = app.conf.task_always_eager
    app.conf.task_always_eager = False
    try:
        client = APIClient()
        client.credentials(HTTP_AUTHORIZATION=f"Bearer {key}")
        report = io.BytesIO(b'<testsuite name="s" tests="1"><testcase name="a"/></testsuite>')
        report.name = "r.xml"
        with django_capture_on_commit_callbacks(execute=True):
            response = client.post("/api/v1/projects/p/results/", {"files": [report], "build": "9"},
                                   format="multipart")
    finally:
        app.conf.task_always_eager = saved_eager
    assert response.status_code == 202
    job = ImportJob.objects.get()
    assert job.status == "queued" and job.enqueued_at is None and job.files.count() == 1
