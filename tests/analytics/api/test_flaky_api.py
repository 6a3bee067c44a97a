"""Flaky-test API: token and session auth, filters, pagination, quarantine list as JSON and text, triage."""

from __future__ import annotations

from urllib.parse import quote

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from rest_framework.test import APIClient

from analytics.api.flaky import ERR_TOKEN_CANNOT_TRIAGE, FlakyTestOutput
from analytics.models import TestHealth, TestTriage, TriageEvent, TriageState
from analytics.services.flaky import EVIDENCE_FIELDS, flaky_scores_refresh
from analytics.services.triage import ERR_NOT_ALLOWED, QUARANTINE_WARNING, triage_set
from tests.analytics.api.clients import session_client, token_client_for
from tests.analytics.test_flaky_service_support import CLASSNAME, add_history, make_project

pytestmark = pytest.mark.django_db

FLAKY = ["P", "FP", "P", "P", "F", "P", "P", "FP", "P", "P"]


@pytest.fixture
def project():
    project = make_project()
    tests = add_history(project, {"test_flaky": FLAKY, "test_stable": ["P"] * 10, "test_broken": ["P"] * 6 + ["F"] * 4},
                        builds_per_commit=2)
    add_history(project, {"test_report_totals": ["P"] * 10}, component="Harbour-Master Reports",
                classname="harbour_reports.tests.test_totals", prefix="r")
    triage_set(test_case=tests["test_flaky"], state=TriageState.QUARANTINED, note="noisy")
    flaky_scores_refresh(project_id=project.pk)
    return project


URL = "/api/v1/projects/berthwise/"


def test_reads_need_a_token_of_this_project_or_a_session(project, token_client):
    assert APIClient().get(URL + "flaky-tests/").status_code == 401
    assert APIClient().get(URL + "quarantine/?format=txt").status_code == 401
    other = make_project("other")
    foreign = token_client_for(other)
    assert foreign.get(URL + "quarantine/").status_code == 403
    assert token_client.get(URL + "flaky-tests/").status_code == 200
    assert session_client(triager=False).get(URL + "quarantine/").status_code == 200
    assert token_client.get("/api/v1/projects/nowhere/flaky-tests/").status_code == 403  # not its project


def test_flaky_tests_rows_match_the_stored_scores(project, token_client):
    body = token_client.get(URL + "flaky-tests/").json()
    assert body["count"] == 4 and len(body["results"]) == 4
    rows = body["results"]
    assert [r["score"] for r in rows] == sorted((r["score"] for r in rows), reverse=True)
    for row in rows:
        assert set(FlakyTestOutput().fields) == set(row) and set(EVIDENCE_FIELDS) <= set(row)
        health = TestHealth.objects.get(test_case__name=row["name"])
        assert (row["verdict"], row["runs"], row["failures"]) == (health.verdict, health.runs, health.failures)
        assert row["explanation"] == health.explanation
    flaky = next(r for r in rows if r["name"] == "test_flaky")
    assert flaky["id"] == f"{CLASSNAME}::test_flaky" and flaky["triage_state"] == "quarantined"
    assert flaky["verdict"] == "flaky" and flaky["pass_on_rerun"] == 2


def test_filters_and_pagination(project, token_client):
    get = lambda query: token_client.get(URL + "flaky-tests/" + query).json()  # noqa: E731
    assert {r["name"] for r in get("?verdict=flaky")["results"]} == {"test_flaky"}
    assert {r["name"] for r in get("?verdict=broken")["results"]} == {"test_broken"}
    assert {r["name"] for r in get("?component=harbour-master%20reports")["results"]} == {"test_report_totals"}
    cut = TestHealth.objects.get(test_case__name="test_broken").score
    assert all(r["score"] >= cut for r in get(f"?min_score={cut}")["results"])
    assert get(f"?min_score={cut}")["count"] == TestHealth.objects.filter(score__gte=cut).count()
    page = get("?limit=2&offset=1")
    assert page["count"] == 4 and len(page["results"]) == 2
    assert [r["name"] for r in page["results"]] == [r["name"] for r in get("")["results"]][1:3]
    for bad, field in (("?verdict=shaky", "verdict"), ("?min_score=1.5", "min_score"), ("?min_score=x", "min_score")):
        response = token_client.get(URL + "flaky-tests/" + bad)
        assert response.status_code == 400 and field in response.json(), bad


