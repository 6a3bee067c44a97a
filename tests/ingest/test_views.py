"""The "Builds & imports" pages with the Django test client: builds and results, jobs, progress, retry, and the
defect upload (file → preview → mapping → import). Roles: viewers read; triagers and admins retry and upload.

Result counts come from tests/fixtures/junit/failure_variants.xml, whose expected outcomes are stated in that
file's testsuite attributes (8 tests: 3 failures, 2 errors, 2 skipped; the JUnit/Surefire reading of
failure/error/skipped elements: the Surefire test-report schema, /work/shared/REFERENCES.md §8).
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest
from django.core.cache import cache
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from ingest.models import Build, Defect, DefectColumnMap, ImportJob, Project
from ingest.services.results import (
    BuildMeta,
    ResultsImportError,
    progress_cache_key,
    results_job_create,
    results_job_run,
)
from ingest.views import ERR_NO_FILE, ERR_NOT_RETRYABLE, MSG_RETRIED, SESSION_UPLOADS

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures" / "junit"
XSS = "<img src=x onerror=alert(1)>"
XSS_ESCAPED = "&lt;img src=x onerror=alert(1)&gt;"
XSS_REPORT = f"""<?xml version="1.0" encoding="UTF-8"?>
<testsuite name="berthwise.xss" tests="2" failures="1" errors="0" skipped="0">
  <testcase classname="berthwise.xss" name="{XSS.replace('<', '&lt;').replace('>', '&gt;')}">
    <failure message="{XSS.replace('<', '&lt;').replace('>', '&gt;')}">boom</failure></testcase>
  <testcase classname="berthwise.xss" name="passes"/>
