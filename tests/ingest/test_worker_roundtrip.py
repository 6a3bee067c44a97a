"""A real Celery worker through Redis on PostgreSQL: active when CELERY_BROKER_URL and DATABASE_URL are set (CI)."""

from __future__ import annotations

import io
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from django.conf import settings
from django.db import connection

from ingest.models import Project, TestResult
from ingest.services.results import BuildMeta, results_job_create
from ingest.tasks import job_enqueue

BROKER = getattr(settings, "TEST_CELERY_BROKER_URL", "")
pytestmark = [
    pytest.mark.worker,
    pytest.mark.skipif(not BROKER, reason="CELERY_BROKER_URL not set: no real worker to talk to"),
]

REPORT = (b'<testsuite name="s" tests="3" failures="1" skipped="1"><testcase classname="pay.Card" name="a"/>'
          b'<testcase classname="pay.Card" name="b"><failure message="declined"/></testcase>'
          b'<testcase classname="pay.Card" name="c"><skipped/></testcase></testsuite>')


@pytest.fixture
def worker(transactional_db, settings, tmp_path):
    if connection.vendor != "postgresql":
        pytest.skip("the worker needs a database it can share with the test: PostgreSQL")
    db = connection.settings_dict
    url = f"postgres://{db['USER']}@{db['HOST'] or '127.0.0.1'}:{db['PORT'] or 5432}/{db['NAME']}"
    env = {**os.environ, "DJANGO_SETTINGS_MODULE": "config.settings.base", "DEBUG": "1", "DATABASE_URL": url,
           "CELERY_BROKER_URL": BROKER, "MEDIA_ROOT": settings.MEDIA_ROOT}
    log = open(tmp_path / "worker.log", "w")
    proc = subprocess.Popen(
        [sys.executable, "-m", "celery", "-A", "config", "worker", "--pool=solo", "--loglevel=INFO",
         "-Q", "celery", "--without-heartbeat", "--without-gossip", "--without-mingle"],
        cwd=Path(__file__).resolve().parents[2], env=env, stdout=log, stderr=subprocess.STDOUT,
    )
    from config.celery import app

    saved = (app.conf.task_always_eager, app.conf.broker_url)
    app.conf.task_always_eager = False
    app.conf.broker_url = BROKER
    try:
        yield proc
    finally:
        app.conf.task_always_eager, app.conf.broker_url = saved
        proc.terminate()
        proc.wait(timeout=20)
        log.close()


def test_upload_processed_by_real_worker(worker, tmp_path):
    project = Project.objects.create(slug="harbour", name="Harbour")
    job = results_job_create(project=project, files=[("r.xml", io.BytesIO(REPORT))], meta=BuildMeta(build="w-1"))
    assert job_enqueue(job)
    deadline = time.monotonic() + 90
    while time.monotonic() < deadline:
        job.refresh_from_db()
        if job.status in ("done", "failed"):
            break
        time.sleep(0.5)
    log = (tmp_path / "worker.log").read_text()
    assert job.status == "done", log[-3000:]
    assert sorted(TestResult.objects.values_list("outcome", flat=True)) == ["failed", "passed", "skipped"]
    assert job.enqueued_at is not None
