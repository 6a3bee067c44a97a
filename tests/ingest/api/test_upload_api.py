"""Upload API: token auth, 202 + job URL, 413 over the limit, the job ends done (eager in tests)."""

from __future__ import annotations

import io

import pytest
from rest_framework.test import APIClient

from ingest.models import ApiToken, ImportJob, Project, TestResult

REPORT = (b'<testsuites><testsuite name="s" tests="2" failures="1">'
          b'<testcase classname="booking.Api" name="test_a" time="0.5"/>'
          b'<testcase classname="booking.Api" name="test_b"><failure message="boom">trace</failure></testcase>'
          b"</testsuite></testsuites>")


@pytest.fixture
def project(db):
    return Project.objects.create(slug="berthwise", name="Berthwise")


@pytest.fixture
def key(project):
    return ApiToken.issue(project=project, name="ci")[1]


def upload(client, slug="berthwise", data=REPORT, **meta):
    payload = {"files": [io.BytesIO(data)], "build": "b-7", **meta}
    payload["files"][0].name = "report.xml"
    return client.post(f"/api/v1/projects/{slug}/results/", payload, format="multipart")


def test_upload_without_token_is_401(project):
    assert upload(APIClient()).status_code == 401


def test_wrong_or_foreign_token_is_refused(project, key):
    other = Project.objects.create(slug="other", name="Other")
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION="Bearer nope")
    assert upload(client).status_code == 401
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=other, name='x')[1]}")
    assert upload(client).status_code == 403


def test_upload_answers_202_and_job_ends_done(project, key, django_capture_on_commit_callbacks):
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {key}")
    with django_capture_on_commit_callbacks(execute=True):
        response = upload(client, commit="f00d", branch="main")
    assert response.status_code == 202, response.content
    job_url = response.json()["url"]
    assert response["Location"] == job_url
    body = client.get(job_url).json()
    assert body["status"] == "done" and body["counts"]["failed"] == 1 and body["build"] == "b-7"
    assert TestResult.objects.count() == 2


def test_token_is_stored_hashed(project, key):
    token = ApiToken.objects.get()
    assert key not in (token.key_hash, token.key_prefix) and token.key_hash == ApiToken.hash_key(key)


def test_upload_over_limit_is_413(project, key, settings):
    settings.BAROMETER_MAX_UPLOAD_BYTES = 100
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {key}")
    response = upload(client)
    assert response.status_code == 413
    assert "limit" in response.json()["detail"]
    assert ImportJob.objects.count() == 0


def test_broken_upload_gives_failed_job_with_reason(project, key, django_capture_on_commit_callbacks):
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {key}")
    with django_capture_on_commit_callbacks(execute=True):
        response = upload(client, data=b"<testsuite><testcase name='a'>")
    assert response.status_code == 202
    body = client.get(response.json()["url"]).json()
    assert body["status"] == "failed" and "report.xml" in body["error"]
    assert TestResult.objects.count() == 0


def test_openapi_schema_is_served(project, key):
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {key}")
    response = client.get("/api/schema/")
    assert response.status_code == 200 and b"/api/v1/projects/{slug}/results/" in response.content
