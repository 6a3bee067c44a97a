"""The "This week" page and the rows behind its figures, with the Django test client.

The data is built here, so the expected numbers follow from the construction (two weeks, three tests, a few
defects). Pass rate = passed ÷ (runs − skipped): common practice (skipped runs say nothing about quality).
"""

from __future__ import annotations

import csv
import io
from datetime import UTC, date, datetime, timedelta

import pytest
from django.urls import reverse

from analytics.models import TestHealth
from analytics.services.growth import runtime_growth_refresh
from analytics.views.overview import NO_PROJECT_TEXT
from ingest.models import Build, Component, Defect, Project, TestCase, TestResult
from ingest.services.results import rollup_rebuild

XSS = "<img src=x onerror=alert(1)>"
WEEK_A = date(2026, 10, 5)  # Monday
WEEK_B = date(2026, 10, 12)  # Monday; the last complete week with data (today is later)


@pytest.fixture(name="client_in")
def client_in_fixture(client, viewer):
    client.force_login(viewer)
    return client


def _build(project, n: int, week: date) -> Build:
    started = datetime.combine(week, datetime.min.time(), tzinfo=UTC) + timedelta(days=1, hours=n)
    return Build.objects.create(project=project, external_id=f"b{n}", commit=f"c{n}", started_at=started)


def _result(project, build, test, outcome, duration=1.0, attempt=1):
    TestResult.objects.create(project=project, build=build, test_case=test, outcome=outcome, duration=duration,
                              attempt=attempt)


@pytest.fixture(name="world")
def world_fixture(db):
    """Week A: ``fixes`` fails, ``breaks`` passes. Week B: ``fixes`` passes, ``breaks`` fails (twice, one a rerun).
    ``steady`` passes both weeks and is skipped once in B. ``slow`` (component Payments) gets slower."""
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    bookings = Component.objects.create(project=project, name="Booking API")
    payments = Component.objects.create(project=project, name="Payments")
    fixes = TestCase.objects.create(project=project, classname="io.bw.Book", name="test_fixes", component=bookings)
    breaks = TestCase.objects.create(project=project, classname="io.bw.Book", name="test_breaks", component=bookings)
    steady = TestCase.objects.create(project=project, classname="io.bw.Book", name="test_steady", component=bookings)
    slow = TestCase.objects.create(project=project, classname="io.bw.Pay", name=XSS, component=payments)
    a1, a2 = _build(project, 1, WEEK_A), _build(project, 2, WEEK_A)
    b1, b2 = _build(project, 3, WEEK_B), _build(project, 4, WEEK_B)
    for build in (a1, a2):
        _result(project, build, fixes, "failed")
        _result(project, build, breaks, "passed")
        _result(project, build, steady, "passed")
        _result(project, build, slow, "passed", duration=2.0)
    for build in (b1, b2):
        _result(project, build, fixes, "passed")
        _result(project, build, slow, "passed", duration=5.0)
    _result(project, b1, breaks, "failed")
    _result(project, b1, breaks, "error", attempt=2)
    _result(project, b2, breaks, "passed")
    _result(project, b1, steady, "passed")
    _result(project, b2, steady, "skipped")
    early = _build(project, 0, WEEK_A - timedelta(weeks=4))  # before the growth chart's recent window
    _result(project, early, slow, "passed", duration=1.0)
    rollup_rebuild(project=project)
    runtime_growth_refresh(project_id=project.pk)  # as the analytics refresh does
    TestHealth.objects.create(test_case=breaks, project=project, score=0.9, verdict="flaky", scored_by="rules",
                              computed_at=datetime(2026, 10, 18, tzinfo=UTC))
    TestHealth.objects.create(test_case=steady, project=project, score=0.1, verdict="stable", scored_by="rules",
                              computed_at=datetime(2026, 10, 18, tzinfo=UTC))
    at = datetime(2026, 10, 13, 10, tzinfo=UTC)
    Defect.objects.create(project=project, key="BW-1", title="=HYPERLINK(\"x\")", created_at=at)
    Defect.objects.create(project=project, key="BW-2", title="closed in B", created_at=at - timedelta(days=20),
                          resolved_at=at, is_closed=True)
    Defect.objects.create(project=project, key="BW-3", title="opened in A", created_at=at - timedelta(days=7))
    Defect.objects.get(key="BW-3").components.add(payments)
    return {"project": project, "bookings": bookings, "payments": payments, "fixes": fixes, "breaks": breaks,
            "steady": steady, "slow": slow}


