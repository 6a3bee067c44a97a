"""A person's corrections to failure clusters (merge, split, confirm a defect) and the defect suggestions.

Ground truth: failures raised by the real Python interpreter from known causes
(tests/analytics/test_clusters_support.py) and defects written here, each quoting one cause or none.
"""

from __future__ import annotations

import re
from datetime import timedelta

import pytest
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Permission
from django.core.exceptions import PermissionDenied, ValidationError
from django.utils import timezone

from analytics.models import ClusterDefectLink, FailureCluster, FailureSignature
from analytics.services.clusters import (
    ERR_MERGE_SELF,
    ERR_MERGED_ALREADY,
    ERR_NOT_TRIAGER,
    ERR_OTHER_PROJECT,
    ERR_SPLIT_ALL,
    ERR_SPLIT_EMPTY,
    ERR_SPLIT_FOREIGN,
    cluster_defect_link_confirm,
    cluster_defect_links_refresh,
    cluster_merge,
    cluster_split,
    clusters_assign_build,
    clusters_refresh,
)
from ingest.models import Defect, TestResult
from tests.analytics.test_clusters_support import add_build, history, make_project

pytestmark = pytest.mark.django_db


@pytest.fixture
def triager():
    user = get_user_model().objects.create_user("harbour-qa", password="x")
    user.user_permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))
    return get_user_model().objects.get(pk=user.pk)


@pytest.fixture
def viewer():
    return get_user_model().objects.create_user("harbour-viewer", password="x")


def cluster_by_cause(project, truth) -> dict[str, set[int]]:
    by_key = dict(FailureSignature.objects.filter(project=project).values_list("key", "cluster_id"))
    out: dict[str, set[int]] = {}
    for pk, key in TestResult.objects.filter(pk__in=truth).values_list("pk", "signature"):
        out.setdefault(truth[pk], set()).add(by_key[key])
    return out


def one(ids: set[int]) -> FailureCluster:
    assert len(ids) == 1, ids
    return FailureCluster.objects.get(pk=next(iter(ids)))


def test_merge_survives_a_refit_and_new_failures_follow_it(triager):
    project = make_project()
    builds, truth = history(project, builds=3)
    clusters_refresh(project_id=project.pk)
    causes = cluster_by_cause(project, truth)
    keys, zero = one(causes["berth-key"]), one(causes["zero-capacity"])
    others = {cause: ids for cause, ids in causes.items() if cause not in ("berth-key", "zero-capacity")}
    merged = cluster_merge(cluster=keys, into=zero, user=triager)
    assert merged.pk == zero.pk
    keys.refresh_from_db()
    assert keys.merged_into_id == zero.pk and keys.failures == 0
    assert merged.failures == sum(1 for c in truth.values() if c in ("berth-key", "zero-capacity"))
    clusters_refresh(project_id=project.pk)
    after = cluster_by_cause(project, truth)
    assert after["berth-key"] == after["zero-capacity"] == {zero.pk}
    assert {cause: ids for cause, ids in after.items() if cause in others} == others
    # A new occurrence of the merged-away cause lands in the cluster it was merged into.
    build, new_truth = add_build(
        project,
        "nightly-late",
        [("test_berth_key_9", "berth-key", 5000)],
        started_at=builds[-1].started_at + timedelta(hours=2),
    )
    clusters_assign_build(project_id=project.pk, build_id=build.pk)
    assert cluster_by_cause(project, new_truth)["berth-key"] == {zero.pk}


def test_split_survives_a_refit(triager):
    project = make_project()
    _, truth = history(project, builds=4)
    clusters_refresh(project_id=project.pk)
    keys_cluster = one(cluster_by_cause(project, truth)["berth-key"])
    members = sorted(FailureSignature.objects.filter(cluster=keys_cluster).values_list("key", flat=True))
    assert len(members) >= 2  # the cause was reached through several call paths
    moved, stay = members[:1], members[1:]
    new = cluster_split(cluster=keys_cluster, signature_keys=moved, user=triager)
    assert new.pk != keys_cluster.pk and new.failures > 0
    for _ in range(2):
        assert set(FailureSignature.objects.filter(cluster=new).values_list("key", flat=True)) == set(moved)
        assert set(
            FailureSignature.objects.filter(cluster=keys_cluster).values_list("key", flat=True)
        ) == set(stay)
        clusters_refresh(project_id=project.pk)
    keys_cluster.refresh_from_db()
    new.refresh_from_db()
    assert keys_cluster.failures + new.failures == sum(1 for c in truth.values() if c == "berth-key")


