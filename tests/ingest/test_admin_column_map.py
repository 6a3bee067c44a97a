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
