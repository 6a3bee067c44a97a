"""The "Flaky tests" pages: list, filters, sorting, paging, downloads, detail, roles and triage actions."""

from __future__ import annotations

import csv
import io
import json

import pytest
from django.test import Client
from django.urls import reverse

from analytics.models import TestTriage, TriageEvent, TriageState
from analytics.services.triage import triage_set
from analytics.views.flaky import ERR_RELEASE_NOT_QUARANTINED, QUARANTINE_CAUTION
from ingest.models import Component
from tests.analytics.views.test_flaky_pages_helpers import (  # noqa: F401 (fixtures)
    XSS,
    make_build,
    make_result,
    make_test,
)

pytestmark = pytest.mark.django_db


def list_url(project) -> str:
    return reverse("flaky-list", kwargs={"slug": project.slug})


def detail_url(project, test) -> str:
    return reverse("flaky-detail", kwargs={"slug": project.slug, "test_id": test.pk})


def triage_url(project, test) -> str:
    return reverse("flaky-triage", kwargs={"slug": project.slug, "test_id": test.pk})


def names_in(response) -> list[str]:
    return [row["name"] for row in response.context["rows"]]


@pytest.fixture
def suspects(project):
    """Four scored tests in two components with different scores, verdicts and triage states."""
    ui = Component.objects.create(project=project, name="Booking UI")
    pay = Component.objects.create(project=project, name="Payments")
    tests = {
        "test_berth_map_loads": make_test(project, "test_berth_map_loads", component=ui, score=0.92, failures=9),
        "test_refund_rounding": make_test(project, "test_refund_rounding", component=pay, score=0.65, failures=3),
        "test_invoice_pdf": make_test(project, "test_invoice_pdf", component=pay, score=0.10, verdict="stable",
                                      failures=0, recent="PPPP"),
        "test_no_component": make_test(project, "test_no_component", score=0.40, verdict="stable", failures=1),
    }
    triage_set(test_case=tests["test_refund_rounding"], state=TriageState.QUARANTINED, note="seen on CI")
    triage_set(test_case=tests["test_invoice_pdf"], state=TriageState.UNREVIEWED)
    return tests


# ------------------------------------------------------------------------------------------------ auth


def test_anonymous_users_are_sent_to_login(project, suspects):
    client = Client()
    test = suspects["test_berth_map_loads"]
    for url in (list_url(project), detail_url(project, test)):
        response = client.get(url)
        assert response.status_code == 302
        assert response["Location"].startswith(reverse("login"))
    response = client.post(triage_url(project, test), {"action": "quarantine"})
    assert response.status_code == 302 and response["Location"].startswith(reverse("login"))
    assert not TriageEvent.objects.filter(test_case=test).exists()


def test_unknown_project_and_test_are_404(viewer_client, project, suspects):
    assert viewer_client.get(reverse("flaky-list", kwargs={"slug": "nope"})).status_code == 404
    missing = reverse("flaky-detail", kwargs={"slug": project.slug, "test_id": 999999})
    assert viewer_client.get(missing).status_code == 404


# ------------------------------------------------------------------------------------------------ list


def test_list_shows_best_suspects_first_with_the_caution(viewer_client, project, suspects):
    response = viewer_client.get(list_url(project))
    assert response.status_code == 200
    assert names_in(response) == ["test_berth_map_loads", "test_refund_rounding", "test_no_component",
                                  "test_invoice_pdf"]
    html = response.content.decode()
    assert QUARANTINE_CAUTION in html
    # The outcome strip is text, not colour alone: symbols plus a spoken label.
    assert 'aria-label="last 4 runs, oldest first: passed, passed, failed, passed"' in html
    assert "✗" in html