def _url(name="overview", **kw):
    return reverse(name, kwargs={"slug": "berthwise", **kw})


def _figures(response) -> dict:
    return {f.key: f for f in response.context["figures"]}


# --------------------------------------------------------------------------------------------------- auth
@pytest.mark.django_db
@pytest.mark.parametrize("path", ["/", "/p/berthwise/", "/p/berthwise/rows/tests/"])
def test_anonymous_people_are_sent_to_the_login_page(client, world, path):
    response = client.get(path)
    assert response.status_code == 302
    assert response["Location"].startswith(reverse("login") + "?next=")


def test_root_sends_a_signed_in_person_to_the_first_or_the_chosen_project(client_in, world):
    Project.objects.create(slug="aaa-first", name="Anchorage")  # sorts first by name
    assert client_in.get("/")["Location"] == reverse("overview", kwargs={"slug": "aaa-first"})
    assert client_in.get("/?project=berthwise")["Location"] == _url()
    # an unknown slug from the switcher falls back to the first project instead of failing
    assert client_in.get("/?project=nope")["Location"] == reverse("overview", kwargs={"slug": "aaa-first"})


def test_root_without_projects_says_what_to_do(client_in):
    response = client_in.get("/")
    assert response.status_code == 200
    assert NO_PROJECT_TEXT.split(".")[0] in response.content.decode()


def test_login_page_renders_and_signs_in(client, viewer):
    page = client.get(reverse("login"))
    assert page.status_code == 200 and b'name="username"' in page.content
    response = client.post(reverse("login"), {"username": "vera", "password": "pw-vera"})
    assert response.status_code == 302
    wrong = client.post(reverse("login"), {"username": "vera", "password": "nope"})
    assert wrong.status_code == 200 and b"do not match" in wrong.content


# --------------------------------------------------------------------------------------------------- figures
def test_default_week_is_the_last_complete_week_and_figures_follow_the_construction(client_in, world):
    response = client_in.get(_url())
    assert response.status_code == 200
    assert response.context["scope"].week == WEEK_B
    figures = _figures(response)
    # week B: runs 2 fixes + 2 slow + 3 breaks + 2 steady = 9, 1 skipped, passed 2+2+1+1 = 6 → 6 / 8
    assert figures["pass-rate"].value == "75.0 %"
    # week A: 8 runs, passed 6, no skips → 75 % too
    assert figures["pass-rate"].change == "no change on the previous week"
    assert figures["failed-runs"].value == "2"  # one failure and one error (a rerun) of test_breaks
    assert figures["failed-runs"].tone == "same"  # week A: test_fixes failed in both builds, 2 as well
    assert figures["newly-failing"].value == "1"
    assert figures["fixed"].value == "1"
    assert figures["tests"].value == "4"
    assert figures["flaky-share"].value == "50.0 %"  # 1 flaky of 2 scored tests
    assert figures["defects-opened"].value == "1"  # BW-1 on 13 Oct
    assert figures["defects-closed"].value == "1"  # BW-2 on 13 Oct
    # backlog at the end of week B: BW-1 and BW-3 open; at the end of week A: BW-2 and BW-3
    assert figures["backlog"].value == "2"
    assert "no change" in figures["backlog"].change


