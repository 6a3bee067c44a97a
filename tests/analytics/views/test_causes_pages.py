"""The "Failure causes" pages: list, filters, sorting, paging, downloads, cluster page, roles and actions."""

from __future__ import annotations

import csv
import io
import json
from datetime import timedelta

import pytest
from django.test import Client
from django.urls import reverse
from django.utils import timezone

from analytics.models import ClusterDefectLink, FailureCluster, FailureSignature
from analytics.views.causes import ERR_NO_SIGNATURES, ERR_SAME_CLUSTER
from ingest.models import Defect
from tests.analytics.views.test_flaky_pages_helpers import (  # noqa: F401 (fixtures)
    START,
    XSS,
    make_build,
    make_result,
    make_test,
)

pytestmark = pytest.mark.django_db


def list_url(project) -> str:
    return reverse("causes-list", kwargs={"slug": project.slug})


def detail_url(project, cluster) -> str:
    return reverse("causes-detail", kwargs={"slug": project.slug, "cluster_id": cluster.pk})


def action_url(project, cluster, action: str) -> str:
    return reverse(f"causes-{action}", kwargs={"slug": project.slug, "cluster_id": cluster.pk})


def labels_in(response) -> list[str]:
    return [row["label"] for row in response.context["rows"]]


def weekly(counts: list[int]) -> list[list]:
    """A stored weekly trend ending in the week of the helpers' builds (Monday 2026-10-05), zero weeks left out
    as the clusters service stores them."""
    end = START.date()
    return [[(end - timedelta(weeks=len(counts) - 1 - i)).isoformat(), n] for i, n in enumerate(counts) if n]


def make_cluster(project, label: str, *, failures: int, keys: list[str], days_ago: int = 1,
                 trend: list[int] | None = None, text: str = "") -> FailureCluster:
    now = timezone.now()
    cluster = FailureCluster.objects.create(
        project=project, label=label, exception="TimeoutError", failures=failures, tests_affected=1,
        builds_affected=failures, first_seen=now - timedelta(days=60), last_seen=now - timedelta(days=days_ago),
        representative_text=text or f"TimeoutError: {label}",
        weekly_trend=weekly(trend or [failures]),
    )
    for key in keys:
        FailureSignature.objects.create(project=project, key=key, text=f"{label} / {key}", exception="TimeoutError",
                                        cluster=cluster, occurrences=1)
    return cluster


@pytest.fixture
def causes(project):
    """Three live causes and one merged one; failures of two tests carry the first cause's signatures."""
    berth = make_cluster(project, "berth map tile timeout", failures=12, keys=["k-tile-a", "k-tile-b"],
                         trend=[0, 0, 1, 1, 3, 3, 4, 4])
    refund = make_cluster(project, "refund rounding mismatch", failures=4, keys=["k-round"], days_ago=40)
    gate = make_cluster(project, "gate sensor offline", failures=7, keys=["k-gate"])
    old = make_cluster(project, "old duplicate", failures=0, keys=[])
    old.merged_into = gate
    old.save()
    defect = Defect.objects.create(project=project, key="BW-101", title="Map tiles time out on slow berths",
                                   created_at=timezone.now())
    other = Defect.objects.create(project=project, key="BW-202", title="Refund off by one cent",
                                  created_at=timezone.now())
    ClusterDefectLink.objects.create(cluster=berth, defect=defect, score=0.71)
    ClusterDefectLink.objects.create(cluster=refund, defect=other, score=0.9, confirmed=True)
    a, b = make_test(project, "test_tiles"), make_test(project, "test_tiles_zoomed")
    build = make_build(project, 1)
    make_result(project, build, a, "failed", message="tile fetch timed out", signature="k-tile-a")
    make_result(project, build, b, "failed", attempt=1, message="tile fetch timed out again", signature="k-tile-b")
    make_result(project, build, b, "passed", attempt=2)
    return {"berth": berth, "refund": refund, "gate": gate, "old": old, "defect": defect}


# ------------------------------------------------------------------------------------------------ auth


