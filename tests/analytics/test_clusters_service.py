"""Failure-cause service: refit and incremental assignment against known causes, stable ids, counts.

Ground truth: failures raised by the real Python interpreter from known cause functions
(tests/analytics/test_clusters_support.py). Agreement with it is measured with scikit-learn's
``adjusted_rand_score`` (sklearn.metrics, general-purpose reference library); the counts are checked
against a plain recount written in the test.
"""

from __future__ import annotations

from collections import Counter, defaultdict
from datetime import timedelta

import pytest
from sklearn.metrics import adjusted_rand_score
from sklearn.pipeline import Pipeline

from analytics.models import FailureCluster, FailureSignature
from analytics.services import clusters as service
from analytics.services.clusters import clusters_assign_build, clusters_refresh
from ingest.models import TestResult
from tests.analytics.test_clusters_support import CAUSES, add_build, history, make_project

pytestmark = pytest.mark.django_db


def cluster_of_results(project) -> dict[int, int]:
    """Result id -> cluster id, through the stored signatures."""
    by_key = dict(FailureSignature.objects.filter(project=project).values_list("key", "cluster_id"))
    return {
        pk: by_key.get(key)
        for pk, key in TestResult.objects.filter(
            project=project, outcome__in=["failed", "error"]
        ).values_list("pk", "signature")
    }


def ari(truth: dict[int, str], clusters: dict[int, int]) -> float:
    ids = sorted(truth)
    return adjusted_rand_score([truth[i] for i in ids], [clusters[i] for i in ids])


def test_refresh_groups_real_interpreter_failures_by_cause():
    project = make_project()
    _, truth = history(project)
    n = clusters_refresh(project_id=project.pk)
    score = ari(truth, cluster_of_results(project))
    print(f"ARI against the true causes: {score:.3f} ({n} clusters, 8 causes)")
    # sklearn.metrics.adjusted_rand_score: 1.0 is perfect agreement, the issue asks for at least 0.9.
    assert score >= 0.9
    assert all(TestResult.objects.get(pk=pk).signature for pk in truth)


def test_two_refreshes_give_identical_ids():
    project = make_project()
    history(project)
    clusters_refresh(project_id=project.pk)
    first = cluster_of_results(project)
    first_rows = list(FailureCluster.objects.filter(project=project).order_by("pk").values())
    clusters_refresh(project_id=project.pk)
    assert cluster_of_results(project) == first
    second_rows = list(FailureCluster.objects.filter(project=project).order_by("pk").values())
    drop = ("updated_at",)
    assert [{k: v for k, v in r.items() if k not in drop} for r in second_rows] == [
        {k: v for k, v in r.items() if k not in drop} for r in first_rows
    ]


def test_a_new_build_keeps_every_old_failure_cluster_id_incrementally_and_after_a_refit():
    project = make_project()
    builds, truth = history(project, causes=tuple(c for c in CAUSES if c != "slot-number"))
    clusters_refresh(project_id=project.pk)
    before = cluster_of_results(project)
    # A later build: known causes with new values, plus one cause never seen before.
    last = builds[-1].started_at
    failures = [("test_berth_key_0", "berth-key", 901), ("test_zero_capacity_1", "zero-capacity", 902)]
    failures += [("test_slot_parse", "slot-number", n) for n in (903, 904, 905)]
    new_build, new_truth = add_build(project, "nightly-new", failures, started_at=last + timedelta(days=1))
    clustered_before = set(FailureSignature.objects.filter(project=project).values_list("key", flat=True))
    placed = clusters_assign_build(project_id=project.pk, build_id=new_build.pk)
    after = cluster_of_results(project)
    assert {pk: after[pk] for pk in before} == before
    build_keys = set(
        TestResult.objects.filter(build=new_build).exclude(signature="").values_list("signature", flat=True)
    )
    assert placed == len(build_keys - clustered_before) > 0
    truth.update(new_truth)
    assert ari(truth, after) >= 0.9  # sklearn.metrics.adjusted_rand_score, as above
    clusters_refresh(project_id=project.pk)
    refit = cluster_of_results(project)
    assert {pk: refit[pk] for pk in after} == after


def test_assignment_joins_known_causes_and_opens_a_new_cluster_for_an_unknown_one():
    project = make_project()
    causes = ("berth-key", "zero-capacity", "vessel-none", "berth-lock-timeout")
    builds, _ = history(project, causes=causes)
    clusters_refresh(project_id=project.pk)
    known = {cause: set() for cause in causes}
    for pk, cluster_id in cluster_of_results(project).items():
        known[_cause_of(pk, causes)].add(cluster_id)
    assert all(len(ids) == 1 for ids in known.values())
    clusters_before = FailureCluster.objects.filter(project=project).count()
    failures = [
        ("test_berth_key_2", "berth-key", 777),
        ("test_json", "tide-feed-json", 1),
        ("test_json", "tide-feed-json", 2),
    ]
    build, truth = add_build(
        project, "nightly-next", failures, started_at=builds[-1].started_at + timedelta(hours=5)
    )
    clusters_assign_build(project_id=project.pk, build_id=build.pk)
    now = cluster_of_results(project)
    by_cause = defaultdict(set)
    for pk, cause in truth.items():
        by_cause[cause].add(now[pk])
    assert by_cause["berth-key"] == known["berth-key"]
    assert len(by_cause["tide-feed-json"]) == 1
    new_id = next(iter(by_cause["tide-feed-json"]))
    assert new_id not in set().union(*known.values())
    assert FailureCluster.objects.filter(project=project).count() == clusters_before + 1
    new_cluster = FailureCluster.objects.get(pk=new_id)
    assert new_cluster.failures == 2 and "JSONDecodeError" in new_cluster.exception


