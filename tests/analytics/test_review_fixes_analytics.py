"""Regression tests for the review findings on failure causes, triage, the overview pages, charts and the
forecast API.

Races are replayed sequentially with stale objects (SQLite has no row locks): what makes them safe is that
the services re-check on fresh rows inside their transaction. Ground truth for the causes: failures raised by
the real Python interpreter (tests/analytics/test_clusters_support.py).
"""

from __future__ import annotations

import html
import re
from datetime import date, timedelta

import pandas as pd
import pytest
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Permission
from django.core.cache import cache
from django.core.exceptions import ValidationError
from django.test import Client
from django.urls import reverse
from django.utils import timezone
from rest_framework.test import APIClient

from analytics.charts.causes import trend_frame, weekly_trend_figure
from analytics.charts.overview import component_failures_chart
from analytics.models import (
    ClusterDefectLink,
    FailureCluster,
    FailureSignature,
    TestTriage,
    TriageEvent,
    TriageState,
)
from analytics.services import triage as triage_service
from analytics.services.clusters import (
    ERR_CONFIRM_MERGED,
    ERR_MERGED_ALREADY,
    cluster_defect_link_confirm,
    cluster_defect_links_refresh,
    cluster_merge,
    clusters_refresh,
)
from analytics.services.forecasts import forecasts_refresh
from analytics.services.triage import (
    ERR_STATE_CHANGED,
    TriageStateChanged,
    triage_green_runs_refresh,
    triage_set,
)
from analytics.views import flaky as flaky_views
from analytics.views.flaky import ERR_RELEASE_NOT_QUARANTINED
from analytics.views.overview import FIRST_WEEK, WEEK_OUT_OF_RANGE
from ingest.models import ApiToken, Defect, Project, TestResult
from tests.analytics import test_flaky_service_support as flaky_support
from tests.analytics.test_clusters_support import history, make_project
from tests.analytics.test_forecasts import (  # noqa: F401 (_few_origins: autouse, keeps backtests small)
    COMPONENTS,
    CUTOFF,
    HORIZON,
    _few_origins,
    quiet_rows,
    store_defects,
)
from tests.analytics.views.test_overview import (  # noqa: F401 (fixtures)
    WEEK_B,
    client_in_fixture,
    world_fixture,
)


@pytest.fixture
def triager(db):
    user = get_user_model().objects.create_user("harbour-qa", password="x")
    user.user_permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))
    return get_user_model().objects.get(pk=user.pk)


def _clusters_by_cause(project, truth) -> dict[str, FailureCluster]:
    by_key = dict(FailureSignature.objects.filter(project=project).values_list("key", "cluster_id"))
    ids: dict[str, set[int]] = {}
    for pk, key in TestResult.objects.filter(pk__in=truth).values_list("pk", "signature"):
        ids.setdefault(truth[pk], set()).add(by_key[key])
    assert all(len(v) == 1 for v in ids.values()), ids
    return {cause: FailureCluster.objects.get(pk=next(iter(v))) for cause, v in ids.items()}


@pytest.fixture
def causes(db):
    project = make_project()
    _, truth = history(project, builds=2, causes=("berth-key", "zero-capacity", "vessel-none", "slot-number"))
    clusters_refresh(project_id=project.pk)
    return project, _clusters_by_cause(project, truth)


def _visible_failures(project) -> int:
    return sum(
        FailureCluster.objects.filter(project=project, merged_into__isnull=True).values_list(
            "failures", flat=True
        )
    )