def test_anonymous_users_are_sent_to_login(project, causes):
    client = Client()
    for url in (list_url(project), detail_url(project, causes["berth"])):
        response = client.get(url)
        assert response.status_code == 302 and response["Location"].startswith(reverse("login"))
    response = client.post(action_url(project, causes["berth"], "merge"), {"into": causes["gate"].pk})
    assert response.status_code == 302 and response["Location"].startswith(reverse("login"))
    assert FailureCluster.objects.get(pk=causes["berth"].pk).merged_into_id is None


# ------------------------------------------------------------------------------------------------ list


def test_list_shows_live_causes_by_size_with_trend_and_defects(viewer_client, project, causes):
    response = viewer_client.get(list_url(project))
    assert response.status_code == 200
    assert labels_in(response) == ["berth map tile timeout", "gate sensor offline", "refund rounding mismatch"]
    html = response.content.decode()
    assert "old duplicate" not in html  # merged causes are left out
    berth = response.context["rows"][0]
    assert berth["trend"] == "rising"  # 14 failures in the last 4 weeks against 2 before
    # The trend as text too; the weeks without failures (left out of the stored trend) count as 0.
    assert "failures per week, oldest first: 1, 1, 3, 3, 4, 4" in html
    assert "BW-101?" in html and "(confirmed)" in html


@pytest.mark.parametrize(
    ("query", "expected"),
    [
        ({"q": "refund"}, {"refund rounding mismatch"}),
        ({"q": "TimeoutError gate"}, {"gate sensor offline"}),
        ({"min_failures": "5"}, {"berth map tile timeout", "gate sensor offline"}),
        ({"seen": "28"}, {"berth map tile timeout", "gate sensor offline"}),
        ({"defects": "confirmed"}, {"refund rounding mismatch"}),
        ({"defects": "suggested"}, {"berth map tile timeout"}),
        ({"defects": "none"}, {"gate sensor offline"}),
        ({"defects": "bogus", "seen": "bogus", "min_failures": "x"},
         {"berth map tile timeout", "gate sensor offline", "refund rounding mismatch"}),
    ],
)
def test_each_filter_narrows_the_table(viewer_client, project, causes, query, expected):
    response = viewer_client.get(list_url(project), query)
    assert response.status_code == 200
    assert set(labels_in(response)) == expected


def test_sorting_both_ways(viewer_client, project, causes):
    up = labels_in(viewer_client.get(list_url(project), {"sort": "failures"}))
    assert up == ["refund rounding mismatch", "gate sensor offline", "berth map tile timeout"]
    assert labels_in(viewer_client.get(list_url(project), {"sort": "-failures"})) == list(reversed(up))
    assert labels_in(viewer_client.get(list_url(project), {"sort": "label"}))[0] == "berth map tile timeout"


def test_server_side_pagination(viewer_client, project):
    for i in range(23):
        make_cluster(project, f"cause {i:02d}", failures=100 - i, keys=[f"k{i}"])
    last = viewer_client.get(list_url(project), {"per_page": 10, "page": 3})
    assert labels_in(last) == ["cause 20", "cause 21", "cause 22"]
    assert "Page 3 of 3" in last.content.decode()


def test_csv_download_has_exactly_the_filtered_rows_and_is_neutralised(viewer_client, project, causes):
    make_cluster(project, "=cmd|' /C calc'!A0", failures=50, keys=["k-evil"])
    response = viewer_client.get(list_url(project), {"download": "csv", "min_failures": "7", "per_page": 10})
    body = b"".join(response.streaming_content).decode()
    rows = list(csv.reader(io.StringIO(body)))
    header, data = rows[0], rows[1:]
    labels = [r[header.index("label")] for r in data]
    assert labels == ["'=cmd|' /C calc'!A0", "berth map tile timeout", "gate sensor offline"]
    # OWASP "CSV Injection": no cell may start with "=".
    assert not any(cell.startswith("=") for row in data for cell in row)


def test_json_download_matches_the_filters(viewer_client, project, causes):
    data = json.loads(viewer_client.get(list_url(project), {"download": "json", "defects": "suggested"}).content)
    assert [row["label"] for row in data] == ["berth map tile timeout"]
    assert data[0]["defects"] == "BW-101?"
    # week:failures pairs as stored, oldest first; the first week with failures is 5 weeks before 2026-10-05.
    assert data[0]["weekly_trend"].split() == ["2026-08-31:1", "2026-09-07:1", "2026-09-14:3", "2026-09-21:3",
                                               "2026-09-28:4", "2026-10-05:4"]


