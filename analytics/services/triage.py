"""Triage of flaky-test suspects: people's decisions, their audit log, quarantine release, classifier labels.

Quarantining hides failures: a quarantined test keeps running and its results are still ingested and
scored, but the CI jobs that read the quarantine list stop failing the build on it, so a real regression in
it goes unnoticed until someone looks. Release tests from quarantine as soon as they are fixed.
"""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd
from django.conf import settings
from django.core.exceptions import PermissionDenied
from django.db import transaction
from django.db.models import Max

from analytics.models import TestTriage, TriageEvent, TriageState
from ingest.models import Outcome, TestCase, TestResult

ERR_UNKNOWN_STATE = "unknown triage state; use one of: " + ", ".join(TriageState.values)
ERR_GREEN_RUNS = "green_runs must be a whole number of at least 1"
ERR_STATE_CHANGED = "the test is {actual}, not {expected} (changed meanwhile?); nothing was changed"
ERR_NOT_ALLOWED = "only signed-in people with the triage permission (group 'triagers') may change triage states"
TRIAGE_PERMISSION = "analytics.triage"
QUARANTINE_WARNING = (
    "Quarantining hides failures: a quarantined test keeps running and being reported, but CI jobs that "
    "read the quarantine list no longer fail the build on it, so a real regression in it can go unnoticed."
)

#: Triage state -> classifier label (1 = flaky). Unreviewed tests carry no label.
STATE_LABELS: dict[str, int] = {
    TriageState.CONFIRMED: 1,
    TriageState.QUARANTINED: 1,
    TriageState.NOT_FLAKY: 0,
}


class TriageStateChanged(ValueError):
    """``triage_set(only_from=...)`` found the test in another state (someone changed it meanwhile)."""


def triage_allowed(user) -> bool:
    """True for a signed-in person (not an API token) holding ``analytics.triage`` (or a superuser)."""
    has_perm = getattr(user, "has_perm", None)
    return bool(getattr(user, "pk", None) is not None and getattr(user, "is_active", False) and has_perm
                and has_perm(TRIAGE_PERMISSION))


def triage_set(
    *, test_case: TestCase, state: str, note: str = "", user=None, only_from: str | None = None
) -> TriageEvent:
    """Move ``test_case`` to triage ``state`` and record the change in the audit log.

    Parameters
    ----------
    test_case : TestCase
    state : str
        One of ``TriageState.values``; anything else raises ``ValueError(ERR_UNKNOWN_STATE)``.
    note : str
        Why; stored on both the triage row and the event.
    user : User or None
        The person deciding; ``None`` only for automatic changes made by Barometer itself. Anyone else
        (an API token, a person without ``analytics.triage``) raises ``PermissionDenied(ERR_NOT_ALLOWED)``.
    only_from : str, optional
        Change only a test that is in this state now (e.g. release only from quarantine); checked on the
        locked row, so a change someone committed meanwhile is seen. Otherwise raises
        ``TriageStateChanged(ERR_STATE_CHANGED)`` and writes nothing.

    Returns
    -------
    TriageEvent
        The new audit-log entry with ``from_state``, ``to_state``, ``note``, ``user`` and ``at``.
        Every call writes one, also when the state stays the same (the note may have changed).

    Notes
    -----
    See the module docstring (:data:`QUARANTINE_WARNING`): quarantining hides failures.
    """
    if state not in TriageState.values:
        raise ValueError(ERR_UNKNOWN_STATE)
    if user is not None and not triage_allowed(user):
        raise PermissionDenied(ERR_NOT_ALLOWED)
    with transaction.atomic():
        triage, _ = TestTriage.objects.select_for_update().get_or_create(
            test_case=test_case, defaults={"project_id": test_case.project_id}
        )
        previous = triage.state
        if only_from is not None and previous != only_from:
            raise TriageStateChanged(ERR_STATE_CHANGED.format(actual=previous, expected=only_from))
        triage.state = state
        triage.note = note
        triage.updated_by = user
        if state != previous:
            # Entering quarantine starts a new count; leaving it clears the count.
            triage.green_runs_since_quarantine = 0
        triage.save()
        return TriageEvent.objects.create(
            test_case=test_case, from_state=previous, to_state=state, note=note, user=user
        )


def _quarantined_since(*, project_id: int, test_ids: Iterable[int] | None = None) -> dict[int, object]:
    """test_id -> time of the latest move into quarantine, for tests quarantined now."""
    events = TriageEvent.objects.filter(
        test_case__project_id=project_id,
        to_state=TriageState.QUARANTINED,
        test_case__triage__state=TriageState.QUARANTINED,
    ).exclude(from_state=TriageState.QUARANTINED)
    if test_ids is not None:
        events = events.filter(test_case_id__in=list(test_ids))
    return dict(events.values("test_case_id").annotate(at=Max("at")).values_list("test_case_id", "at"))


