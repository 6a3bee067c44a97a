"""flaky_scores_refresh: stores scores with their evidence, uses people's triage labels, is reproducible."""

from __future__ import annotations

import pytest

from analytics.core.flaky import SOURCES, VERDICTS
from analytics.models import TestHealth, TestTriage, TriageState
from analytics.services.flaky import EVIDENCE_FIELDS, MIN_LABELS_PER_CLASS, flaky_scores_refresh
from analytics.services.triage import triage_labels, triage_set
from tests.analytics.test_flaky_service_support import add_history, make_project, simulated_outcomes

pytestmark = pytest.mark.django_db

STORED = ("score", "verdict", "scored_by", "runs", "failures", "last_failure_at", "evidence", "explanation",
          "recent_outcomes")


def stored(project):
    return {h.test_case.name: {f: getattr(h, f) for f in STORED}
            for h in TestHealth.objects.filter(project=project).select_related("test_case")}


def label_by_threshold(tests, truth, *, rate: float = 0.2):
    """A team that confirms as flaky only the tests failing at least ``rate`` of the time, and marks the
    other suspects and the broken tests not flaky: a notion the unsupervised rules cannot know."""
    for name, test in tests.items():
        kind, r = truth[name]
        if kind == "flaky":
            state = TriageState.CONFIRMED if r >= rate else TriageState.NOT_FLAKY
        elif kind == "broken" or name.endswith(("0", "1", "2", "3")):
            state = TriageState.NOT_FLAKY
        else:
            continue
        triage_set(test_case=test, state=state, note="labelled in a test")


def test_refresh_stores_score_verdict_and_evidence_for_each_test():
    project = make_project()
    # Ground truth built here: a flaky test (fails and passes on the same commits, passes on rerun),
    # a test broken from build 12 on, a stable one, and a new one with three runs.
    flaky = ["P", "FP", "P", "P", "F", "P", "P", "P", "FP", "P", "P", "F", "P", "P", "P", "P"]
    tests = add_history(project, {
        "test_flaky": flaky,
        "test_broken": ["P"] * 12 + ["F"] * 4,
        "test_stable": ["P"] * 16,
        "test_new": [""] * 13 + ["P"] * 3,
    }, builds_per_commit=2)
    assert flaky_scores_refresh(project_id=project.pk) == 4
    rows = stored(project)
    assert rows["test_flaky"]["verdict"] == "flaky"
    assert rows["test_broken"]["verdict"] == "broken"
    assert rows["test_stable"]["verdict"] == "stable"
    assert rows["test_new"]["verdict"] == "insufficient data"
    for row in rows.values():
        assert row["verdict"] in VERDICTS and row["scored_by"] in SOURCES and 0.0 <= row["score"] <= 1.0
        assert set(row["evidence"]) == set(EVIDENCE_FIELDS) and row["explanation"]
    assert rows["test_flaky"]["runs"] == 18 and rows["test_flaky"]["failures"] == 4
    assert rows["test_flaky"]["evidence"]["pass_on_rerun"] == 2
    assert rows["test_broken"]["recent_outcomes"] == "P" * 12 + "FFFF"
    assert rows["test_stable"]["last_failure_at"] is None
    assert TestHealth.objects.get(test_case=tests["test_broken"]).last_failure_at is not None


def test_without_labels_the_rules_score_everything():
    project = make_project()
    outcomes, _ = simulated_outcomes(n_builds=20)
    add_history(project, dict(list(outcomes.items())[::10]))
    flaky_scores_refresh(project_id=project.pk)
    assert set(TestHealth.objects.values_list("scored_by", flat=True)) == {"rules"}