def test_list_query_count_does_not_grow_with_rows(viewer_client, project, django_assert_num_queries):
    # Session, user, project, project switcher, user permissions, group permissions, row count, one page of
    # clusters, their defect links (one prefetch), latest build week: 10 queries whatever the number of rows.
    defect = Defect.objects.create(project=project, key="BW-1", title="x", created_at=timezone.now())
    for i in range(50):
        cluster = make_cluster(project, f"cause {i:02d}", failures=i + 1, keys=[])
        ClusterDefectLink.objects.create(cluster=cluster, defect=defect, score=0.5)
    for query, rows in (({"min_failures": "46"}, 5), ({}, 50)):
        with django_assert_num_queries(10):
            response = viewer_client.get(list_url(project), query)
        assert len(response.context["rows"]) == rows
        assert all(row["links"] for row in response.context["rows"])


def test_malicious_strings_are_escaped_in_list_detail_and_chart(viewer_client, project):
    cluster = make_cluster(project, XSS, failures=3, keys=["k-x"], text=XSS)
    defect = Defect.objects.create(project=project, key=XSS, title=XSS, created_at=timezone.now())
    ClusterDefectLink.objects.create(cluster=cluster, defect=defect, score=0.5)
    test = make_test(project, XSS, classname=XSS)
    make_result(project, make_build(project, 1, external_id=XSS), test, "failed", message=XSS, signature="k-x")
    for url in (list_url(project), detail_url(project, cluster)):
        html = viewer_client.get(url).content.decode()
        assert XSS not in html
        assert "&lt;img src=x onerror=alert(1)&gt;" in html


# ------------------------------------------------------------------------------------------------ detail


def test_detail_shows_representative_members_failures_chart_and_defects(viewer_client, project, causes):
    response = viewer_client.get(detail_url(project, causes["berth"]))
    assert response.status_code == 200
    html = response.content.decode()
    assert "TimeoutError: berth map tile timeout" in html  # representative failure
    assert "k-tile-a" in html and "k-tile-b" in html
    failures = response.context["failures"]
    assert {r.message for r in failures} == {"tile fetch timed out", "tile fetch timed out again"}
    assert "test_tiles_zoomed" in html
    assert 'id="trend-chart"' in html
    assert "BW-101" in html and "Map tiles time out on slow berths" in html and "0.71" in html


def test_unknown_cluster_is_404(viewer_client, project, causes):
    url = reverse("causes-detail", kwargs={"slug": project.slug, "cluster_id": 987654})
    assert viewer_client.get(url).status_code == 404


def test_viewer_sees_no_action_forms_and_gets_403(viewer_client, project, causes):
    berth = causes["berth"]
    html = viewer_client.get(detail_url(project, berth)).content.decode()
    for form_id in ('id="merge-form"', 'id="split-form"', 'class="inline link-form"'):
        assert form_id not in html
    posts = [("merge", {"into": causes["gate"].pk}), ("split", {"signature": ["k-tile-a"]}),
             ("link", {"defect": causes["defect"].pk})]
    for action, data in posts:
        assert viewer_client.post(action_url(project, berth, action), data).status_code == 403
    berth.refresh_from_db()
    assert berth.merged_into_id is None
    assert FailureSignature.objects.filter(cluster=berth).count() == 2
    assert not ClusterDefectLink.objects.get(cluster=berth).confirmed


def test_triager_sees_the_action_forms(triager_client, project, causes):
    html = triager_client.get(detail_url(project, causes["berth"])).content.decode()
    assert 'id="merge-form"' in html and 'id="split-form"' in html and "Confirm this defect" in html


def test_triager_merges_a_cause(triager_client, project, causes):
    berth, gate = causes["berth"], causes["gate"]
    response = triager_client.post(action_url(project, berth, "merge"), {"into": gate.pk})
    assert response.status_code == 302 and response["Location"] == detail_url(project, gate)
    berth.refresh_from_db()
    assert berth.merged_into_id == gate.pk
    assert set(FailureSignature.objects.filter(cluster=gate).values_list("key", flat=True)) == {
        "k-tile-a", "k-tile-b", "k-gate"}
    listed = triager_client.get(list_url(project)).context["rows"]
    assert {row["cluster_id"] for row in listed} == {gate.pk, causes["refund"].pk}  # the merged one is gone


