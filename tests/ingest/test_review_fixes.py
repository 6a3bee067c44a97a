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
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse
from rest_framework.test import APIClient

from ingest.api.auth import ERR_CANNOT_IMPORT, ERR_FOREIGN_TOKEN
from ingest.models import ApiToken, Build, DefectColumnMap, ImportJob, Project
from ingest.services.results import (
    ERR_CONTROL_CHARS,
    BuildMeta,
    ResultsImportError,
    results_job_create,
    results_job_run,
)
from ingest.views import ERR_MAP_EXISTS

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


def _web_import(project, build: str, **meta) -> ImportJob:
    job = results_job_create(project=project, files=[("report.xml", io.BytesIO(REPORT))],
                             meta=BuildMeta(build=build, started="2026-10-06T09:00:00Z", **meta), via="cli")
    results_job_run(job=job, refresh=False)
    job.refresh_from_db()
    return job


# ----------------------------------------------------------------------- 3: header-safe downloads, clean build ids
def test_build_download_of_a_build_id_with_a_line_break_and_quote_is_served(client, viewer, project):
    # An id stored before BuildMeta refused control characters (or written by other means) must not
    # break the download: RFC 9110 §5.5 forbids CR/LF in field values.
    job = _web_import(project, "safe-1")
    Build.objects.filter(pk=job.build_id).update(external_id='x\ny"z')
    client.force_login(viewer)
    response = client.get(reverse("build-detail", kwargs={"slug": "berthwise", "pk": job.build_id}),
                          {"download": "csv"})
    assert response.status_code == 200
    assert response["Content-Disposition"] == 'attachment; filename="berthwise-build-x-y-z.csv"'


@pytest.mark.parametrize("name", ["build", "commit", "branch", "ci_job"])
@pytest.mark.parametrize("bad", ["nightly\n7", "nightly\r7", "nightly\t7", "nightly\x007", "nightly\x857"])
def test_build_metadata_with_control_characters_is_refused_naming_the_field(name, bad):
    data = {"build": "nightly-7", name: bad}
    with pytest.raises(ResultsImportError) as caught:
        BuildMeta.from_dict(data)
    assert str(caught.value) == ERR_CONTROL_CHARS.format(field=name, value=bad)


def test_api_upload_with_a_line_break_in_the_build_id_is_400_and_stores_nothing(project):
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='ci')[1]}")
    payload = {"files": [io.BytesIO(REPORT)], "build": 'x\ny"z'}
    payload["files"][0].name = "report.xml"
    response = client.post("/api/v1/projects/berthwise/results/", payload, format="multipart")
    assert response.status_code == 400 and "'build'" in response.json()["detail"]
    assert ImportJob.objects.count() == 0


# ----------------------------------------------------------------------- 4: an unknown ?download= renders the page
@pytest.mark.parametrize("page", ["imports", "import-jobs", "build-detail"])
def test_unknown_download_value_renders_the_page(client, viewer, project, page):
    job = _web_import(project, "nightly-1")
    client.force_login(viewer)
    kwargs = {"slug": "berthwise", **({"pk": job.build_id} if page == "build-detail" else {})}
    response = client.get(reverse(page, kwargs=kwargs), {"download": "xlsx"})
    assert response.status_code == 200
    assert response["Content-Type"].startswith("text/html") and "Content-Disposition" not in response


# ----------------------------------------------------------------------- 2: only admins overwrite a saved map
DESK = {"name": "desk", "fields": {"key": "Key", "title": "Title", "created": "Created", "status": "Status"},
        "closed_statuses": ["Done"]}
MAP_FORM = {"field_key": "Key", "field_title": "Title", "field_created": "Created", "field_status": "Status",
            "closed_statuses": "Resolved", "date_format": "iso", "multi_value_delimiter": ";",
            "save_map": "1", "action": "import"}


def _map_url(client, project) -> str:
    response = client.post(reverse("defects-upload", kwargs={"slug": "berthwise"}),
                           {"file": SimpleUploadedFile("bugs.csv", EXPORT, content_type="text/csv")})
    assert response.status_code == 302
    return response["Location"]


def test_triager_cannot_overwrite_a_saved_map_from_the_mapping_page(client, triager, project):
    DefectColumnMap.objects.create(project=project, name="desk", definition=DESK)
    client.force_login(triager)
    page = client.post(_map_url(client, project), {**MAP_FORM, "map_name": "desk"})
    assert page.status_code == 200 and page.context["map_error"] == ERR_MAP_EXISTS.format(name="desk")
    assert DefectColumnMap.objects.get(name="desk").definition["closed_statuses"] == ["Done"]
    assert not ImportJob.objects.exists()


def test_triager_may_save_a_new_map_and_staff_may_overwrite(client, triager, project):
    client.force_login(triager)
    done = client.post(_map_url(client, project), {**MAP_FORM, "map_name": "desk"})
    assert done.status_code == 302
    assert DefectColumnMap.objects.get(name="desk").definition["closed_statuses"] == ["Resolved"]
    client.force_login(User.objects.create_user("ada", password="x", is_staff=True))
    done = client.post(_map_url(client, project), {**MAP_FORM, "map_name": "desk", "closed_statuses": "Done"})
    assert done.status_code == 302
    assert DefectColumnMap.objects.get(name="desk").definition["closed_statuses"] == ["Done"]
    assert ImportJob.objects.filter(kind=ImportJob.Kind.DEFECTS).count() == 2