@pytest.mark.parametrize(
    ("query", "expected"),
    [
        ({"component": "payments"}, {"test_refund_rounding", "test_invoice_pdf"}),
        ({"component": "-"}, {"test_no_component"}),
        ({"verdict": "flaky"}, {"test_berth_map_loads", "test_refund_rounding"}),
        ({"triage": "quarantined"}, {"test_refund_rounding"}),
        # "not reviewed" covers tests with an unreviewed triage row and tests nobody has triaged at all.
        ({"triage": "unreviewed"}, {"test_berth_map_loads", "test_invoice_pdf", "test_no_component"}),
        ({"min_score": "0.5"}, {"test_berth_map_loads", "test_refund_rounding"}),
        ({"q": "refund"}, {"test_refund_rounding"}),
        ({"q": "test_ map"}, {"test_berth_map_loads"}),
        ({"component": "payments", "verdict": "stable"}, {"test_invoice_pdf"}),
        ({"min_score": "not a number"}, {"test_berth_map_loads", "test_refund_rounding", "test_invoice_pdf",
                                         "test_no_component"}),
        ({"triage": "bogus"}, {"test_berth_map_loads", "test_refund_rounding", "test_invoice_pdf",
                               "test_no_component"}),
    ],
)
def test_each_filter_narrows_the_table(viewer_client, project, suspects, query, expected):
    response = viewer_client.get(list_url(project), query)
    assert response.status_code == 200
    assert set(names_in(response)) == expected


def test_sorting_by_failures_both_ways(viewer_client, project, suspects):
    up = names_in(viewer_client.get(list_url(project), {"sort": "failures"}))
    down = names_in(viewer_client.get(list_url(project), {"sort": "-failures"}))
    assert up == ["test_invoice_pdf", "test_no_component", "test_refund_rounding", "test_berth_map_loads"]
    assert down == list(reversed(up))
    # An unknown sort key falls back to the default (score, descending).
    assert names_in(viewer_client.get(list_url(project), {"sort": "-password"}))[0] == "test_berth_map_loads"


def test_server_side_pagination(viewer_client, project):
    for i in range(25):
        make_test(project, f"test_slip_{i:02d}", score=1 - i / 100)
    first = viewer_client.get(list_url(project), {"per_page": 10})
    third = viewer_client.get(list_url(project), {"per_page": 10, "page": 3})
    assert names_in(first) == [f"test_slip_{i:02d}" for i in range(10)]
    assert names_in(third) == [f"test_slip_{i:02d}" for i in range(20, 25)]
    assert "Page 1 of 3" in first.content.decode()


def _csv_rows(response) -> list[list[str]]:
    body = b"".join(response.streaming_content).decode()
    return list(csv.reader(io.StringIO(body)))


def test_csv_download_has_exactly_the_filtered_rows_and_is_neutralised(viewer_client, project, suspects):
    make_test(project, "=HYPERLINK(\"http://x\")", score=0.99)
    response = viewer_client.get(list_url(project), {"download": "csv", "min_score": "0.6", "per_page": 10})
    assert response["Content-Disposition"] == 'attachment; filename="berthwise-flaky-tests.csv"'
    rows = _csv_rows(response)
    header, body = rows[0], rows[1:]
    names = [r[header.index("name")] for r in body]
    # Every filtered row (not just the first page), and nothing else.
    assert names == ["'=HYPERLINK(\"http://x\")", "test_berth_map_loads", "test_refund_rounding"]
    # OWASP "CSV Injection": a cell starting with "=" gets a leading single quote.
    assert not any(cell.startswith("=") for row in body for cell in row)


def test_json_download_matches_the_filters(viewer_client, project, suspects):
    response = viewer_client.get(list_url(project), {"download": "json", "component": "Payments"})
    data = json.loads(response.content)
    assert sorted(r["name"] for r in data) == ["test_invoice_pdf", "test_refund_rounding"]
    refund = next(r for r in data if r["name"] == "test_refund_rounding")
    assert refund["triage_state"] == "quarantined" and refund["component"] == "Payments"


def test_malicious_test_name_is_escaped_in_list_and_detail(viewer_client, project):
    test = make_test(project, XSS, classname=XSS)
    build = make_build(project, 1, external_id=XSS, commit=XSS)
    make_result(project, build, test, "failed", message=XSS)
    for url in (list_url(project), detail_url(project, test)):
        html = viewer_client.get(url).content.decode()
        assert XSS not in html
        assert "&lt;img src=x onerror=alert(1)&gt;" in html


