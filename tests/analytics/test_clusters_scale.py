"""Scale behaviour of the refit (not its speed): 100 000 failures with 1 000 distinct signatures.

Ground truth built here: every failure repeats one of 1 000 distinct invented messages, so the
signature step and the TF-IDF vectoriser must see 1 000 texts, not 100 000. What they saw is recorded
by wrapping scikit-learn's ``Pipeline`` and the signature function; no timing is asserted.
"""

from __future__ import annotations

import itertools
import json
from datetime import timedelta

import pytest
from django.utils import timezone
from sklearn.pipeline import Pipeline

from analytics.models import FailureCluster, FailureSignature
from analytics.services import clusters as service
from ingest.bulk import rows_bulk_insert
from ingest.models import Build, TestCase, TestResult
from ingest.services.results import RESULT_COLUMNS
from tests.analytics.test_clusters_support import make_project

pytestmark = pytest.mark.django_db

N_FAILURES = 100_000
N_DISTINCT = 1_000

EXCEPTIONS = (
    "BerthLockError",
    "TideFeedError",
    "InvoiceError",
    "SensorBusError",
    "SlotError",
    "PontoonError",
    "MooringError",
    "HarbourFeeError",
    "WaitlistError",
    "ReceiptError",
)
VERBS = (
    "rejected",
    "dropped",
    "expired",
    "duplicated",
    "truncated",
    "reordered",
    "ignored",
    "locked",
    "misrouted",
    "stalled",
)
NOUNS = (
    "booking",
    "deposit",
    "reminder",
    "mooring",
    "invoice",
    "pontoon",
    "vessel",
    "waitlist",
    "refund",
    "tide",
)


def distinct_failures() -> list[tuple[str, str]]:
    return [
        (exception, f"{exception}: {noun} {verb} by the {NOUNS[(i + 3) % 10]} service")
        for i, (exception, verb, noun) in enumerate(itertools.product(EXCEPTIONS, VERBS, NOUNS))
    ]


def test_refit_signs_and_vectorises_each_distinct_failure_once(monkeypatch):
    project = make_project()
    start = timezone.now() - timedelta(days=30)
    builds = []
    for b in range(100):
        build = Build(
            project=project, external_id=f"nightly-{b:03d}", started_at=start + timedelta(hours=6 * b)
        )
        build.save()
        builds.append(build.pk)
    TestCase.objects.bulk_create(
        [
            TestCase(project=project, classname="berthwise.tests.Load", name=f"test_{t:04d}")
            for t in range(1000)
        ]
    )
    tests = list(TestCase.objects.filter(project=project).order_by("name").values_list("pk", flat=True))
    kinds = distinct_failures()
    assert len(set(kinds)) == N_DISTINCT
    rows = (
        (
            project.pk,
            builds[i // 1000],
            tests[i % 1000],
            "failed",
            None,
            1,
            kinds[(i * 7) % N_DISTINCT][0],
            kinds[(i * 7) % N_DISTINCT][1],
            "",
            "",
            "",
            json.dumps({}),
            "",
        )
        for i in range(N_FAILURES)
    )
    assert rows_bulk_insert(table=TestResult._meta.db_table, columns=RESULT_COLUMNS, rows=rows) == N_FAILURES

    signed: list[str] = []
    seen: list[int] = []
    real_signature = service.failure_signature
    real_fit_transform, real_transform = Pipeline.fit_transform, Pipeline.transform

    def spy_signature(**kwargs):
        signed.append(kwargs["message"])
        return real_signature(**kwargs)

    def spy_fit_transform(self, X, *args, **kwargs):
        seen.append(len(X))
        return real_fit_transform(self, X, *args, **kwargs)

    def spy_transform(self, X, *args, **kwargs):
        seen.append(len(X))
        return real_transform(self, X, *args, **kwargs)

    monkeypatch.setattr(service, "failure_signature", spy_signature)
    monkeypatch.setattr(Pipeline, "fit_transform", spy_fit_transform)
    monkeypatch.setattr(Pipeline, "transform", spy_transform)
    service.clusters_refresh(project_id=project.pk)

    assert len(signed) == len(set(signed)) == N_DISTINCT
    assert FailureSignature.objects.filter(project=project).count() == N_DISTINCT
    # The clustering's vectoriser was fitted on the 1 000 distinct texts, and no vectoriser call saw more.
    assert N_DISTINCT in seen and max(seen) == N_DISTINCT
    clusters = FailureCluster.objects.filter(project=project, failures__gt=0)
    assert sum(clusters.values_list("failures", flat=True)) == N_FAILURES
    assert not TestResult.objects.filter(project=project, signature="").exists()
