"""Regression tests for the review findings on the ingest pages and API (one section per finding).

Outside sources: RFC 9110 status semantics (401 without credentials, 403 for credentials without the right,
202 Accepted for queued work, 413 Content Too Large); RFC 6266 / RFC 9110 §5.5 for Content-Disposition
(a field value must not contain CR or LF: common practice, and Django refuses it with BadHeaderError).
The exports and reports are invented (the marina berth-booking scenario) and are the tests' own ground truth.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest
from django.contrib.auth.models import User
from django.core.files.uploadedfile import SimpleUploadedFile
from django.core.files.uploadhandler import MemoryFileUploadHandler, TemporaryFileUploadHandler
from django.http.multipartparser import MultiPartParser
from django.urls import reverse
from rest_framework.test import APIClient

from barometer_common.uploads import RefusedUpload, UploadSizeLimitHandler, upload_refused
from ingest.api.auth import ERR_CANNOT_IMPORT, ERR_FOREIGN_TOKEN
from ingest.models import ApiToken, Build, Defect, DefectColumnMap, ImportJob, Project
from ingest.services.defects import PREVIEW_SAMPLED_WARNING, defect_export_preview
from ingest.services.results import (
    ERR_CONTROL_CHARS,
    BuildMeta,
    ResultsImportError,
    results_job_create,
    results_job_run,
)
from ingest.views import ERR_MAP_EXISTS, ERR_REQUEST_TOO_LARGE, MSG_ALREADY_QUEUED, SESSION_UPLOADS

REPORT = (b'<testsuite name="s" tests="1"><testcase classname="berthwise.Gate" name="opens" time="0.1"/>'
          b"</testsuite>")
EXPORT = b"Key,Title,Created,Status\r\nBW-1,Gate code rejected,2026-03-01T08:00:00Z,New\r\n"
CMAP = '{"name": "desk", "fields": {"key": "Key", "title": "Title", "created": "Created", "status": "Status"}}'




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


# ----------------------------------------------------------------------- 6: oversized uploads stop before the file
BIG = b"Key,Title,Created,Status\r\n" + b"BW-9,Pontoon lights flicker,2026-03-01T08:00:00Z,New\r\n" * 3000
LIMIT = 1000  # far below len(BIG) + MULTIPART_OVERHEAD_BYTES


def _multipart(boundary: str, fields: dict[str, str], file_name: str, content: bytes) -> bytes:
    """An RFC 7578 multipart/form-data body: the fields first, then one file part."""
    parts = [f'--{boundary}\r\nContent-Disposition: form-data; name="{k}"\r\n\r\n{v}\r\n'.encode()
             for k, v in fields.items()]
    parts.append(f'--{boundary}\r\nContent-Disposition: form-data; name="file"; filename="{file_name}"\r\n'
                 f"Content-Type: text/csv\r\n\r\n".encode() + content + b"\r\n")
    return b"".join(parts) + f"--{boundary}--\r\n".encode()


def test_size_handler_stops_the_parse_at_the_file_and_keeps_the_fields_before_it(settings, rf):
    settings.BAROMETER_MAX_UPLOAD_BYTES = LIMIT
    body = _multipart("b0und", {"csrfmiddlewaretoken": "tok", "map": "desk"}, "big.csv", BIG)
    stream = io.BytesIO(body)
    request = rf.post("/")
    meta = {"CONTENT_TYPE": "multipart/form-data; boundary=b0und", "CONTENT_LENGTH": str(len(body))}
    handlers = [UploadSizeLimitHandler(request), MemoryFileUploadHandler(request),
                TemporaryFileUploadHandler(request)]
    post, files = MultiPartParser(meta, stream, handlers).parse()
    assert post.get("csrfmiddlewaretoken") == "tok" and post.get("map") == "desk"
    assert not files
    assert stream.tell() < len(BIG)  # the file's bytes were not read
    assert upload_refused(request) == RefusedUpload(name="big.csv", size=len(body), limit=LIMIT)


def test_size_handler_passes_an_upload_within_the_limit(settings, rf):
    settings.BAROMETER_MAX_UPLOAD_BYTES = len(BIG)
    body = _multipart("b0und", {"map": "desk"}, "big.csv", BIG)
    request = rf.post("/")
    meta = {"CONTENT_TYPE": "multipart/form-data; boundary=b0und", "CONTENT_LENGTH": str(len(body))}
    handlers = [UploadSizeLimitHandler(request), MemoryFileUploadHandler(request)]
    _, files = MultiPartParser(meta, io.BytesIO(body), handlers).parse()
    assert files["file"].read() == BIG and upload_refused(request) is None


def test_web_defect_upload_over_the_limit_is_refused_before_the_file_is_read(client, triager, project, settings):
    assert settings.FILE_UPLOAD_HANDLERS[0] == "barometer_common.uploads.UploadSizeLimitHandler"
    settings.BAROMETER_MAX_UPLOAD_BYTES = LIMIT
    client.force_login(triager)
    response = client.post(reverse("defects-upload", kwargs={"slug": "berthwise"}),
                           {"file": SimpleUploadedFile("big.csv", BIG, content_type="text/csv")})
    assert response.status_code == 200
    assert not response.wsgi_request.FILES  # stopped at the file part, nothing streamed to a temporary file
    refused = upload_refused(response.wsgi_request)
    assert refused is not None and refused.size > len(BIG)
    assert ERR_REQUEST_TOO_LARGE.format(name="big.csv", size=refused.size, limit=LIMIT) in response.content.decode()
    assert not (Path(settings.MEDIA_ROOT) / "uploads").exists()
    assert SESSION_UPLOADS not in client.session


def test_api_upload_over_the_limit_is_still_413(project, settings):
    # RFC 9110 §15.5.14 (413 Content Too Large); ingest/api/views.py checks Content-Length first.
    settings.BAROMETER_MAX_UPLOAD_BYTES = LIMIT
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='ci')[1]}")
    payload = {"file": io.BytesIO(BIG), "column_map": CMAP}
    payload["file"].name = "big.csv"
    response = client.post("/api/v1/projects/berthwise/defects/", payload, format="multipart")
    assert response.status_code == 413 and "limit" in response.json()["detail"]
    assert ImportJob.objects.count() == 0


# ----------------------------------------------------------------------- 7: the mapping page reads a sample only
def _desk_map():
    from ingest.parsers.defects import ColumnMap

    return ColumnMap.from_dict({**DESK, "date_format": None})


def _csv_export(n: int) -> bytes:
    # Row 2 spans two physical lines (a quoted line break: RFC 4180 §2.6), row 3 has no title.
    rows = ['BW-1,"Gate code\nrejected",2026-03-01T08:00:00Z,New', "BW-2,,2026-03-02T08:00:00Z,New"]
    rows += [f"BW-{k},Pontoon light {k},2026-03-03T08:00:00Z,Done" for k in range(3, n + 1)]
    return ("Key,Title,Created,Status\r\n" + "\r\n".join(rows) + "\r\n").encode()


def test_preview_parses_only_the_sample_of_a_large_export(tmp_path, monkeypatch):
    from ingest.parsers import defects as parser

    path = tmp_path / "big.csv"
    path.write_bytes(_csv_export(60))
    read_from_upload = []
    original = parser._iter_csv

    def counting(file_path, *args, **kwargs):
        for record in original(file_path, *args, **kwargs):
            if str(file_path) == str(path):
                read_from_upload.append(record.line)
            yield record

    monkeypatch.setattr(parser, "_iter_csv", counting)
    preview = defect_export_preview(path=path, column_map=_desk_map(), limit=5, sample_rows=10)
    assert len(read_from_upload) <= 11  # the sample and the first record after it, nothing more
    assert preview["sampled"] and preview["warnings"][-1] == PREVIEW_SAMPLED_WARNING.format(rows=10)
    assert preview["date_formats"] == {"Created": "iso"}


@pytest.mark.parametrize("kind", ["csv", "jsonl", "json"])
def test_preview_of_a_sample_reads_the_first_rows_like_the_full_file(tmp_path, kind):
    from ingest.parsers.defects import defect_rows

    if kind == "csv":
        data = _csv_export(30)
    else:
        records = [{"Key": f"BW-{k}", "Title": "" if k == 2 else f"Berth {k}", "Created": "2026-03-01T08:00:00Z",
                    "Status": "New"} for k in range(1, 31)]
        data = (json.dumps(records) if kind == "json" else "\n".join(json.dumps(r) for r in records)).encode()
    path = tmp_path / f"export.{kind}"
    path.write_bytes(data)
    sampled = defect_export_preview(path=path, column_map=_desk_map(), limit=8, sample_rows=6)
    whole = defect_export_preview(path=path, column_map=_desk_map(), limit=8, sample_rows=10_000)
    assert sampled["sampled"] and not whole["sampled"]
    assert PREVIEW_SAMPLED_WARNING.format(rows=6) not in whole["warnings"]
    # The reference: the parser's own full read of the file, first rows (line numbers included).
    full = list(defect_rows(path, _desk_map()))
    first = [item.line for item in full][:6]
    assert sorted([r["line"] for r in sampled["mapped"]] + [e["line"] for e in sampled["row_errors"]]) == first
    assert sampled["rows"] == whole["rows"][:6]  # limit 8, but the sample holds 6
    assert sampled["row_errors"] == whole["row_errors"]  # the one bad row (no title) is among the first


def test_import_after_a_sampled_preview_still_reads_every_row(client, triager, project,
                                                              django_capture_on_commit_callbacks):
    from ingest.services.defects import PREVIEW_SAMPLE_ROWS

    n = PREVIEW_SAMPLE_ROWS + 5
    client.force_login(triager)
    response = client.post(reverse("defects-upload", kwargs={"slug": "berthwise"}),
                           {"file": SimpleUploadedFile("bugs.csv", _csv_export(n), content_type="text/csv")})
    map_url = response["Location"]
    page = client.get(map_url)
    assert PREVIEW_SAMPLED_WARNING.format(rows=PREVIEW_SAMPLE_ROWS) in page.content.decode()
    form = {**MAP_FORM, "closed_statuses": "Done"}
    form.pop("save_map")
    with django_capture_on_commit_callbacks(execute=True):
        done = client.post(map_url, form)
    assert done.status_code == 302
    job = ImportJob.objects.get(kind=ImportJob.Kind.DEFECTS)
    assert Defect.objects.filter(project=project).count() == n - 1  # all but BW-2 (no title)
    assert [e["line"] for e in job.row_errors] == [4]


# ----------------------------------------------------------------------- 5: a retry is queued once
def _failed_job(project) -> ImportJob:
    job = results_job_create(project=project, files=[("broken.xml", io.BytesIO(b"<testsuite><testcase name='x'>"))],
                             meta=BuildMeta(build="pr-8"), via="cli")
    with pytest.raises(ResultsImportError):
        results_job_run(job=job, refresh=False)
    job.refresh_from_db()
    assert job.status == ImportJob.Status.FAILED
    return job


def test_two_quick_retries_queue_the_import_once(client, triager, project, monkeypatch,
                                                 django_capture_on_commit_callbacks):
    job = _failed_job(project)
    queued = []
    monkeypatch.setattr("ingest.views.job_enqueue", lambda j: queued.append(j.pk) or True)
    client.force_login(triager)
    url = reverse("import-job-retry", kwargs={"slug": "berthwise", "pk": job.pk})
    with django_capture_on_commit_callbacks(execute=True):
        client.post(url)
        client.post(url)  # sent before the first one's task started
    assert queued == [job.pk]


def test_a_retry_that_loses_the_race_says_already_queued(client, triager, project, monkeypatch):
    job = _failed_job(project)
    stale = ImportJob.objects.get(pk=job.pk)  # what the second request read, before the first one's UPDATE
    queued = []
    monkeypatch.setattr("ingest.views.job_enqueue", lambda j: queued.append(j.pk) or True)
    client.force_login(triager)
    url = reverse("import-job-retry", kwargs={"slug": "berthwise", "pk": job.pk})
    client.post(url)
    monkeypatch.setattr("ingest.views.get_object_or_404", lambda *a, **kw: stale)
    response = client.post(url, follow=True)
    assert MSG_ALREADY_QUEUED.format(pk=job.pk) in response.content.decode()
    assert ImportJob.objects.get(pk=job.pk).status == ImportJob.Status.QUEUED


def test_a_retry_the_broker_refuses_is_left_to_the_sweep(client, triager, project, monkeypatch,
                                                        django_capture_on_commit_callbacks):
    job = _failed_job(project)
    monkeypatch.setattr("ingest.views.job_enqueue", lambda j: False)
    client.force_login(triager)
    with django_capture_on_commit_callbacks(execute=True):
        client.post(reverse("import-job-retry", kwargs={"slug": "berthwise", "pk": job.pk}))
    job.refresh_from_db()
    # queued and never handed to a broker: exactly what sweep_unqueued_imports picks up
    assert job.status == ImportJob.Status.QUEUED and job.enqueued_at is None
