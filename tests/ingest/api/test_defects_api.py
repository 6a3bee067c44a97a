"""Defect-export API: token auth (401/403), 202 + job URL, rejected.csv, column maps GET/PUT.

Outside sources: RFC 9110 status semantics (401 without credentials, 403 for credentials without the right,
202 Accepted with Location for queued work, 201 for a created resource); the OWASP "CSV Injection" guidance
for the rejected-rows CSV, read back with Python's csv module (RFC 4180 reference reader). The export rows
are invented (the marina berth-booking scenario) and are the test's own ground truth.
"""

from __future__ import annotations

import csv
import io
import json

import pytest
from django.contrib.auth import get_user_model
from rest_framework.test import APIClient

from barometer_common.csvsafe import FORMULA_PREFIXES
from ingest.api.defects import ERR_ONE_MAP
from ingest.models import ApiToken, Defect, DefectColumnMap, ImportJob, Project

EXPORT = (
    b"Ticket,Summary,Opened,State\r\n"
    b"BRT-1,Gate code rejected,2026-03-01T08:00:00Z,New\r\n"
    b'BRT-2,"=HYPERLINK(""http://x.invalid"",""go"")",not a date,New\r\n'
    b"BRT-3,Tide table off by one hour,2026-03-02T08:00:00Z,Done\r\n"
)
CMAP = {
    "name": "desk",
    "fields": {"key": "Ticket", "title": "Summary", "created": "Opened", "status": "State"},
    "closed_statuses": ["Done"],
}


@pytest.fixture
def project(db):
    return Project.objects.create(slug="berthwise", name="Berthwise")


@pytest.fixture
def client_with_token(project):
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='ci')[1]}")
    return client


@pytest.fixture(autouse=True)
def _no_analytics(monkeypatch):
    """The defect analytics task is queued after commit; here only the import is under test."""
    monkeypatch.setattr("ingest.hooks.after_defects_import", lambda **kw: None)


def upload(client, slug="berthwise", data=EXPORT, **fields):
    payload = {"file": io.BytesIO(data), **fields}
    payload["file"].name = "export.csv"
    return client.post(f"/api/v1/projects/{slug}/defects/", payload, format="multipart")


def test_without_token_is_401_and_foreign_token_is_403(project):
    assert upload(APIClient(), column_map=json.dumps(CMAP)).status_code == 401
    other = Project.objects.create(slug="other", name="Other")
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=other, name='x')[1]}")
    assert upload(client, column_map=json.dumps(CMAP)).status_code == 403
    assert ImportJob.objects.count() == 0


def test_upload_is_202_and_job_shows_counts_and_rejected_rows(
    project, client_with_token, django_capture_on_commit_callbacks
):
    with django_capture_on_commit_callbacks(execute=True):
        response = upload(client_with_token, column_map=json.dumps(CMAP))
    assert response.status_code == 202, response.content
    assert response["Location"] == response.json()["url"]
    job = client_with_token.get(response.json()["url"]).json()
    assert job["status"] == "done" and job["kind"] == "defects"
    assert job["counts"]["created"] == 2 and job["counts"]["rejected"] == 1
    assert [(e["line"], e["column"]) for e in job["row_errors"]] == [(3, "Opened")]
    assert sorted(Defect.objects.values_list("key", flat=True)) == ["BRT-1", "BRT-3"]

    csv_response = client_with_token.get(f"/api/v1/projects/berthwise/imports/{job['id']}/rejected.csv")
    assert csv_response.status_code == 200 and csv_response["Content-Type"].startswith("text/csv")
    assert "attachment" in csv_response["Content-Disposition"]
    rows = list(csv.reader(io.StringIO(csv_response.content.decode("utf-8"))))
    assert rows[0] == ["line", "column", "field", "reason", "raw values"] and rows[1][0] == "3"
    assert "HYPERLINK" in rows[1][4]
    # OWASP "CSV Injection": no cell starts with = + - @ tab or carriage return
    assert not any(cell.startswith(FORMULA_PREFIXES) for row in rows for cell in row)
    assert APIClient().get(f"/api/v1/projects/berthwise/imports/{job['id']}/rejected.csv").status_code == 401


def test_upload_by_saved_mapping_name_and_bad_map_input(
    project, client_with_token, django_capture_on_commit_callbacks
):
    assert upload(client_with_token).status_code == 400
    assert upload(client_with_token).json()["detail"] == ERR_ONE_MAP
    assert "no saved column map named 'desk'" in upload(client_with_token, mapping="desk").json()["detail"]
    assert upload(client_with_token, column_map="{not json").status_code == 400
    DefectColumnMap.objects.create(project=project, name="desk", definition=CMAP)
    with django_capture_on_commit_callbacks(execute=True):
        response = upload(client_with_token, mapping="desk", strict="true")
    assert response.status_code == 202
    job = ImportJob.objects.get(pk=response.json()["id"])
    assert job.status == ImportJob.Status.FAILED and "line 3" in job.error  # strict: one bad row, nothing in
    assert Defect.objects.count() == 0


def test_column_map_get_and_put_permissions(project, client_with_token):
    url = "/api/v1/projects/berthwise/column-maps/desk/"
    assert APIClient().get(url).status_code == 401
    assert client_with_token.get(url).status_code == 404
    created = client_with_token.put(url, CMAP, format="json")
    assert created.status_code == 201 and created.json()["fields"]["key"] == "Ticket"
    assert client_with_token.get(url).json()["closed_statuses"] == ["Done"]
    # a signed-in person without staff rights may read but not change it
    viewer = get_user_model().objects.create_user("viewer", password="x")
    people = APIClient()
    people.force_authenticate(viewer)
    assert people.get(url).status_code == 200
    assert people.put(url, {**CMAP, "closed_statuses": []}, format="json").status_code == 403
    staff = get_user_model().objects.create_user("admin", password="x", is_staff=True)
    people.force_authenticate(staff)
    assert (
        people.put(url, {**CMAP, "closed_statuses": ["Done", "Won't Fix"]}, format="json").status_code == 200
    )
    assert DefectColumnMap.objects.get(name="desk").definition["closed_statuses"] == ["Done", "Won't Fix"]
    bad = client_with_token.put(url, {**CMAP, "fields": {"key": "Ticket"}}, format="json")
    assert bad.status_code == 400 and "required field 'title'" in bad.json()["detail"]
    assert client_with_token.put(url, {**CMAP, "name": "other"}, format="json").status_code == 400