def test_flaky_tests_query_count_does_not_grow_with_rows(project, token_client):
    def queries(query):
        with CaptureQueriesContext(connection) as ctx:
            assert token_client.get(URL + "flaky-tests/" + query).status_code == 200
        return len(ctx)

    assert queries("?limit=1") == queries("?limit=4")


def test_quarantine_list_as_json_and_as_text(project, token_client, settings):
    settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS = 5
    body = token_client.get(URL + "quarantine/").json()
    assert body["warning"] == QUARANTINE_WARNING and "hides failures" in body["warning"]
    assert body["count"] == 1 and body["id_format"] == "classname::name"
    [row] = body["tests"]
    assert row["id"] == f"{CLASSNAME}::test_flaky" and row["note"] == "noisy"
    assert row["release_suggested"] is False
    text = token_client.get(URL + "quarantine/?format=txt")
    assert text.status_code == 200 and text["Content-Type"].startswith("text/plain")
    assert text.content.decode() == f"{CLASSNAME}::test_flaky\n"
    # A second quarantined test: one id per line, in classname/name order.
    triage_set(test_case=TestHealth.objects.get(test_case__name="test_broken").test_case,
               state=TriageState.QUARANTINED)
    lines = token_client.get(URL + "quarantine/?format=txt").content.decode().splitlines()
    assert lines == [f"{CLASSNAME}::test_broken", f"{CLASSNAME}::test_flaky"]
    unauthorised = APIClient().get(URL + "quarantine/?format=txt")
    assert unauthorised.status_code == 401 and unauthorised.content.decode().strip()


def test_only_signed_in_triagers_may_change_states(project, token_client):
    ref = quote(f"{CLASSNAME}::test_stable")
    url = f"{URL}tests/{ref}/triage/"
    assert APIClient().post(url, {"state": "quarantined"}).status_code == 401
    refused = token_client.post(url, {"state": "quarantined"})
    assert refused.status_code == 403 and refused.json()["detail"] == ERR_TOKEN_CANNOT_TRIAGE
    viewer = session_client(triager=False).post(url, {"state": "quarantined"})
    assert viewer.status_code == 403 and viewer.json()["detail"] == ERR_NOT_ALLOWED
    assert not TriageEvent.objects.filter(test_case__name="test_stable").exists()

    triager = session_client(triager=True)
    done = triager.post(url, {"state": "quarantined", "note": "blocks the release train"}, format="json")
    assert done.status_code == 201, done.content
    assert done.json()["warning"] == QUARANTINE_WARNING and done.json()["by"] == "ines"
    triage = TestTriage.objects.get(test_case__name="test_stable")
    assert (triage.state, triage.note, triage.updated_by.username) == ("quarantined", "blocks the release train", "ines")
    event = TriageEvent.objects.filter(test_case__name="test_stable").get()
    assert (event.from_state, event.to_state, event.user.username) == ("unreviewed", "quarantined", "ines")
    released = triager.post(url, {"state": "not_flaky"}, format="json").json()
    assert released["from_state"] == "quarantined" and released["warning"] is None

    assert triager.post(url, {"state": "ignored"}, format="json").status_code == 400
    missing = triager.post(f"{URL}tests/{quote('io.nowhere::test_x')}/triage/", {"state": "confirmed"})
    assert missing.status_code == 404 and "io.nowhere::test_x" in missing.json()["detail"]