def _cause_of(pk: int, causes) -> str:
    failure_type = TestResult.objects.get(pk=pk).failure_type
    return {
        "KeyError": "berth-key",
        "ZeroDivisionError": "zero-capacity",
        "AttributeError": "vessel-none",
        "TimeoutError": "berth-lock-timeout",
    }[failure_type]


def test_assignment_vectorises_only_the_new_build_signatures(monkeypatch, django_capture_on_commit_callbacks):
    project = make_project()
    builds, _ = history(project, builds=4, causes=tuple(c for c in CAUSES if c != "slot-number"))
    with django_capture_on_commit_callbacks(execute=True):  # the refit caches its fitted state on commit
        clusters_refresh(project_id=project.pk)
    failures = [("test_berth_key_0", "berth-key", 4242), ("test_slot", "slot-number", 17)]
    failures.append(("test_slot", "slot-number", 18))  # another call path: a second new signature
    build, _ = add_build(
        project, "nightly-small", failures, started_at=builds[-1].started_at + timedelta(hours=1)
    )
    known = set(FailureSignature.objects.filter(project=project).values_list("key", flat=True))
    seen: list[int] = []
    real_fit_transform, real_transform = Pipeline.fit_transform, Pipeline.transform

    def spy_fit_transform(self, X, *args, **kwargs):
        seen.append(len(X))
        return real_fit_transform(self, X, *args, **kwargs)

    def spy_transform(self, X, *args, **kwargs):
        seen.append(len(X))
        return real_transform(self, X, *args, **kwargs)

    monkeypatch.setattr(Pipeline, "fit_transform", spy_fit_transform)
    monkeypatch.setattr(Pipeline, "transform", spy_transform)
    with django_capture_on_commit_callbacks(execute=True):
        placed = clusters_assign_build(project_id=project.pk, build_id=build.pk)
    build_keys = set(
        TestResult.objects.filter(build=build).exclude(signature="").values_list("signature", flat=True)
    )
    new_keys = build_keys - known
    assert len(new_keys) == 2 and placed == 2
    assert len(known) > 20
    # Every text the TF-IDF pipeline saw during the assignment was one of the build's new signatures:
    # nothing of the history was vectorised again.
    assert seen and max(seen) <= len(new_keys)


def test_cluster_counts_match_a_plain_recount():
    project = make_project()
    _, truth = history(project)
    clusters_refresh(project_id=project.pk)
    clusters = cluster_of_results(project)
    rows = TestResult.objects.filter(pk__in=truth).values_list(
        "pk", "test_case_id", "build_id", "build__started_at", "build__week"
    )
    expected = defaultdict(
        lambda: {"failures": 0, "tests": set(), "builds": set(), "seen": [], "weeks": Counter()}
    )
    for pk, test_id, build_id, started, week in rows:
        e = expected[clusters[pk]]
        e["failures"] += 1
        e["tests"].add(test_id)
        e["builds"].add(build_id)
        e["seen"].append(started)
        e["weeks"][str(week)] += 1
    for cluster in FailureCluster.objects.filter(project=project, failures__gt=0):
        e = expected[cluster.pk]
        assert cluster.failures == e["failures"]
        assert cluster.tests_affected == len(e["tests"])
        assert cluster.builds_affected == len(e["builds"])
        assert cluster.first_seen == min(e["seen"]) and cluster.last_seen == max(e["seen"])
        assert cluster.weekly_trend == [[w, n] for w, n in sorted(e["weeks"].items())]
        assert cluster.representative_key in set(
            FailureSignature.objects.filter(cluster=cluster).values_list("key", flat=True)
        )
        assert cluster.label
    assert set(expected) == set(
        FailureCluster.objects.filter(project=project, failures__gt=0).values_list("pk", flat=True)
    )


def test_distance_threshold_is_a_setting_with_the_core_default(settings):
    from analytics.core.clustering import DEFAULT_DISTANCE_THRESHOLD

    assert service.distance_threshold() == DEFAULT_DISTANCE_THRESHOLD
    settings.BAROMETER_CLUSTER_DISTANCE = 0.3
    assert service.distance_threshold() == 0.3


def test_refresh_of_a_project_without_failures_writes_nothing():
    project = make_project()
    add_build(project, "green", [])
    assert clusters_refresh(project_id=project.pk) == 0
    assert not FailureCluster.objects.filter(project=project).exists()


def test_projects_do_not_share_clusters():
    one, two = make_project("berthwise"), make_project("berthwise-staging")
    history(one, builds=2)
    history(two, builds=2)
    clusters_refresh(project_id=one.pk)
    clusters_refresh(project_id=two.pk)
    ids_one = set(cluster_of_results(one).values())
    ids_two = set(cluster_of_results(two).values())
    assert ids_one and ids_two and not ids_one & ids_two
    assert set(FailureCluster.objects.filter(pk__in=ids_two).values_list("project_id", flat=True)) == {two.pk}
