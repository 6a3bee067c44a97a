"""Regression tests for the review findings on the ingest pages and API (one section per finding).

Outside sources: RFC 9110 status semantics (401 without credentials, 403 for credentials without the right,
202 Accepted for queued work, 413 Content Too Large); RFC 6266 / RFC 9110 §5.5 for Content-Disposition
(a field value must not contain CR or LF: common practice, and Django refuses it with BadHeaderError).
The exports and reports are invented (the marina berth-booking scenario) and are the tests' own ground truth.
"""

from __future__ import annotations

import io

import pytest
from django.contrib.auth.models import Group, Permission, User
from rest_framework.test import APIClient

from ingest.api.auth import ERR_CANNOT_IMPORT, ERR_FOREIGN_TOKEN
from ingest.models import ApiToken, ImportJob, Project

REPORT = (b'<testsuite name="s" tests="1"><testcase classname="berthwise.Gate" name="opens" time="0.1"/>'
          b"</testsuite>")
EXPORT = b"Key,Title,Created,Status\r\nBW-1,Gate code rejected,2026-03-01T08:00:00Z,New\r\n"
CMAP = '{"name": "desk", "fields": {"key": "Key", "title": "Title", "created": "Created", "status": "Status"}}'


@pytest.fixture(name="project")
def project_fixture(db):
    return Project.objects.create(slug="berthwise", name="Berthwise")


@pytest.fixture(name="viewer")
def viewer_fixture(db):
    return User.objects.create_user("vera", password="pw-vera")


@pytest.fixture(name="triager")
def triager_fixture(db):
    user = User.objects.create_user("tomas", password="pw-tomas")
    group, _ = Group.objects.get_or_create(name="triagers")
    group.permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))
    user.groups.add(group)
    return user


@pytest.fixture(autouse=True)
def _no_analytics(monkeypatch):
    """Only the import is under test here, not the analytics queued after it."""
    monkeypatch.setattr("ingest.hooks.after_defects_import", lambda **kw: None)


def _results_upload(client):
    payload = {"files": [io.BytesIO(REPORT)], "build": "b-1"}
    payload["files"][0].name = "report.xml"
    return client.post("/api/v1/projects/berthwise/results/", payload, format="multipart")


def _defects_upload(client):
    payload = {"file": io.BytesIO(EXPORT), "column_map": CMAP}
    payload["file"].name = "export.csv"
    return client.post("/api/v1/projects/berthwise/defects/", payload, format="multipart")


# ----------------------------------------------------------------------- 1: viewers cannot import via the API
@pytest.mark.parametrize("upload", [_results_upload, _defects_upload])
def test_api_import_by_a_signed_in_viewer_is_refused(project, viewer, upload):
    client = APIClient()
    client.force_authenticate(viewer)
    response = upload(client)
    assert response.status_code == 403  # RFC 9110 §15.5.4: authenticated, not allowed
    assert response.json()["detail"] == ERR_CANNOT_IMPORT
    assert ImportJob.objects.count() == 0


@pytest.mark.parametrize("upload", [_results_upload, _defects_upload])
def test_api_import_by_triager_staff_or_project_token_is_accepted(
    project, triager, upload, django_capture_on_commit_callbacks
):
    staff = User.objects.create_user("ada", password="x", is_staff=True)
    token_client = APIClient()
    token_client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='ci')[1]}")
    for person in (triager, staff, None):
        client = token_client
        if person is not None:
            client = APIClient()
            client.force_authenticate(person)
        with django_capture_on_commit_callbacks(execute=False):
            response = upload(client)
        assert response.status_code == 202, (person, response.content)  # RFC 9110 §15.3.3
    assert ImportJob.objects.count() == 3


def test_api_import_with_a_foreign_token_keeps_the_foreign_token_message(project):
    other = Project.objects.create(slug="other", name="Other")
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=other, name='ci')[1]}")
    response = _defects_upload(client)
    assert response.status_code == 403 and response.json()["detail"] == ERR_FOREIGN_TOKEN


def test_web_pages_and_api_share_one_import_rule(viewer, triager):
    from ingest import views
    from ingest.api import auth

    assert views.can_import is auth.can_import
    assert not auth.can_import(viewer) and auth.can_import(triager)


# ----------------------------------------------------------------------- 10: reads keep ProjectAccess's message
def test_column_map_read_with_a_foreign_token_gets_the_foreign_token_message(project):
    from ingest.api.defects import ERR_MAP_WRITE

    other = Project.objects.create(slug="other", name="Other")
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=other, name='ci')[1]}")
    url = "/api/v1/projects/berthwise/column-maps/desk/"
    response = client.get(url)
    assert response.status_code == 403 and response.json()["detail"] == ERR_FOREIGN_TOKEN
    viewer = User.objects.create_user("vic", password="x")
    people = APIClient()
    people.force_authenticate(viewer)
    refused = people.put(url, {"name": "desk"}, format="json")
    assert refused.status_code == 403 and refused.json()["detail"] == ERR_MAP_WRITE