def test_list_query_count_does_not_grow_with_rows(viewer_client, project, django_assert_num_queries):
    # Session, user, project, project switcher, user permissions, group permissions, components,
    # verdicts, row count, one page of rows, release suggestions: 11 queries whatever the number of rows.
    comp = Component.objects.create(project=project, name="Harbour office")
    for i in range(50):
        test = make_test(project, f"test_q_{i:02d}", component=comp if i % 2 else None, score=i / 50)
        if i % 3 == 0:
            triage_set(test_case=test, state=TriageState.CONFIRMED)
    for query, rows in (({"min_score": "0.9"}, 5), ({}, 50)):
        with django_assert_num_queries(11):
            response = viewer_client.get(list_url(project), query)
        assert len(response.context["rows"]) == rows


# ------------------------------------------------------------------------------------------------ detail


def test_detail_shows_history_with_reruns_evidence_and_scorer(viewer_client, project, suspects):
    test = suspects["test_berth_map_loads"]
    b1, b2 = make_build(project, 1, commit="aaa111"), make_build(project, 2, commit="bbb222")
    make_result(project, b1, test, "passed", duration=1.5)
    make_result(project, b2, test, "failed", attempt=1, duration=9.0, message="Timeout waiting for map tiles")
    make_result(project, b2, test, "passed", attempt=2, duration=1.7)
    response = viewer_client.get(detail_url(project, test))
    assert response.status_code == 200
    html = response.content.decode()
    history = response.context["history"]
    assert [h.external_id for h in history] == ["#2", "#1"]
    assert [a["outcome"] for a in history[0].attempts] == ["failed", "passed"] and history[0].reran
    assert "rerun" in html and "bbb222" in html and "Timeout waiting for map tiles" in html
    assert "Failed 9 times in 10 runs." in html  # the stored plain-words explanation
    assert "Scored by" in html and "rules" in html
    assert 'id="duration-chart"' in html
    assert QUARANTINE_CAUTION in html


def test_viewer_sees_no_triage_form_and_gets_403_on_post(viewer_client, project, suspects):
    test = suspects["test_berth_map_loads"]
    html = viewer_client.get(detail_url(project, test)).content.decode()
    assert 'id="triage-form"' not in html and triage_url(project, test) not in html
    response = viewer_client.post(triage_url(project, test), {"action": "quarantine", "note": "x"})
    assert response.status_code == 403
    assert not TestTriage.objects.filter(test_case=test).exists()
    assert not TriageEvent.objects.filter(test_case=test).exists()


def test_triager_quarantines_with_a_note_and_the_event_is_logged(triager_client, triager, project, suspects):
    test = suspects["test_berth_map_loads"]
    html = triager_client.get(detail_url(project, test)).content.decode()
    assert 'id="triage-form"' in html and "csrfmiddlewaretoken" in html
    response = triager_client.post(triage_url(project, test), {"action": "quarantine", "note": "blocks release"})
    assert response.status_code == 302 and response["Location"] == detail_url(project, test)
    assert TestTriage.objects.get(test_case=test).state == TriageState.QUARANTINED
    event = TriageEvent.objects.get(test_case=test)
    assert (event.from_state, event.to_state, event.note, event.user) == (
        TriageState.UNREVIEWED, TriageState.QUARANTINED, "blocks release", triager)
    page = triager_client.get(detail_url(project, test)).content.decode()
    assert "blocks release" in page and "Release from quarantine" in page
    # ... and the list's triage filter now finds it.
    listed = triager_client.get(list_url(project), {"triage": "quarantined"})
    assert "test_berth_map_loads" in names_in(listed)


@pytest.mark.parametrize(("action", "state"), [("confirm", TriageState.CONFIRMED),
                                               ("not_flaky", TriageState.NOT_FLAKY)])
def test_triager_confirm_and_not_flaky(triager_client, project, suspects, action, state):
    test = suspects["test_no_component"]
    triager_client.post(triage_url(project, test), {"action": action})
    assert TestTriage.objects.get(test_case=test).state == state
    assert TriageEvent.objects.filter(test_case=test, to_state=state).count() == 1


def test_release_only_from_quarantine(triager_client, project, suspects):
    free = suspects["test_berth_map_loads"]
    response = triager_client.post(triage_url(project, free), {"action": "release"}, follow=True)
    assert ERR_RELEASE_NOT_QUARANTINED in response.content.decode()
    assert not TriageEvent.objects.filter(test_case=free).exists()
    held = suspects["test_refund_rounding"]
    triager_client.post(triage_url(project, held), {"action": "release", "note": "fixed in c0ffee"})
    assert TestTriage.objects.get(test_case=held).state == TriageState.CONFIRMED
    assert TriageEvent.objects.filter(test_case=held).first().note == "fixed in c0ffee"