# ------------------------------------------------------------------------------------------ 1. crossed merges
def test_crossed_merge_with_stale_clusters_is_refused_and_no_failure_is_hidden(causes, triager):
    project, by_cause = causes
    total = _visible_failures(project)
    a, b = by_cause["berth-key"], by_cause["zero-capacity"]
    stale_a, stale_b = FailureCluster.objects.get(pk=a.pk), FailureCluster.objects.get(pk=b.pk)
    cluster_merge(cluster=a, into=b, user=triager)
    # The second person still sees both clusters unmerged (objects loaded before the first merge).
    assert stale_a.merged_into_id is None and stale_b.merged_into_id is None
    with pytest.raises(ValidationError) as exc:
        cluster_merge(cluster=stale_b, into=stale_a, user=triager)
    assert exc.value.messages == [ERR_MERGED_ALREADY.format(pk=a.pk, into=b.pk)]
    merged = dict(FailureCluster.objects.filter(project=project).values_list("pk", "merged_into_id"))
    assert merged[a.pk] == b.pk and merged[b.pk] is None
    assert _visible_failures(project) == total


def test_merge_chains_cannot_form_a_cycle(causes, triager):
    project, by_cause = causes
    a, b, c = by_cause["berth-key"], by_cause["zero-capacity"], by_cause["vessel-none"]
    stale_a = FailureCluster.objects.get(pk=a.pk)
    cluster_merge(cluster=a, into=b, user=triager)
    cluster_merge(cluster=b, into=c, user=triager)  # chain a -> b -> c
    for cluster, into in ((c, stale_a), (c, b), (stale_a, c)):
        with pytest.raises(ValidationError):
            cluster_merge(cluster=cluster, into=into, user=triager)
    rows = dict(FailureCluster.objects.filter(project=project).values_list("pk", "merged_into_id"))
    for start in rows:  # following merged_into from any cluster ends at an unmerged one
        seen, at = set(), start
        while rows[at] is not None:
            assert at not in seen, f"cycle through cluster #{at}"
            seen.add(at)
            at = rows[at]
    assert rows[c.pk] is None


def test_links_refresh_keeps_a_link_stored_meanwhile_instead_of_failing(causes, monkeypatch):
    project, by_cause = causes
    zero = by_cause["zero-capacity"]
    defect = Defect.objects.create(
        project=project,
        key="BW-7001",
        title="Occupancy report crashes: division by zero",
        description="ZeroDivisionError: division by zero when a pontoon has no berths.",
        created_at=timezone.now(),
    )
    manager = ClusterDefectLink.objects
    real = manager.bulk_create

    def concurrent_insert_then_bulk_create(objs, *args, **kwargs):
        # Another refresh commits the same suggestion after this one read the existing links.
        if any(o.cluster_id == zero.pk and o.defect_id == defect.pk for o in objs):
            ClusterDefectLink.objects.create(cluster=zero, defect=defect, score=0.5)
        return real(objs, *args, **kwargs)

    monkeypatch.setattr(manager, "bulk_create", concurrent_insert_then_bulk_create)
    assert cluster_defect_links_refresh(project_id=project.pk) >= 1
    assert ClusterDefectLink.objects.filter(cluster=zero, defect=defect).count() == 1


# ------------------------------------------------------------------------------------------ 2. confirm on merged
def test_confirming_a_defect_on_a_merged_cluster_is_refused(causes, triager):
    project, by_cause = causes
    a, b = by_cause["vessel-none"], by_cause["slot-number"]
    stale_a = FailureCluster.objects.get(pk=a.pk)
    defect = Defect.objects.create(
        project=project, key="BW-7002", title="Dock sensors offline", created_at=timezone.now()
    )
    cluster_merge(cluster=a, into=b, user=triager)
    with pytest.raises(ValidationError) as exc:
        cluster_defect_link_confirm(cluster=stale_a, defect=defect, user=triager)
    assert exc.value.messages == [ERR_CONFIRM_MERGED.format(pk=a.pk, into=b.pk)]
    assert not ClusterDefectLink.objects.filter(defect=defect).exists()


