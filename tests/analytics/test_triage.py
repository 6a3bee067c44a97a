"""Triage workflow: who may change a state, the audit log, green-run counting and release suggestions."""

from __future__ import annotations

import re
from datetime import timedelta

import pytest
from django.contrib.auth.models import Permission, User
from django.core.exceptions import PermissionDenied
from django.utils import timezone

from analytics.models import TestTriage, TriageEvent, TriageState
from analytics.selectors import triage_events_qs
from analytics.services.flaky import flaky_scores_refresh
from analytics.services.triage import (
    ERR_GREEN_RUNS,
    ERR_NOT_ALLOWED,
    ERR_UNKNOWN_STATE,
    quarantine_release_candidates,
    triage_green_runs_refresh,
    triage_set,
)
from ingest.api.auth import TokenPrincipal
from ingest.models import ApiToken
from tests.analytics.test_flaky_service_support import add_history, make_project

pytestmark = pytest.mark.django_db


def triager(username: str = "ines") -> User:
    user = User.objects.get_or_create(username=username)[0]
    user.user_permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))
    return User.objects.get(pk=user.pk)  # fresh object: permission cache empty


@pytest.fixture
def project():
    return make_project()


@pytest.fixture
def test_case(project):
    return add_history(project, {"test_berth_release": ["P"]})["test_berth_release"]


def test_each_change_is_logged_with_who_when_from_to_and_note(test_case):
    ines, tom = triager("ines"), triager("tom")
    before = timezone.now()
    triage_set(test_case=test_case, state=TriageState.CONFIRMED, note="fails on the slow runner", user=ines)
    triage_set(test_case=test_case, state=TriageState.QUARANTINED, note="blocks merges", user=tom)
    triage_set(test_case=test_case, state=TriageState.QUARANTINED, note="ticket BW-12 opened", user=tom)
    log = list(triage_events_qs(test_case_id=test_case.pk))
    assert [(e.from_state, e.to_state, e.note, e.user.username) for e in log] == [
        ("quarantined", "quarantined", "ticket BW-12 opened", "tom"),
        ("confirmed", "quarantined", "blocks merges", "tom"),
        ("unreviewed", "confirmed", "fails on the slow runner", "ines"),
    ]
    assert all(before <= e.at <= timezone.now() for e in log)
    triage = TestTriage.objects.get(test_case=test_case)
    assert (triage.state, triage.note, triage.updated_by.username) == ("quarantined", "ticket BW-12 opened", "tom")


def test_unknown_state_is_refused_and_nothing_is_written(test_case):
    with pytest.raises(ValueError, match=re.escape(ERR_UNKNOWN_STATE)):
        triage_set(test_case=test_case, state="ignored", user=triager())
    assert not TestTriage.objects.exists() and not TriageEvent.objects.exists()


def test_only_triagers_may_change_states(project, test_case):
    viewer = User.objects.create_user("viewer", password="x")
    token = TokenPrincipal(ApiToken.issue(project=project, name="ci")[0])
    for who in (viewer, token):
        with pytest.raises(PermissionDenied, match=re.escape(ERR_NOT_ALLOWED)):
            triage_set(test_case=test_case, state=TriageState.QUARANTINED, user=who)
    assert not TriageEvent.objects.exists()
    # Staff superusers hold every permission; user=None is Barometer itself (no person).
    boss = User.objects.create_superuser("harbour-master", password="x")
    triage_set(test_case=test_case, state=TriageState.CONFIRMED, user=boss)
    triage_set(test_case=test_case, state=TriageState.NOT_FLAKY)
    assert [e.user_id for e in triage_events_qs(test_case_id=test_case.pk)] == [None, boss.pk]


def quarantine_at(test_case, when):
    triage_set(test_case=test_case, state=TriageState.QUARANTINED, note="noisy", user=triager())
    TriageEvent.objects.filter(test_case=test_case).update(at=when)


def test_green_runs_count_passes_since_the_quarantine_and_reset_on_failure(project, settings):
    settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS = 3
    start = timezone.now() - timedelta(days=2)
    # Ground truth: failures before the quarantine do not count; after it: pass, failure, then a build
    # where it failed and passed on rerun (not green), a build where it was skipped (ignored), three passes.
    tests = add_history(project, {
        "test_a": ["F", "F", "P", "F", "FP", "S", "P", "P", "P"],
        "test_b": ["F", "F", "P", "P", "P", "P", "F", "P", "P"],
        "test_c": ["P"] * 9,
    }, start=start)
    quarantine_at(tests["test_a"], start + timedelta(hours=1, minutes=30))
    quarantine_at(tests["test_b"], start + timedelta(hours=1, minutes=30))
    assert triage_green_runs_refresh(project_id=project.pk) == 2
    green = dict(TestTriage.objects.values_list("test_case__name", "green_runs_since_quarantine"))
    assert green == {"test_a": 3, "test_b": 2}
    assert [t.name for t in quarantine_release_candidates(project_id=project.pk)] == ["test_a"]
    assert quarantine_release_candidates(project_id=project.pk, green_runs=4) == []
    assert len(quarantine_release_candidates(project_id=project.pk, green_runs=2)) == 2
    # A note edited while quarantined does not restart the count.
    triage_set(test_case=tests["test_a"], state=TriageState.QUARANTINED, note="still noisy", user=triager("al"))
    triage_green_runs_refresh(project_id=project.pk)
    assert TestTriage.objects.get(test_case=tests["test_a"]).green_runs_since_quarantine == 3


def test_refresh_keeps_green_runs_up_to_date_and_release_clears_them(project):
    start = timezone.now() - timedelta(days=2)
    tests = add_history(project, {"test_a": ["F"] * 4}, start=start)
    quarantine_at(tests["test_a"], start - timedelta(hours=1))
    add_history(project, {"test_a": ["P"] * 5}, start=start + timedelta(hours=10), prefix="later")
    flaky_scores_refresh(project_id=project.pk, test_ids=[tests["test_a"].pk])
    assert TestTriage.objects.get().green_runs_since_quarantine == 5
    triage_set(test_case=tests["test_a"], state=TriageState.CONFIRMED, note="released", user=triager())
    assert TestTriage.objects.get().green_runs_since_quarantine == 0
    assert quarantine_release_candidates(project_id=project.pk, green_runs=1) == []


@pytest.mark.parametrize("bad", [0, -3, 2.5, True, "30"])
def test_bad_green_runs_is_refused(project, bad):
    with pytest.raises(ValueError, match=ERR_GREEN_RUNS):
        quarantine_release_candidates(project_id=project.pk, green_runs=bad)