</testsuite>
""".encode()
DEFECTS_CSV = (
    "Key,Title,Created,Status\n"
    f"BW-1,\"{XSS}\",2026-10-01T10:00:00Z,New\n"
    "BW-2,Gate code fails at night,2026-10-02T10:00:00Z,Done\n"
    "BW-3,,2026-10-03T10:00:00Z,New\n"
).encode()




def _import(project, data: bytes, name: str, build: str, **meta) -> ImportJob:
    job = results_job_create(project=project, files=[(name, io.BytesIO(data))],
                             meta=BuildMeta(build=build, started="2026-10-06T09:00:00Z", **meta), via="cli")
    try:
        results_job_run(job=job, refresh=False)
    except ResultsImportError:
        pass
    job.refresh_from_db()
    return job


@pytest.fixture(name="imported")
def imported_fixture(project):
    variants = _import(project, (FIXTURES / "failure_variants.xml").read_bytes(), "failure_variants.xml",
                       "nightly-1", branch="main", commit="abc123")
    xss = _import(project, XSS_REPORT, "xss.xml", "pr-7", branch="feature/berths", commit="def456")
    broken = _import(project, b"<testsuite><testcase name='x'>", "broken.xml", "pr-8", branch="feature/berths")
    return {"variants": variants, "xss": xss, "broken": broken}


def _url(name, **kw):
    return reverse(name, kwargs={"slug": "berthwise", **kw})


# --------------------------------------------------------------------------------------------------- access
@pytest.mark.django_db
@pytest.mark.parametrize("name", ["imports", "import-jobs", "defects-upload"])
def test_anonymous_people_are_sent_to_login(client, project, name):
    response = client.get(_url(name))
    assert response.status_code == 302 and response["Location"].startswith(reverse("login"))


def test_anonymous_status_poll_is_sent_to_login(client, imported):
    response = client.get(_url("import-job-status", pk=imported["variants"].pk))
    assert response.status_code == 302


# --------------------------------------------------------------------------------------------------- builds
def test_builds_list_shows_outcome_counts_of_each_build(client, viewer, imported):
    client.force_login(viewer)
    response = client.get(_url("imports"))
    assert response.status_code == 200
    rows = {r["build"].external_id: r for r in response.context["rows"]}
    assert set(rows) == {"nightly-1", "pr-7"}  # the broken upload created no build
    # failure_variants.xml's own header: tests=8 failures=3 errors=2 skipped=2
    assert (rows["nightly-1"]["tests"], rows["nightly-1"]["failed"], rows["nightly-1"]["errors"],
            rows["nightly-1"]["skipped"], rows["nightly-1"]["passed"]) == (8, 3, 2, 2, 1)
    assert not response.context["can_import"]


@pytest.mark.parametrize(
    ("params", "expected"),
    [({"branch": "main"}, ["nightly-1"]), ({"q": "pr-"}, ["pr-7"]), ({"q": "abc"}, ["nightly-1"]),
     ({"week": "2026-10-05"}, ["nightly-1", "pr-7"]), ({"week": "2026-10-12"}, []), ({"week": "soon"}, [])],
)
def test_builds_filters(client, viewer, imported, params, expected):
    client.force_login(viewer)
    rows = client.get(_url("imports"), params).context["rows"]
    assert sorted(r["build"].external_id for r in rows) == expected


def test_builds_download_is_the_filtered_rows(client, viewer, imported):
    client.force_login(viewer)
    response = client.get(_url("imports"), {"branch": "main", "download": "csv"})
    rows = list(csv.DictReader(io.StringIO(b"".join(response.streaming_content).decode())))
    assert [r["external_id"] for r in rows] == ["nightly-1"]


def test_build_detail_lists_results_filters_and_escapes(client, viewer, imported):
    client.force_login(viewer)
    build = Build.objects.get(external_id="pr-7")
    response = client.get(_url("build-detail", pk=build.pk))
    body = response.content.decode()
    assert response.status_code == 200 and XSS not in body and XSS_ESCAPED in body
    failing = client.get(_url("build-detail", pk=build.pk), {"outcome": "failing"})
    assert [r.test_case.name for r in failing.context["page_obj"]] == [XSS]
    named = client.get(_url("build-detail", pk=Build.objects.get(external_id="nightly-1").pk), {"q": "skipped"})
    assert sorted(r.test_case.name for r in named.context["page_obj"]) == ["skipped_bare", "skipped_with_message"]


def test_build_detail_download_json(client, viewer, imported):
    client.force_login(viewer)
    build = Build.objects.get(external_id="nightly-1")
    data = client.get(_url("build-detail", pk=build.pk), {"outcome": "error", "download": "json"}).json()
    assert sorted(r["name"] for r in data) == ["error_cdata", "error_only_type"]


def test_build_of_another_project_is_404(client, viewer, imported):
    other = Project.objects.create(slug="other", name="Other")
    client.force_login(viewer)
    build = Build.objects.get(external_id="nightly-1")
    assert client.get(reverse("build-detail", kwargs={"slug": other.slug, "pk": build.pk})).status_code == 404


# --------------------------------------------------------------------------------------------------- jobs
def test_job_pages_show_errors_and_filter(client, viewer, imported):
    client.force_login(viewer)
    broken = imported["broken"]
    assert broken.status == ImportJob.Status.FAILED and broken.error
    page = client.get(_url("import-job", pk=broken.pk))
    assert page.status_code == 200 and broken.error in page.content.decode()
    assert b"Triagers and admins can retry" in page.content  # a viewer sees no retry button
    failed = client.get(_url("import-jobs"), {"status": "failed"}).context["jobs"]
    assert [j["id"] for j in failed] == [broken.pk]


def test_status_json_reports_live_progress_from_the_cache(client, viewer, imported):
    client.force_login(viewer)
    job = imported["variants"]
    ImportJob.objects.filter(pk=job.pk).update(status=ImportJob.Status.RUNNING)
    cache.set(progress_cache_key(job.pk), 0.4)
    data = client.get(_url("import-job-status", pk=job.pk)).json()
    assert (data["status"], data["progress"]) == ("running", 0.4)
    ImportJob.objects.filter(pk=job.pk).update(status=ImportJob.Status.DONE, progress=1.0)
    data = client.get(_url("import-job-status", pk=job.pk)).json()
    assert (data["status"], data["progress"]) == ("done", 1.0)


def test_viewer_cannot_retry(client, viewer, imported):
    client.force_login(viewer)
    response = client.post(_url("import-job-retry", pk=imported["broken"].pk))
    assert response.status_code == 403
    assert ImportJob.objects.get(pk=imported["broken"].pk).attempts == 1


def test_triager_retries_a_failed_import(client, triager, imported, django_capture_on_commit_callbacks):
    client.force_login(triager)
    broken = imported["broken"]
    with django_capture_on_commit_callbacks(execute=True):
        response = client.post(_url("import-job-retry", pk=broken.pk), follow=True)
    broken.refresh_from_db()
    assert broken.attempts == 2  # it ran again (the stored file is still broken, so it failed again)
    assert broken.status == ImportJob.Status.FAILED and broken.error
    assert MSG_RETRIED.format(pk=broken.pk) in response.content.decode()


def test_a_finished_import_is_not_retried(client, triager, imported):
    client.force_login(triager)
    done = imported["variants"]
    response = client.post(_url("import-job-retry", pk=done.pk), follow=True)
    assert ERR_NOT_RETRYABLE.format(status="done") in response.content.decode()
    assert ImportJob.objects.get(pk=done.pk).attempts == 1


def test_retry_needs_post(client, triager, imported):
    client.force_login(triager)
    assert client.get(_url("import-job-retry", pk=imported["broken"].pk)).status_code == 405


# --------------------------------------------------------------------------------------------------- defects
def test_viewer_cannot_upload_defects(client, viewer, project):
    client.force_login(viewer)
    assert client.get(_url("defects-upload")).status_code == 403
    upload = SimpleUploadedFile("bugs.csv", DEFECTS_CSV, content_type="text/csv")
    assert client.post(_url("defects-upload"), {"file": upload}).status_code == 403


def test_upload_without_a_file_says_so(client, triager, project):
    client.force_login(triager)
    response = client.post(_url("defects-upload"), {})
    assert response.status_code == 200 and ERR_NO_FILE in response.content.decode()


def test_defect_upload_preview_mapping_and_import(client, triager, project, django_capture_on_commit_callbacks):
    client.force_login(triager)
    upload = SimpleUploadedFile("bugs.csv", DEFECTS_CSV, content_type="text/csv")
    response = client.post(_url("defects-upload"), {"file": upload})
    assert response.status_code == 302
    map_url = response["Location"]
    page = client.get(map_url)
    body = page.content.decode()
    # step 2: the first rows as uploaded, escaped; the guessed mapping found key, title, created, status
    assert page.context["raw"]["columns"] == ["Key", "Title", "Created", "Status"]
    assert XSS not in body and XSS_ESCAPED in body
    guessed = {row["field"]: row["column"] for row in page.context["field_rows"]}
    assert (guessed["key"], guessed["title"], guessed["created"], guessed["status"]) == (
        "Key", "Title", "Created", "Status")
    form = {"field_key": "Key", "field_title": "Title", "field_created": "Created", "field_status": "Status",
            "closed_statuses": "Done", "date_format": "iso", "multi_value_delimiter": ";",
            "map_name": "desk export", "save_map": "1"}
    preview = client.post(map_url, {**form, "action": "preview"})
    assert [r["key"] for r in preview.context["preview"]["mapped"]] == ["BW-1", "BW-2"]
    assert [e["line"] for e in preview.context["preview"]["row_errors"]] == [4]  # BW-3 has no title
    with django_capture_on_commit_callbacks(execute=True):
        done = client.post(map_url, {**form, "action": "import"})
    job = ImportJob.objects.get(kind=ImportJob.Kind.DEFECTS)
    assert done["Location"] == _url("import-job", pk=job.pk)
    job.refresh_from_db()
    assert job.status == ImportJob.Status.DONE and job.created_via == "web" and job.created_by == triager
    assert sorted(Defect.objects.values_list("key", flat=True)) == ["BW-1", "BW-2"]
    assert Defect.objects.get(key="BW-2").is_closed
    assert [e["line"] for e in job.row_errors] == [4]  # nothing lost: the rejected row is on the job
    assert DefectColumnMap.objects.filter(project=project, name="desk export").exists()
    detail = client.get(_url("import-job", pk=job.pk)).content.decode()
    assert XSS not in detail


def test_saved_mapping_is_offered_and_applied(client, triager, project):
    client.force_login(triager)
    DefectColumnMap.objects.create(project=project, name="desk", definition={
        "name": "desk", "fields": {"key": "Key", "title": "Title", "created": "Created"}})
    upload = SimpleUploadedFile("bugs.csv", DEFECTS_CSV, content_type="text/csv")
    response = client.post(_url("defects-upload"), {"file": upload, "map": "desk"})
    page = client.get(response["Location"])
    assert page.context["definition"]["name"] == "desk"
    assert [r["key"] for r in page.context["preview"]["mapped"]] == ["BW-1", "BW-2"]


def test_a_mapping_without_required_fields_is_explained(client, triager, project):
    client.force_login(triager)
    response = client.post(_url("defects-upload"), {"file": SimpleUploadedFile("b.csv", DEFECTS_CSV)})
    page = client.post(response["Location"], {"field_key": "Key", "action": "import"})
    assert page.status_code == 200 and "required field" in page.context["map_error"]
    assert not ImportJob.objects.exists()


def test_map_page_of_an_upload_not_in_the_session_is_404(client, triager, project):
    client.force_login(triager)
    assert client.get(_url("defects-map", sha="0" * 64)).status_code == 404
    session = client.session
    assert SESSION_UPLOADS not in session


IMPORTS_QUERIES = 11  # session, user, project, 2 permission reads, count, builds, their jobs, latest jobs, branches, switcher


def test_imports_page_query_count_does_not_grow_with_builds(client, triager, imported, django_assert_num_queries):
    client.force_login(triager)
    client.get(_url("imports"))
    with django_assert_num_queries(IMPORTS_QUERIES):
        client.get(_url("imports"))
    for n in range(5):
        _import(imported["variants"].project, (FIXTURES / "failure_variants.xml").read_bytes(),
                f"again-{n}.xml", f"extra-{n}")
    with django_assert_num_queries(IMPORTS_QUERIES):
        client.get(_url("imports"))


def test_an_upload_over_the_limit_is_refused_with_its_size(client, triager, project, settings):
    from ingest.views import ERR_TOO_LARGE

    settings.BAROMETER_MAX_UPLOAD_BYTES = 10
    client.force_login(triager)
    response = client.post(_url("defects-upload"), {"file": SimpleUploadedFile("big.csv", DEFECTS_CSV)})
    expected = ERR_TOO_LARGE.format(name="big.csv", size=len(DEFECTS_CSV), limit=10)
    assert response.status_code == 200 and expected in response.content.decode()


def test_job_list_filters_by_kind_and_downloads_the_filtered_rows(client, viewer, imported):
    client.force_login(viewer)
    jobs = client.get(_url("import-jobs"), {"kind": "defects"}).context["jobs"]
    assert jobs == []
    results = client.get(_url("import-jobs"), {"kind": "results", "status": "done"}).context["jobs"]
    assert sorted(j["id"] for j in results) == sorted([imported["variants"].pk, imported["xss"].pk])
    data = client.get(_url("import-jobs"), {"status": "failed", "download": "json"}).json()
    assert [row["id"] for row in data] == [imported["broken"].pk]
