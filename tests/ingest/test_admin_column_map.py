"""Column maps edited in the admin are validated like those given to the CLI and the API."""

from __future__ import annotations

import json

import pytest

from ingest.admin import DefectColumnMapForm
from ingest.models import Project
from ingest.parsers.defects import MAP_NOT_OBJECT_MSG


@pytest.mark.django_db
def test_admin_form_refuses_a_map_that_is_not_an_object_and_names_why():
    project = Project.objects.create(slug="p", name="P")
    form = DefectColumnMapForm(data={"project": project.pk, "name": "tracker", "definition": json.dumps([1, 2])})
    assert not form.is_valid()
    assert form.errors["definition"] == [MAP_NOT_OBJECT_MSG.format(kind="list")]


@pytest.mark.django_db
def test_admin_form_accepts_the_demo_map(tmp_path):
    from demo_fixtures.generate import generate
    from demo_fixtures.scenario import ScenarioParams

    generate(tmp_path, params=ScenarioParams.for_scale("demo", n_tests=30, n_days=14, n_defects=20))
    definition = (tmp_path / "defects.columnmap.json").read_text(encoding="utf-8")
    project = Project.objects.create(slug="p", name="P")
    form = DefectColumnMapForm(data={"project": project.pk, "name": "export", "definition": definition})
    assert form.is_valid(), form.errors


@pytest.mark.django_db
def test_admin_retry_does_not_queue_a_job_someone_else_retried_meanwhile(monkeypatch):
    from ingest import admin as ingest_admin
    from ingest.models import ImportJob

    project = Project.objects.create(slug="p", name="P")
    job = ImportJob.objects.create(project=project, kind=ImportJob.Kind.RESULTS, status=ImportJob.Status.FAILED)
    queued = []
    monkeypatch.setattr(ingest_admin, "job_enqueue", lambda j: queued.append(j.pk) or True)

    class Admin:
        def message_user(self, request, text):
            self.text = text

    class StaleSelection:  # the admin's list was read while the job was still failed
        def __init__(self, jobs):
            self.jobs = jobs

        def filter(self, **kwargs):
            return self.jobs

    stale = StaleSelection(list(ImportJob.objects.filter(pk=job.pk)))
    ImportJob.objects.filter(pk=job.pk).update(status=ImportJob.Status.QUEUED)  # another retry won the race
    late = Admin()
    ingest_admin.retry_imports(late, None, stale)
    assert queued == [] and late.text.startswith("0 ")
    ImportJob.objects.filter(pk=job.pk).update(status=ImportJob.Status.FAILED)
    first = Admin()
    ingest_admin.retry_imports(first, None, stale)
    assert queued == [job.pk] and first.text.startswith("1 ")
