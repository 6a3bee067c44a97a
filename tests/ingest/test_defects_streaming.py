"""A 100 000-row defect export is read and written in bounded batches (behaviour, not time).

The CSV is written with Python's csv module (RFC 4180 reference writer); the rows are invented and their
count is the ground truth the test constructs. Timing belongs in bench/, not here.
"""

from __future__ import annotations

import csv
import math

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext

from ingest.models import Defect, ImportJob, Project
from ingest.parsers.defects import ColumnMap
from ingest.services import defects as service
from ingest.services.defects import defects_job_create, defects_job_run

N_ROWS = 100_000
COMPONENTS = ("Booking API", "Payments", "Berth Sensors", "Mobile App")


@pytest.fixture(scope="module")
def big_export(tmp_path_factory):
    path = tmp_path_factory.mktemp("big") / "defects.csv"
    with open(path, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(["Ticket", "Summary", "Opened", "State", "Area"])
        for i in range(N_ROWS):
            opened = f"2026-{1 + i % 9:02d}-{1 + i % 28:02d}T{i % 24:02d}:{i % 60:02d}:00Z"
            writer.writerow([f"BW-{i}", f"Berth {i % 97} double booked", opened, "New", COMPONENTS[i % 4]])
    return path


@pytest.mark.django_db
def test_100k_rows_are_written_in_bounded_batches_with_bounded_queries(big_export, monkeypatch):
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    cmap = ColumnMap.from_dict(
        {
            "name": "big",
            "fields": {
                "key": "Ticket",
                "title": "Summary",
                "created": "Opened",
                "status": "State",
                "components": "Area",
            },
            "date_format": "iso",
        }
    )
    batches: list[int] = []
    original = service._DefectWriter.write

    def recording_write(self, batch):
        batches.append(len(batch))
        return original(self, batch)

    monkeypatch.setattr(service._DefectWriter, "write", recording_write)
    progress: list[float] = []
    monkeypatch.setattr(service, "_progress_save", lambda job, value: progress.append(value))
    with open(big_export, "rb") as fh:
        job = defects_job_create(project=project, name="defects.csv", stream=fh, column_map=cmap)
    with CaptureQueriesContext(connection) as queries:
        defects_job_run(job=job, refresh=False)
    job.refresh_from_db()
    assert job.status == ImportJob.Status.DONE and job.counts["created"] == N_ROWS
    assert Defect.objects.count() == N_ROWS
    # never more than one batch of rows held for writing at a time
    assert max(batches) == service.BATCH_SIZE and sum(batches) == N_ROWS
    assert len(batches) == math.ceil(N_ROWS / service.BATCH_SIZE)
    # queries grow with the number of batches, not rows: a fixed handful per batch
    # (key lookups before and after the insert in FETCH_CHUNK pieces, one bulk insert of the defects and
    # one of their component links), plus a constant: the job row, and a get_or_create for each of the
    # four new components (savepoint, select, insert, release)
    per_batch = 2 * math.ceil(service.BATCH_SIZE / service.FETCH_CHUNK) + 2
    assert len(queries) <= per_batch * len(batches) + 10 + 5 * len(COMPONENTS), len(queries)
    assert len(queries) < N_ROWS / 100
    # progress is published after each full batch and grows towards the end of the file
    assert len(progress) == N_ROWS // service.BATCH_SIZE and progress == sorted(progress)
    assert progress[0] == pytest.approx(service.BATCH_SIZE / (N_ROWS + 1), abs=1e-3) and progress[-1] > 0.99
