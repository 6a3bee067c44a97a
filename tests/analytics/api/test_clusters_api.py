"""Failure-cluster API: token and session auth, pagination, a cluster's failures and defects, person actions.

Ground truth: failures raised by the real Python interpreter from known causes
(tests/analytics/test_clusters_support.py); expected counts are recounted from the database in the test.
"""

from __future__ import annotations

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.utils import timezone
from rest_framework.test import APIClient

from analytics.api.clusters import ERR_TOKEN_CANNOT_CHANGE, ERR_UNKNOWN_DEFECT
from analytics.models import ClusterDefectLink, FailureCluster, FailureSignature
from analytics.services.clusters import ERR_MERGE_SELF, ERR_NOT_TRIAGER, clusters_refresh
from ingest.models import ApiToken, Defect, TestResult
from tests.analytics.api.clients import session_client
from tests.analytics.test_clusters_support import history, make_project

pytestmark = pytest.mark.django_db

URL = "/api/v1/projects/berthwise/failure-clusters/"


@pytest.fixture
def project():
    project = make_project()
    history(project, builds=3)
    Defect.objects.create(
        project=project,
        key="BW-4001",
        title="Sensor bus connection refused",
        description="ConnectionRefusedError: [Errno 111] Connection refused",
        created_at=timezone.now(),
    )
    clusters_refresh(project_id=project.pk)
    return project


def test_reads_need_a_token_of_this_project_or_a_session(project, token_client):
    some = FailureCluster.objects.filter(project=project).first()
    assert APIClient().get(URL).status_code == 401
    assert APIClient().get(f"{URL}{some.pk}/").status_code == 401
    other = make_project("other")
    foreign = APIClient()
    foreign.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=other, name='x')[1]}")
    assert foreign.get(URL).status_code == 403
    assert token_client.get(URL).status_code == 200
    assert session_client(triager=False).get(URL).status_code == 200


def test_list_is_paginated_largest_first(project, token_client):
    body = token_client.get(URL, {"limit": 3}).json()
    active = FailureCluster.objects.filter(project=project, failures__gt=0, merged_into__isnull=True)
    assert body["count"] == active.count() >= 8
    assert len(body["results"]) == 3 and body["next"]
    rest = token_client.get(body["next"]).json()["results"]
    sizes = [row["failures"] for row in body["results"] + rest]
    assert sizes == sorted(sizes, reverse=True)
    row = body["results"][0]
    assert set(row) >= {
        "id",
        "label",
        "failures",
        "tests_affected",
        "builds_affected",
        "first_seen",
        "last_seen",
        "weekly_trend",
        "representative_text",
    }
    # Every failed or errored result belongs to exactly one listed cluster.
    everything = token_client.get(URL, {"limit": 1000}).json()["results"]
    assert (
        sum(r["failures"] for r in everything)
        == TestResult.objects.filter(project=project, outcome__in=["failed", "error"]).count()
    )


def test_detail_lists_failures_signatures_and_defects(project, token_client):
    link = ClusterDefectLink.objects.select_related("cluster").get(defect__key="BW-4001")
    cluster = link.cluster
    body = token_client.get(f"{URL}{cluster.pk}/", {"limit": 2}).json()
    assert body["cluster"]["id"] == cluster.pk
    assert body["defects"] == [
        {
            "key": "BW-4001",
            "title": "Sensor bus connection refused",
            "status": "",
            "score": link.score,
            "confirmed": False,
            "confirmed_at": None,
        }
    ]
    keys = set(FailureSignature.objects.filter(cluster=cluster).values_list("key", flat=True))
    assert {s["key"] for s in body["signatures"]} == keys
    failures = body["failures"]
    assert failures["count"] == cluster.failures == TestResult.objects.filter(signature__in=keys).count()
    assert len(failures["results"]) == 2 and failures["next"]
    first = failures["results"][0]
    assert first["failure_type"] == "ConnectionRefusedError" and first["signature"] in keys
    assert token_client.get(f"{URL}999999/").status_code == 404


def test_detail_query_count_does_not_grow_with_the_page(project, token_client):
    cluster = FailureCluster.objects.filter(project=project).order_by("-failures").first()
    counts = []
    for limit in (1, 5):
        with CaptureQueriesContext(connection) as queries:
            assert token_client.get(f"{URL}{cluster.pk}/", {"limit": limit}).status_code == 200
        counts.append(len(queries))
    assert counts[0] == counts[1]


def test_merge_split_and_confirm_through_the_api(project, token_client):
    a, b = FailureCluster.objects.filter(project=project).order_by("pk")[:2]
    response = token_client.post(f"{URL}{a.pk}/merge/", {"into": b.pk}, format="json")
    assert response.status_code == 403 and response.json()["detail"] == ERR_TOKEN_CANNOT_CHANGE
    viewer = session_client(triager=False)
    response = viewer.post(f"{URL}{a.pk}/merge/", {"into": b.pk}, format="json")
    assert response.status_code == 403 and response.json()["detail"] == ERR_NOT_TRIAGER
    triager = session_client(triager=True)
    response = triager.post(f"{URL}{a.pk}/merge/", {"into": a.pk}, format="json")
    assert response.status_code == 400 and response.json()["detail"] == [ERR_MERGE_SELF.format(pk=a.pk)]
    response = triager.post(f"{URL}{a.pk}/merge/", {"into": b.pk}, format="json")
    assert response.status_code == 200 and response.json()["id"] == b.pk
    merged = triager.get(f"{URL}{a.pk}/").json()
    assert merged["cluster"]["merged_into"] == b.pk and merged["failures"]["count"] == 0
    assert a.pk not in {row["id"] for row in triager.get(URL, {"limit": 1000}).json()["results"]}

    keys = sorted(FailureSignature.objects.filter(cluster=b).values_list("key", flat=True))
    response = triager.post(f"{URL}{b.pk}/split/", {"signature_keys": keys[:1]}, format="json")
    assert response.status_code == 201
    assert set(
        FailureSignature.objects.filter(cluster_id=response.json()["id"]).values_list("key", flat=True)
    ) == {keys[0]}

    response = triager.post(f"{URL}{b.pk}/defects/", {"defect": "BW-404"}, format="json")
    assert response.status_code == 400 and response.json()["defect"] == [
        ERR_UNKNOWN_DEFECT.format(key="BW-404")
    ]
    response = triager.post(f"{URL}{b.pk}/defects/", {"defect": "BW-4001"}, format="json")
    assert response.status_code == 200 and response.json()["confirmed"] is True
    assert ClusterDefectLink.objects.get(cluster=b, defect__key="BW-4001").confirmed


def test_list_query_count_does_not_grow_with_the_page(project, token_client):
    counts = []
    for limit in (1, 6):
        with CaptureQueriesContext(connection) as queries:
            assert len(token_client.get(URL, {"limit": limit}).json()["results"]) == limit
        counts.append(len(queries))
    assert counts[0] == counts[1]
