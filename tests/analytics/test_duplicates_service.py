"""Likely duplicate defects, stored after a defect import through the real import path.

Scenario (invented, the test's own ground truth): a marina berth-booking team's tracker export in which some
problems were reported twice, by different people in different words. Precision and recall over every
unordered pair of defects are computed with ``sklearn.metrics`` (general-purpose reference library) and
printed. A person's confirmed / dismissed decision must survive later refreshes.
"""

from __future__ import annotations

import csv
import itertools

import pytest
from sklearn.metrics import precision_score, recall_score

from analytics.models import DefectDuplicate
from analytics.services.duplicates import defect_duplicates_refresh
from ingest.models import Defect, Project
from ingest.parsers.defects import ColumnMap
from ingest.services.defects import defects_job_create, defects_job_run

DEFECTS = [
    (
        "BW-1",
        "Double booking accepted for the same berth and night",
        "Two boats were confirmed on berth C-14 for the night of 3 June; the overlap check missed it.",
    ),
    (
        "BW-2",
        "Harbour fee charged twice after changing arrival date",
        "Moving the arrival date by one day created a second fee line on the invoice.",
    ),
    (
        "BW-3",
        "Water level sensor on pontoon D reports zero",
        "The level gauge on pontoon D has shown 0 cm since the firmware update on Monday.",
    ),
    (
        "BW-4",
        "Mobile app crashes when opening the berth map offline",
        "With no network, tapping Map closes the app straight away on Android 14.",
    ),
    (
        "BW-5",
        "Reminder e-mail sent in the wrong language",
        "German guests receive the departure reminder in Dutch.",
    ),
    (
        "BW-6",
        "Monthly occupancy report misses the last day of the month",
        "The harbour-master occupancy report for May stops at 30 May.",
    ),
    (
        "BW-7",
        "Card payment times out for amounts above 1000 EUR",
        "Large payments spin for a minute and then fail with a gateway timeout.",
    ),
    (
        "BW-8",
        "Electricity meter readings arrive one hour late",
        "Shore power readings are stamped an hour behind since the clock change.",
    ),
    (
        "BW-9",
        "Password reset link expires immediately",
        "The link in the reset mail says it has expired even when opened at once.",
    ),
    (
        "BW-10",
        "Waiting list ignores boat length",
        "A 14 m yacht was offered a 10 m berth from the waiting list.",
    ),
    (
        "BW-11",
        "Push notification for gate code not delivered on iOS",
        "Guests on iPhones never get the gate code notification after check-in.",
    ),
    (
        "BW-12",
        "Invoice PDF shows VAT rate of last year",
        "The PDF invoice still prints 19 % VAT although the rate changed in January.",
    ),
    # re-reports of the same problems, in other words
    (
        "BW-13",
        "Same berth booked by two boats for one night",
        "Berth C-14 had two confirmed bookings overlapping on one night, the overlap check let it through.",
    ),
    (
        "BW-14",
        "Fee appears twice on invoice when arrival date is changed",
        "Guest changed the arrival date and now the harbour fee is on the invoice two times.",
    ),
    (
        "BW-15",
        "App closes when berth map is opened without network",
        "Opening the berth map while offline crashes the mobile app immediately.",
    ),
    (
        "BW-16",
        "Gate code push notification never arrives on iPhone",
        "iOS guests do not receive the gate code push notification at check-in.",
    ),
    (
        "BW-17",
        "Large card payments fail with timeout",
        "Card payment above 1000 EUR ends in a gateway timeout after spinning.",
    ),
]
PLANTED = {
    frozenset(p)
    for p in [("BW-1", "BW-13"), ("BW-2", "BW-14"), ("BW-4", "BW-15"), ("BW-11", "BW-16"), ("BW-7", "BW-17")]
}
CMAP = ColumnMap.from_dict(
    {
        "name": "desk",
        "fields": {"key": "Ticket", "title": "Summary", "description": "Details", "created": "Opened"},
        "date_format": "iso",
    }
)


@pytest.fixture
def imported(tmp_path, db):
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    path = tmp_path / "export.csv"
    with open(path, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh)  # RFC 4180 reference writer
        writer.writerow(["Ticket", "Summary", "Details", "Opened"])
        for n, (key, title, details) in enumerate(DEFECTS):
            writer.writerow([key, title, details, f"2026-06-{1 + n:02d}T09:00:00Z"])
    with open(path, "rb") as fh:
        job = defects_job_create(project=project, name="export.csv", stream=fh, column_map=CMAP)
    defects_job_run(job=job, refresh=False)
    return project


def stored_pairs(project) -> dict[frozenset, DefectDuplicate]:
    rows = DefectDuplicate.objects.filter(project=project).select_related("defect_a", "defect_b")
    return {frozenset((d.defect_a.key, d.defect_b.key)): d for d in rows}


def test_planted_duplicates_are_found_with_precision_and_recall(imported, capsys):
    found = defect_duplicates_refresh(project_id=imported.pk)
    pairs = stored_pairs(imported)
    assert found == len(pairs)
    assert all(d.status == DefectDuplicate.Status.SUGGESTED and 0 < d.score <= 1 for d in pairs.values())
    assert all(d.defect_a.key < d.defect_b.key for d in pairs.values())
    keys = sorted(k for k, _, _ in DEFECTS)
    every_pair = [frozenset(p) for p in itertools.combinations(keys, 2)]
    truth = [p in PLANTED for p in every_pair]
    predicted = [p in pairs for p in every_pair]
    precision = precision_score(truth, predicted, zero_division=0)  # scikit-learn metrics as the reference
    recall = recall_score(truth, predicted, zero_division=0)
    with capsys.disabled():
        print(f"\nduplicate defects: {len(pairs)} flagged, precision {precision:.2f}, recall {recall:.2f}")
    assert recall >= 0.8 and precision >= 0.8


def test_refresh_keeps_a_persons_decision_and_adds_nothing_twice(imported):
    defect_duplicates_refresh(project_id=imported.pk)
    pairs = stored_pairs(imported)
    confirmed, dismissed = pairs[frozenset(("BW-11", "BW-16"))], pairs[frozenset(("BW-2", "BW-14"))]
    confirmed.status, confirmed.score = DefectDuplicate.Status.CONFIRMED, 0.123
    confirmed.save()
    dismissed.status = DefectDuplicate.Status.DISMISSED
    dismissed.save()
    # the dismissed pair's texts change so that they no longer look alike: the decision still stays
    Defect.objects.filter(key="BW-14").update(title="Tide table wrong", description="Low tide shown at noon.")
    defect_duplicates_refresh(project_id=imported.pk)
    after = stored_pairs(imported)
    assert after[frozenset(("BW-11", "BW-16"))].status == DefectDuplicate.Status.CONFIRMED
    assert after[frozenset(("BW-11", "BW-16"))].score == 0.123
    assert after[frozenset(("BW-2", "BW-14"))].status == DefectDuplicate.Status.DISMISSED
    assert set(after) == set(pairs)  # nothing added twice, nothing a person decided removed
    # a suggestion whose texts no longer match is withdrawn
    Defect.objects.filter(key="BW-15").update(title="Tide table wrong", description="Low tide shown at noon.")
    defect_duplicates_refresh(project_id=imported.pk)
    assert frozenset(("BW-4", "BW-15")) not in stored_pairs(imported)