def test_triage_labels_map_states_to_classes():
    project = make_project()
    tests = add_history(project, {f"test_{s}": ["P"] for s in ("a", "b", "c", "d", "e")})
    triage_set(test_case=tests["test_a"], state=TriageState.CONFIRMED)
    triage_set(test_case=tests["test_b"], state=TriageState.QUARANTINED)
    triage_set(test_case=tests["test_c"], state=TriageState.NOT_FLAKY)
    triage_set(test_case=tests["test_d"], state=TriageState.CONFIRMED)
    triage_set(test_case=tests["test_d"], state=TriageState.UNREVIEWED)  # taken back: no label
    labels = triage_labels(project_id=project.pk)
    by_name = {tests[n].pk: n for n in tests}
    assert {by_name[i]: v for i, v in labels.items()} == {"test_a": 1, "test_b": 1, "test_c": 0}
    assert labels.index.name == "test_id" and str(labels.dtype) == "int64"
    assert triage_labels(project_id=make_project("other").pk).empty


def test_triage_labels_feed_the_classifier_and_refresh_is_reproducible():
    project = make_project()
    outcomes, truth = simulated_outcomes()
    tests = add_history(project, outcomes, builds_per_commit=2)
    label_by_threshold(tests, truth)
    labels = triage_labels(project_id=project.pk)
    assert labels.value_counts().min() >= MIN_LABELS_PER_CLASS

    flaky_scores_refresh(project_id=project.pk)
    first = stored(project)
    sufficient = {n for n, r in first.items() if r["verdict"] != "insufficient data"}
    assert sufficient and {first[n]["scored_by"] for n in sufficient} == {"classifier"}
    headline = first[sorted(sufficient)[0]]["explanation"][0]
    print(f"\n{headline}")
    # The classifier is used only when it beat the rules on held-out labels (score_tests / choose_scorer);
    # the headline carries both held-out Brier scores (Brier 1950).
    assert "classifier trained on" in headline and "held-out Brier" in headline

    # Seeded: a second refresh on unchanged data stores exactly the same numbers.
    flaky_scores_refresh(project_id=project.pk)
    assert stored(project) == first

    # Incremental refresh of one test scores it exactly as the full refresh did.
    one = tests["test_flaky_05"]
    TestHealth.objects.filter(test_case=one).delete()
    flaky_scores_refresh(project_id=project.pk, test_ids=[one.pk])
    assert stored(project)["test_flaky_05"] == first["test_flaky_05"]


def test_too_few_labels_keep_the_rules():
    project = make_project()
    outcomes, truth = simulated_outcomes(n_builds=20)
    tests = add_history(project, outcomes)
    for name in list(tests)[:10]:
        triage_set(test_case=tests[name], state=TriageState.NOT_FLAKY)
    flaky_scores_refresh(project_id=project.pk)
    assert set(TestHealth.objects.values_list("scored_by", flat=True)) == {"rules"}
    assert TestTriage.objects.count() == 10


def test_empty_project_stores_nothing():
    assert flaky_scores_refresh(project_id=make_project().pk) == 0
    assert not TestHealth.objects.exists()


def test_full_refresh_drops_tests_without_runs_in_the_window_and_accepts_any_iterable():
    from datetime import timedelta

    from django.utils import timezone

    project = make_project()
    old = add_history(project, {"test_retired": ["P"] * 10}, start=timezone.now() - timedelta(days=200))
    new = add_history(project, {"test_current": ["P"] * 10}, prefix="n")
    flaky_scores_refresh(project_id=project.pk, now=timezone.now() - timedelta(days=150))
    assert set(TestHealth.objects.values_list("test_case__name", flat=True)) == {"test_retired"}
    # Incremental refresh (ids from a generator) adds the new test and leaves the rest alone.
    assert flaky_scores_refresh(project_id=project.pk, test_ids=(t.pk for t in new.values())) == 1
    assert TestHealth.objects.count() == 2
    # Full refresh now: the retired test has no run in the last 90 days (DEFAULT_EVIDENCE_CONFIG).
    flaky_scores_refresh(project_id=project.pk)
    assert set(TestHealth.objects.values_list("test_case__name", flat=True)) == {"test_current"}
    assert old["test_retired"].pk not in set(TestHealth.objects.values_list("test_case_id", flat=True))