def triage_green_runs_refresh(*, project_id: int, test_ids: Iterable[int] | None = None) -> int:
    """Recount ``TestTriage.green_runs_since_quarantine`` for quarantined tests (all, or those in ``test_ids``).

    A *run* here is one build of the test: green when every attempt in it passed (a failed attempt that
    passed on rerun is not green). The count is the number of green builds at the end of the history since
    the test was last moved into quarantine (builds started at or after that moment, by start time and id);
    a build with a failed or errored attempt sets it back to zero; builds where the test was only skipped
    say nothing and are left out. Returns how many triage rows changed.
    """
    with transaction.atomic():
        # Lock the quarantined rows first: a triage change committing between the count and the write
        # would otherwise get a stale count written over its reset.
        locked = TestTriage.objects.select_for_update().filter(
            project_id=project_id, state=TriageState.QUARANTINED
        )
        if test_ids is not None:
            locked = locked.filter(test_case_id__in=list(test_ids))
        current = {
            pk: (test_id, at) for pk, test_id, at in locked.values_list("pk", "test_case_id", "updated_at")
        }
        if not current:
            return 0
        since = _quarantined_since(project_id=project_id, test_ids=[t for t, _ in current.values()])
        if not since:
            return 0
        green = _green_runs(since)
        stored = TestTriage.objects.filter(pk__in=list(current)).values_list(
            "pk", "green_runs_since_quarantine"
        )
        changed = 0
        for pk, count in stored:
            test_id, seen_at = current[pk]
            if test_id in green and count != green[test_id]:
                # Only a row still quarantined and untouched since it was read: a triage change meanwhile
                # (release, re-quarantine) reset the count, and a stale count must not overwrite that.
                changed += TestTriage.objects.filter(
                    pk=pk, state=TriageState.QUARANTINED, updated_at=seen_at
                ).update(green_runs_since_quarantine=green[test_id])
        return changed


def _green_runs(since: dict[int, object]) -> dict[int, int]:
    """test_id -> green builds at the end of its history since ``since[test_id]`` (see the refresh)."""
    rows = (
        TestResult.objects.filter(test_case_id__in=list(since), build__started_at__gte=min(since.values()))
        .exclude(outcome=Outcome.SKIPPED)
        .order_by("test_case_id", "build__started_at", "build_id")
        .values_list("test_case_id", "build__started_at", "build_id", "outcome")
    )
    builds: dict[tuple[int, int], bool] = {}  # (test, build) -> all attempts passed; in time order
    for test_id, started_at, build_id, outcome in rows.iterator(chunk_size=5000):
        if started_at >= since[test_id]:
            key = (test_id, build_id)
            builds[key] = builds.get(key, True) and outcome == Outcome.PASSED
    green = dict.fromkeys(since, 0)
    for (test_id, _build), passed in builds.items():
        green[test_id] = green[test_id] + 1 if passed else 0
    return green


def quarantine_release_candidates(*, project_id: int, green_runs: int | None = None) -> list[TestCase]:
    """Quarantined tests whose latest ``green_runs`` builds since the quarantine were all green.

    Reads ``TestTriage.green_runs_since_quarantine`` as kept up to date by the flaky-score refresh
    (:func:`triage_green_runs_refresh`).

    Parameters
    ----------
    project_id : int
    green_runs : int, optional
        Defaults to ``settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS``.

    Returns
    -------
    list of TestCase
        Ordered by classname and name, with ``triage`` and ``component`` loaded.
    """
    if green_runs is None:
        green_runs = settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS
    if isinstance(green_runs, bool) or not isinstance(green_runs, int) or green_runs < 1:
        raise ValueError(ERR_GREEN_RUNS)
    return list(
        TestCase.objects.filter(
            project_id=project_id,
            triage__state=TriageState.QUARANTINED,
            triage__green_runs_since_quarantine__gte=green_runs,
        )
        .select_related("triage", "component")
        .order_by("classname", "name")
    )


def triage_labels(*, project_id: int) -> pd.Series:
    """Classifier labels from people's decisions: test_id -> 1 (confirmed/quarantined) or 0 (not flaky).

    Returns
    -------
    Series
        int64 values indexed by ``test_id``; unreviewed tests are absent; empty when nobody has triaged yet.
    """
    rows = TestTriage.objects.filter(project_id=project_id, state__in=list(STATE_LABELS)).values_list(
        "test_case_id", "state"
    )
    data = {test_id: STATE_LABELS[state] for test_id, state in rows}
    labels = pd.Series(data, dtype="int64", name="flaky")
    labels.index = labels.index.astype("int64")
    labels.index.name = "test_id"
    return labels.sort_index()