def test_merge_into_itself_is_refused(triager_client, project, causes):
    berth = causes["berth"]
    response = triager_client.post(action_url(project, berth, "merge"), {"into": berth.pk}, follow=True)
    assert ERR_SAME_CLUSTER in response.content.decode()
    berth.refresh_from_db()
    assert berth.merged_into_id is None


def test_triager_splits_ticked_signatures(triager_client, project, causes):
    berth = causes["berth"]
    response = triager_client.post(action_url(project, berth, "split"), {"signature": ["k-tile-b"]})
    assert response.status_code == 302
    moved = FailureSignature.objects.get(key="k-tile-b")
    assert moved.cluster_id not in (None, berth.pk) and moved.pinned
    assert list(FailureSignature.objects.filter(cluster=berth).values_list("key", flat=True)) == ["k-tile-a"]
    assert response["Location"] == detail_url(project, moved.cluster)


def test_split_needs_a_ticked_member_signature(triager_client, project, causes):
    berth = causes["berth"]
    response = triager_client.post(action_url(project, berth, "split"), {"signature": ["k-gate"]}, follow=True)
    assert ERR_NO_SIGNATURES in response.content.decode()
    assert FailureSignature.objects.get(key="k-gate").cluster_id == causes["gate"].pk


def test_triager_confirms_a_suggested_defect(triager_client, triager, project, causes):
    berth = causes["berth"]
    response = triager_client.post(action_url(project, berth, "link"), {"defect": causes["defect"].pk})
    assert response.status_code == 302
    link = ClusterDefectLink.objects.get(cluster=berth)
    assert link.confirmed and link.confirmed_by == triager
    assert "confirmed" in triager_client.get(detail_url(project, berth)).content.decode()


def test_action_posts_need_a_csrf_token(triager, project, causes):
    client = Client(enforce_csrf_checks=True)
    client.force_login(triager)
    assert client.post(action_url(project, causes["berth"], "merge"), {"into": causes["gate"].pk}).status_code == 403
    assert FailureCluster.objects.get(pk=causes["berth"].pk).merged_into_id is None


def test_stored_trend_is_made_dense_up_to_the_latest_build_week():
    from datetime import date

    from analytics.charts.causes import dense_weekly_counts, trend_word

    # Hand-computed: weeks of 6 and 20 July and 3 August listed; 13 and 27 July missing; the trend runs on
    # to the Monday of 19 August's week (17 August).
    stored = [["2026-07-06", 87], ["2026-07-20", 7], ["2026-08-05", 3]]  # 5 August is a Wednesday
    dense = dense_weekly_counts(stored, end=date(2026, 8, 19))
    assert dense == [(date(2026, 7, 6), 87), (date(2026, 7, 13), 0), (date(2026, 7, 20), 7),
                     (date(2026, 7, 27), 0), (date(2026, 8, 3), 3), (date(2026, 8, 10), 0), (date(2026, 8, 17), 0)]
    assert dense_weekly_counts([], end=date(2026, 8, 19)) == []
    assert trend_word([n for _, n in dense]) == "falling"  # 3 in the last 4 weeks against 94 before
    assert trend_word([0, 0, 0, 0, 1, 2, 1, 2]) == "new"
    assert trend_word([2, 2, 2, 2, 2, 2, 2, 2]) == "steady"
    assert trend_word([5, 5, 0, 0, 0, 0]) == "quiet"


def test_no_split_form_for_a_single_signature_cause(triager_client, project, causes):
    html = triager_client.get(detail_url(project, causes["gate"])).content.decode()
    assert 'id="split-form"' not in html and 'id="merge-form"' in html


def test_trend_chart_escapes_the_cause_label():
    from analytics.charts.causes import trend_frame, weekly_trend_figure

    fig = weekly_trend_figure(trend_frame([["2026-10-05", 3]]), label=XSS)
    assert "<img" not in fig.layout.title.text and "&lt;img src=x" in fig.layout.title.text