def test_release_suggested_after_enough_green_runs(viewer_client, project, suspects, settings):
    settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS = 5
    held = suspects["test_refund_rounding"]
    TestTriage.objects.filter(test_case=held).update(green_runs_since_quarantine=4)
    assert "Release suggested" not in viewer_client.get(detail_url(project, held)).content.decode()
    TestTriage.objects.filter(test_case=held).update(green_runs_since_quarantine=5)
    assert "Release suggested" in viewer_client.get(detail_url(project, held)).content.decode()


def test_triage_post_needs_a_csrf_token(triager, project, suspects):
    client = Client(enforce_csrf_checks=True)
    client.force_login(triager)
    test = suspects["test_berth_map_loads"]
    assert client.post(triage_url(project, test), {"action": "quarantine"}).status_code == 403
    assert not TriageEvent.objects.filter(test_case=test).exists()


def test_triage_rejects_get_and_unknown_actions(triager_client, project, suspects):
    test = suspects["test_berth_map_loads"]
    assert triager_client.get(triage_url(project, test)).status_code == 405
    triager_client.post(triage_url(project, test), {"action": "delete_everything"})
    assert not TriageEvent.objects.filter(test_case=test).exists()


def test_outcome_history_is_paged_by_build(viewer_client, project, suspects):
    test = suspects["test_invoice_pdf"]
    for n in range(1, 46):
        make_result(project, make_build(project, n), test, "passed")
    first = viewer_client.get(detail_url(project, test)).context["history"]
    last = viewer_client.get(detail_url(project, test), {"hpage": 2}).context["history"]
    assert [b.external_id for b in first][:2] == ["#45", "#44"] and len(first) == 40
    assert [b.external_id for b in last] == ["#5", "#4", "#3", "#2", "#1"]


def test_list_suggests_releasing_tests_green_for_long_enough(viewer_client, project, suspects, settings):
    settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS = 3
    held = suspects["test_refund_rounding"]
    TestTriage.objects.filter(test_case=held).update(green_runs_since_quarantine=2)
    assert 'id="release-suggestions"' not in viewer_client.get(list_url(project)).content.decode()
    TestTriage.objects.filter(test_case=held).update(green_runs_since_quarantine=3)
    html = viewer_client.get(list_url(project)).content.decode()
    assert 'id="release-suggestions"' in html and "Ready to leave quarantine (1)" in html
    assert detail_url(project, held) in html


def test_duration_chart_escapes_uploaded_strings_in_hover_text():
    import pandas as pd

    from analytics.charts.flaky import duration_figure

    runs = pd.DataFrame({"started_at": pd.to_datetime(["2026-10-05T09:00Z", "2026-10-06T09:00Z"]),
                         "build": [XSS, "#2"], "commit": ["abc", XSS], "attempt": [1, 1],
                         "outcome": ["passed", "failed"], "duration": [1.0, 2.0]})
    hover = [text for trace in duration_figure(runs).data for text in trace.hovertext]
    assert len(hover) == 2
    assert all("<img" not in text for text in hover)
    assert any("&lt;img src=x onerror=alert(1)&gt;" in text for text in hover)


def test_detail_query_count_does_not_grow_with_history(viewer_client, project, suspects):
    from django.db import connection
    from django.test.utils import CaptureQueriesContext

    test = suspects["test_berth_map_loads"]

    def queries() -> int:
        with CaptureQueriesContext(connection) as ctx:
            assert viewer_client.get(detail_url(project, test)).status_code == 200
        return len(ctx.captured_queries)

    for n in range(1, 6):
        make_result(project, make_build(project, n), test, "failed" if n % 2 else "passed", signature="k")
    few = queries()
    for n in range(6, 51):
        build = make_build(project, n)
        make_result(project, build, test, "failed", attempt=1, signature="k")
        make_result(project, build, test, "passed", attempt=2)
    assert queries() == few
