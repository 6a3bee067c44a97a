"""Small data built in the tests for the "Flaky tests" and "Failure causes" page tests (no tests here)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from analytics.models import TestHealth
from ingest.models import Build, Component, TestCase, TestResult

XSS = "<img src=x onerror=alert(1)>"
START = datetime(2026, 10, 5, 9, 0, tzinfo=UTC)




def make_build(project, n: int, *, commit: str | None = None, external_id: str | None = None) -> Build:
    return Build.objects.create(project=project, external_id=external_id or f"#{n}",
                                commit=commit or f"c{n:06x}", branch="main", started_at=START + timedelta(hours=n))


def make_test(project, name: str, *, classname: str = "berthwise.bookings", component: Component | None = None,
              score: float = 0.5, verdict: str = "flaky", runs: int = 10, failures: int = 2,
              recent: str = "PPFP", last_failure_at=None) -> TestCase:
    test = TestCase.objects.create(project=project, classname=classname, name=name, component=component)
    TestHealth.objects.create(
        test_case=test, project=project, score=score, verdict=verdict, scored_by="rules", runs=runs,
        failures=failures, last_failure_at=last_failure_at, recent_outcomes=recent,
        evidence={"flip_rate": 0.25, "same_commit_contradictions": 1},
        explanation=[f"Failed {failures} times in {runs} runs.", "Passed and failed on the same commit 1 time."],
        computed_at=START,
    )
    return test


def make_result(project, build, test, outcome: str, *, attempt: int = 1, duration: float = 1.0,
                message: str = "", signature: str = "") -> TestResult:
    return TestResult.objects.create(project=project, build=build, test_case=test, outcome=outcome,
                                     attempt=attempt, duration=duration, message=message, signature=signature)