# ------------------------------------------------------------------------------------------ 3. triage races
@pytest.fixture
def quarantined(db):
    """A test quarantined before five green builds (ground truth: five green runs since the quarantine)."""
    project = flaky_support.make_project("berthwise-triage")
    start = timezone.now() - timedelta(days=2)
    test = flaky_support.add_history(project, {"test_pontoon_gate": ["P"] * 5}, start=start)[
        "test_pontoon_gate"
    ]
    triage_set(test_case=test, state=TriageState.QUARANTINED, note="noisy")
    TriageEvent.objects.filter(test_case=test).update(at=start - timedelta(hours=1))
    return project, test


@pytest.mark.parametrize("meanwhile", ["release", "quarantine_again"])
def test_green_run_refresh_does_not_write_a_stale_count_over_a_triage_change(
    quarantined, monkeypatch, meanwhile
):
    project, test = quarantined
    real = triage_service._quarantined_since

    def since_then_triage_change(**kwargs):
        out = real(**kwargs)
        # A person's change commits after the refresh read the quarantine times (both reset the count).
        triage_set(test_case=test, state=TriageState.CONFIRMED, note="fixed")
        if meanwhile == "quarantine_again":
            triage_set(test_case=test, state=TriageState.QUARANTINED, note="noisy again")
        return out

    monkeypatch.setattr(triage_service, "_quarantined_since", since_then_triage_change)
    triage_green_runs_refresh(project_id=project.pk)
    assert TestTriage.objects.get(test_case=test).green_runs_since_quarantine == 0


def test_green_run_refresh_still_counts_without_a_concurrent_change(quarantined):
    project, test = quarantined
    assert triage_green_runs_refresh(project_id=project.pk) == 1
    assert TestTriage.objects.get(test_case=test).green_runs_since_quarantine == 5


def test_triage_set_only_from_refuses_a_test_in_another_state(quarantined):
    _, test = quarantined
    triage_set(test_case=test, state=TriageState.CONFIRMED, note="released")
    events = TriageEvent.objects.filter(test_case=test).count()
    with pytest.raises(TriageStateChanged) as exc:
        triage_set(test_case=test, state=TriageState.CONFIRMED, only_from=TriageState.QUARANTINED)
    assert str(exc.value) == ERR_STATE_CHANGED.format(actual="confirmed", expected="quarantined")
    assert TriageEvent.objects.filter(test_case=test).count() == events


def test_release_that_someone_else_made_meanwhile_is_refused_on_the_page(quarantined, monkeypatch):
    project, test = quarantined
    user = get_user_model().objects.create_user("harbour-lead", password="x")
    user.user_permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))
    client = Client()
    client.force_login(user)
    real = flaky_views.triage_set

    def released_meanwhile(**kwargs):
        real(test_case=test, state=TriageState.CONFIRMED, note="released by a colleague")
        return real(**kwargs)

    monkeypatch.setattr(flaky_views, "triage_set", released_meanwhile)
    url = reverse("flaky-triage", kwargs={"slug": project.slug, "test_id": test.pk})
    response = client.post(url, {"action": "release", "note": "fixed"}, follow=True)
    assert ERR_RELEASE_NOT_QUARANTINED in response.content.decode()
    releases = TriageEvent.objects.filter(test_case=test, to_state=TriageState.CONFIRMED)
    assert list(releases.values_list("note", flat=True)) == ["released by a colleague"]


# ------------------------------------------------------------------------------------------ 4. ?week= out of range
@pytest.mark.parametrize("raw", ["0001-01-01", "0001-01-07", "9999-12-31", "1999-12-31"])
@pytest.mark.parametrize("page", ["overview", "rows"])
def test_a_week_outside_the_calendar_range_falls_back_to_the_default_week(client_in, world, raw, page):
    url = reverse("overview", kwargs={"slug": "berthwise"})
    if page == "rows":
        url = reverse("overview-rows", kwargs={"slug": "berthwise", "kind": "tests"})
    response = client_in.get(url, {"week": raw})
    assert response.status_code == 200
    assert response.context["scope"].week == WEEK_B  # the default: last complete week with data
    shown = [str(m) for m in response.context["messages"]]
    last = timezone.now().date() + timedelta(days=366)
    assert shown == [WEEK_OUT_OF_RANGE.format(week=raw, first=FIRST_WEEK, last=last)]