def test_actions_refuse_bad_requests_with_clear_messages(triager, viewer):
    project = make_project()
    _, truth = history(project, builds=2)
    clusters_refresh(project_id=project.pk)
    causes = cluster_by_cause(project, truth)
    a, b = one(causes["berth-key"]), one(causes["zero-capacity"])
    with pytest.raises(PermissionDenied, match=re.escape(ERR_NOT_TRIAGER)):
        cluster_merge(cluster=a, into=b, user=viewer)
    with pytest.raises(PermissionDenied, match=re.escape(ERR_NOT_TRIAGER)):
        cluster_split(cluster=a, signature_keys=["x"], user=None)
    with pytest.raises(ValidationError) as exc:
        cluster_merge(cluster=a, into=a, user=triager)
    assert exc.value.messages == [ERR_MERGE_SELF.format(pk=a.pk)]
    with pytest.raises(ValidationError) as exc:
        cluster_split(cluster=a, signature_keys=[], user=triager)
    assert exc.value.messages == [ERR_SPLIT_EMPTY]
    with pytest.raises(ValidationError) as exc:
        cluster_split(cluster=a, signature_keys=["not-a-key"], user=triager)
    assert exc.value.messages == [ERR_SPLIT_FOREIGN.format(pk=a.pk, keys="not-a-key")]
    all_keys = list(FailureSignature.objects.filter(cluster=a).values_list("key", flat=True))
    with pytest.raises(ValidationError) as exc:
        cluster_split(cluster=a, signature_keys=all_keys, user=triager)
    assert exc.value.messages == [ERR_SPLIT_ALL.format(pk=a.pk)]
    cluster_merge(cluster=a, into=b, user=triager)
    a.refresh_from_db()
    with pytest.raises(ValidationError) as exc:
        cluster_merge(cluster=a, into=b, user=triager)
    assert exc.value.messages == [ERR_MERGED_ALREADY.format(pk=a.pk, into=b.pk)]
    other = make_project("berthwise-staging")
    elsewhere = FailureCluster.objects.create(project=other, label="x")
    with pytest.raises(ValidationError) as exc:
        cluster_merge(cluster=b, into=elsewhere, user=triager)
    assert exc.value.messages == [ERR_OTHER_PROJECT.format(a=b.pk, what="cluster", b=elsewhere.pk)]


def _defect(project, key: str, title: str, description: str = "") -> Defect:
    return Defect.objects.create(
        project=project, key=key, title=title, description=description, created_at=timezone.now()
    )


def test_defects_quoting_a_cause_are_suggested_for_its_cluster_and_confirmed_links_stay(triager):
    project = make_project()
    _, truth = history(project, builds=3)
    lock = _defect(
        project,
        "BW-2001",
        "Booking hangs: lock on berth not acquired within the timeout",
        "Nightly run shows 'TimeoutError: lock on berth-014 not acquired within 3.5 s'.",
    )
    refused = _defect(
        project,
        "BW-2002",
        "Sensor bus connection refused",
        "ConnectionRefusedError: [Errno 111] Connection refused while reading the sensor bus.",
    )
    unrelated = _defect(
        project,
        "BW-2003",
        "Arrival reminder sent twice",
        "A berth holder got the same arrival e-mail two times.",
    )
    clusters_refresh(project_id=project.pk)
    causes = cluster_by_cause(project, truth)
    lock_cluster, refused_cluster = one(causes["berth-lock-timeout"]), one(causes["sensor-bus-refused"])
    suggested = {
        (link.cluster_id, link.defect_id): link.score
        for link in ClusterDefectLink.objects.filter(confirmed=False)
    }
    # Each cause's defect is suggested for its cluster, and scores more there than for any other cluster.
    for cluster, defect in ((lock_cluster, lock), (refused_cluster, refused)):
        assert (cluster.pk, defect.pk) in suggested
        assert suggested[(cluster.pk, defect.pk)] == max(
            s for (c, d), s in suggested.items() if d == defect.pk
        )
        assert 0 < suggested[(cluster.pk, defect.pk)] <= 1
    assert not any(d == unrelated.pk for _, d in suggested)

    # A person links the unrelated defect; a refresh never drops it, even with a low score.
    link = cluster_defect_link_confirm(cluster=lock_cluster, defect=unrelated, user=triager)
    assert (
        link.confirmed and link.confirmed_by == triager and link.score < suggested[(lock_cluster.pk, lock.pk)]
    )
    # The refused-connection defect is reworded to something unrelated: its suggestion goes away.
    refused.title, refused.description = "Harbour fees page slow", "Loading takes ten seconds."
    refused.save()
    clusters_refresh(project_id=project.pk)
    assert ClusterDefectLink.objects.filter(cluster=lock_cluster, defect=unrelated, confirmed=True).exists()
    assert not ClusterDefectLink.objects.filter(defect=refused).exists()
    assert ClusterDefectLink.objects.filter(cluster=lock_cluster, defect=lock).exists()


def test_merge_moves_confirmed_defect_links(triager):
    project = make_project()
    _, truth = history(project, builds=2)
    defect = _defect(project, "BW-3001", "Dock sensors offline")
    clusters_refresh(project_id=project.pk)
    causes = cluster_by_cause(project, truth)
    a, b = one(causes["vessel-none"]), one(causes["slot-number"])
    cluster_defect_link_confirm(cluster=a, defect=defect, user=triager)
    cluster_merge(cluster=a, into=b, user=triager)
    assert ClusterDefectLink.objects.filter(cluster=b, defect=defect, confirmed=True).exists()
    assert not ClusterDefectLink.objects.filter(cluster=a).exists()
    clusters_refresh(project_id=project.pk)
    assert ClusterDefectLink.objects.filter(cluster=b, defect=defect, confirmed=True).exists()


def test_defect_links_refresh_after_a_defect_import_needs_no_refit(triager):
    project = make_project()
    _, truth = history(project, builds=2)
    clusters_refresh(project_id=project.pk)
    zero = one(cluster_by_cause(project, truth)["zero-capacity"])
    labels = dict(FailureCluster.objects.filter(project=project).values_list("pk", "label"))
    defect = _defect(
        project,
        "BW-5001",
        "Occupancy report crashes: division by zero",
        "ZeroDivisionError: division by zero when a pontoon has no berths.",
    )
    assert not ClusterDefectLink.objects.filter(defect=defect).exists()
    assert cluster_defect_links_refresh(project_id=project.pk) >= 1
    assert ClusterDefectLink.objects.filter(cluster=zero, defect=defect, confirmed=False).exists()
    assert dict(FailureCluster.objects.filter(project=project).values_list("pk", "label")) == labels