def test_changes_are_written_in_words_not_only_colour(client_in, world):
    figures = _figures(client_in.get(_url(), {"week": WEEK_B.isoformat()}))
    # defects opened: 1 in B against 1 (BW-3) in A
    assert figures["defects-opened"].change == "no change on the previous week"
    # test time: A = 4 × (3 × 1 s) ... computed from the construction: A: 6 × 1 s + 2 × 2 s = 10 s;
    # B: 2 + 3 + 2 s + 2 × 5 s = 17 s → up, and more time is worse
    assert figures["test-time"].tone == "worse" and "up" in figures["test-time"].change
    assert "(worse)" in figures["test-time"].change


def test_a_week_in_the_middle_of_a_week_is_read_as_its_monday(client_in, world):
    response = client_in.get(_url(), {"week": (WEEK_A + timedelta(days=3)).isoformat()})
    assert response.context["scope"].week == WEEK_A
    assert _figures(response)["failed-runs"].value == "2"  # test_fixes failed in both builds of week A


def test_a_bad_week_falls_back_to_the_default(client_in, world):
    assert client_in.get(_url(), {"week": "last tuesday"}).context["scope"].week == WEEK_B


def test_component_filter_narrows_every_figure(client_in, world):
    payments = world["payments"]
    response = client_in.get(_url(), {"week": WEEK_B.isoformat(), "component": payments.pk})
    figures = _figures(response)
    assert response.context["component"] == payments
    assert figures["tests"].value == "1"
    assert figures["failed-runs"].value == "0"
    assert figures["pass-rate"].value == "100.0 %"
    assert figures["defects-opened"].value == "0"
    assert figures["backlog"].value == "1"  # BW-3 is the only Payments defect
    assert figures["flaky-share"].value == "—"  # no scored Payments test


def test_unknown_component_is_ignored(client_in, world):
    response = client_in.get(_url(), {"component": "999999"})
    assert response.context["component"] is None


def test_every_chart_is_on_the_page_and_uploaded_names_are_escaped(client_in, world):
    body = client_in.get(_url(), {"week": WEEK_B.isoformat()}).content.decode()
    for chart_id in ("pass-rate-chart", "component-failures-chart", "defect-flow-chart", "duration-growth-chart"):
        assert f'id="{chart_id}"' in body
    assert XSS not in body
    assert "&lt;img src=x onerror=alert(1)&gt;" in body  # the slow test's name, in the growth chart


def test_figures_link_to_the_rows_behind_them(client_in, world):
    figures = _figures(client_in.get(_url(), {"week": WEEK_B.isoformat()}))
    newly = client_in.get(figures["newly-failing"].href)
    assert [r["name"] for r in newly.context["rows"]] == ["test_breaks"]
    fixed = client_in.get(figures["fixed"].href)
    assert [r["name"] for r in fixed.context["rows"]] == ["test_fixes"]
    opened = client_in.get(figures["defects-opened"].href)
    assert [r["key"] for r in opened.context["rows"]] == ["BW-1"]
    backlog = client_in.get(figures["backlog"].href)
    assert sorted(r["key"] for r in backlog.context["rows"]) == ["BW-1", "BW-3"]


def test_empty_project_explains_instead_of_failing(client_in, db):
    Project.objects.create(slug="empty", name="Empty")
    response = client_in.get(reverse("overview", kwargs={"slug": "empty"}))
    assert response.status_code == 200 and b"No builds have been imported" in response.content


def test_unknown_project_is_404(client_in, world):
    assert client_in.get(reverse("overview", kwargs={"slug": "nope"})).status_code == 404


# --------------------------------------------------------------------------------------------------- rows
def test_rows_sorting_and_paging(client_in, world):
    url = _url("overview-rows", kind="tests")
    by_time = client_in.get(url, {"week": WEEK_B.isoformat(), "sort": "-seconds"}).context["rows"]
    assert by_time[0]["name"] == XSS  # 10 s in week B, the slowest
    by_name = client_in.get(url, {"week": WEEK_B.isoformat(), "sort": "name"}).context["rows"]
    assert [r["name"] for r in by_name] == sorted(r["name"] for r in by_name)
    paged = client_in.get(url, {"week": WEEK_B.isoformat(), "sort": "name", "per_page": 10})
    assert paged.context["page_obj"].paginator.count == 4