def test_the_first_accepted_week_is_still_shown(client_in, world):
    response = client_in.get(
        reverse("overview", kwargs={"slug": "berthwise"}), {"week": FIRST_WEEK.isoformat()}
    )
    assert response.status_code == 200 and response.context["scope"].week == FIRST_WEEK
    assert not list(response.context["messages"])


# ------------------------------------------------------------------------------------------ 5./6. chart labels
# plotly's hovertemplate reference: "%{variable}" in the template is replaced by the point's value, so an
# uploaded name must not become part of the template (its text is passed as customdata instead).
_PLACEHOLDER = re.compile(r"%\{[^}]*\}")


def test_component_names_are_hover_data_never_part_of_the_hover_template():
    name = "%{y} <b>x</b>"
    weeks = [date(2026, 10, 5) + timedelta(weeks=i) for i in range(2)]
    frame = pd.DataFrame(
        {"week": weeks * 2, "component": [name] * 2 + ["Payments"] * 2, "failures": [3, 4, 1, 2]}
    )
    fig = component_failures_chart(frame)
    templates = {t.hovertemplate for t in fig.data}
    assert len(templates) == 1  # one template for every component: no name is in it
    (template,) = templates
    assert _PLACEHOLDER.findall(template) == ["%{customdata}", "%{x|%d %b %Y}", "%{y:,}"]
    by_name = {t.name: t for t in fig.data}
    trace = by_name[html.escape(name)]  # the trace name is escaped (stdlib html.escape is the reference)
    assert list(trace.customdata) == [html.escape(name)] * 2
    assert "<b>" not in fig.to_json()


def test_a_long_cause_label_is_cut_before_escaping_so_no_entity_is_split():
    label = "a" * 78 + "&" + "b" * 10  # the 79th character is "&"
    fig = weekly_trend_figure(trend_frame([["2026-10-05", 3]]), label=label)
    title = fig.layout.title.text
    shown = title.split(": ", 1)[1]
    # Round trip with the stdlib html module: a split entity ("&a") would not survive it.
    assert html.escape(html.unescape(shown), quote=True) == shown
    assert html.unescape(shown) == label[:80]


# ------------------------------------------------------------------------------------------ 7. forecast API cache
@pytest.fixture
def forecast_client(db):
    project = Project.objects.create(slug="berthwise-forecasts", name="Berthwise forecasts")
    store_defects(project, quiet_rows(), component_names=COMPONENTS)
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='planner')[1]}")
    return project, client


def test_an_identical_computed_forecast_request_is_served_from_the_cache(forecast_client, monkeypatch):
    project, client = forecast_client
    cache.clear()
    calls = []
    from analytics.services import forecasts as forecasts_service

    real = forecasts_service.forecast_report

    def counting(**kwargs):
        calls.append(kwargs)
        return real(**kwargs)

    monkeypatch.setattr(forecasts_service, "forecast_report", counting)
    url = f"/api/v1/projects/{project.slug}/forecasts/"
    as_of = (CUTOFF - timedelta(weeks=1)).date().isoformat()
    first = client.get(url, {"as_of": as_of, "horizon_weeks": 2})
    second = client.get(url, {"as_of": as_of, "horizon_weeks": 2})
    assert first.status_code == second.status_code == 200
    assert first.json() == second.json() and first.json()["source"] == "computed"
    assert len(calls) == 1
    # Another horizon, another as_of, or new data is computed again.
    client.get(url, {"as_of": as_of, "horizon_weeks": 3})
    client.get(url, {"horizon_weeks": HORIZON + 2})
    assert len(calls) == 3
    store_defects(project, [("SEN-9", CUTOFF, ("Berth Sensors",))], imported=CUTOFF + timedelta(hours=1))
    client.get(url, {"as_of": as_of, "horizon_weeks": 2})
    assert len(calls) == 4