def test_rows_download_csv_neutralises_formulas(client_in, world):
    response = client_in.get(_url("overview-rows", kind="defects-opened"),
                             {"week": WEEK_B.isoformat(), "download": "csv"})
    text = b"".join(response.streaming_content).decode()
    rows = list(csv.DictReader(io.StringIO(text)))
    assert [r["key"] for r in rows] == ["BW-1"]
    # OWASP CSV injection guidance: a cell starting with "=" is prefixed so spreadsheets show it as text
    assert rows[0]["title"].startswith("'=")


def test_rows_download_json_has_exactly_the_filtered_rows(client_in, world):
    response = client_in.get(_url("overview-rows", kind="tests"),
                             {"week": WEEK_B.isoformat(), "component": world["payments"].pk, "download": "json"})
    assert [r["name"] for r in response.json()] == [XSS]


def test_unknown_row_kind_is_404(client_in, world):
    assert client_in.get(_url("overview-rows", kind="secrets")).status_code == 404


def test_rows_escape_uploaded_names(client_in, world):
    body = client_in.get(_url("overview-rows", kind="tests"), {"week": WEEK_B.isoformat()}).content.decode()
    assert XSS not in body and "&lt;img src=x onerror=alert(1)&gt;" in body


# --------------------------------------------------------------------------------------------------- queries
def _more_history(world, weeks: int, tests: int) -> None:
    """More tests and weeks: the page must not need more queries for them."""
    project = world["project"]
    extra = [TestCase.objects.create(project=project, classname="io.bw.More", name=f"t{i}",
                                     component=world["bookings"]) for i in range(tests)]
    for w in range(weeks):
        build = _build(project, 100 + w, WEEK_A - timedelta(weeks=w + 1))
        for test in extra:
            _result(project, build, test, "failed" if w % 2 else "passed")
    rollup_rebuild(project=project)
    runtime_growth_refresh(project_id=project.pk)


OVERVIEW_QUERIES = 19  # session, user, 2 permission checks, project, 13 rollup reads, project switcher


def test_overview_query_count_is_pinned_and_does_not_grow_with_history(client_in, world,
                                                                       django_assert_num_queries):
    url = _url()
    client_in.get(url)  # warm the session and the user
    with django_assert_num_queries(OVERVIEW_QUERIES):
        client_in.get(url, {"week": WEEK_B.isoformat()})
    _more_history(world, weeks=6, tests=12)
    with django_assert_num_queries(OVERVIEW_QUERIES):
        client_in.get(url, {"week": WEEK_B.isoformat()})
    with django_assert_num_queries(OVERVIEW_QUERIES):
        client_in.get(url, {"week": WEEK_B.isoformat(), "component": world["bookings"].pk})


def test_flaky_share_links_to_the_flaky_list_with_the_same_component(client_in, world):
    from urllib.parse import parse_qs, urlsplit

    try:
        flaky_list = reverse("flaky-list", kwargs={"slug": "berthwise"})
    except Exception:  # noqa: BLE001 - the flaky pages belong to another part of the dashboard
        pytest.skip("the flaky-tests pages are not mounted")
    figures = _figures(client_in.get(_url(), {"week": WEEK_B.isoformat(), "component": world["bookings"].pk}))
    href = figures["flaky-share"].href
    parts = urlsplit(href)
    assert parts.path == flaky_list
    assert parse_qs(parts.query) == {"verdict": ["flaky"], "component": ["Booking API"]}
    listed = client_in.get(href)
    assert listed.status_code == 200 and b"test_breaks" in listed.content and b"test_steady" not in listed.content
