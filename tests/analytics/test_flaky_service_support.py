"""Small histories written straight into the database for the flaky-service, triage, export and API tests.

Invented data (the Berthwise marina scenario); each test states the ground truth it builds.
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest
from django.utils import timezone

from ingest.models import Build, Component, Project, TestCase, TestResult

CLASSNAME = "io.berthwise.booking.BerthApiTest"


def make_project(slug: str = "berthwise") -> Project:
    return Project.objects.create(slug=slug, name=slug.capitalize())


def add_history(
    project: Project,
    outcomes: dict[str, list[str]],
    *,
    start=None,
    builds_per_commit: int = 1,
    component: str | None = "Booking API",
    classname: str = CLASSNAME,
    prefix: str = "b",
) -> dict[str, TestCase]:
    """One build per position, an hour apart from ``start`` (default: ten days ago).

    ``outcomes[name][i]`` are the attempts of test ``name`` in build ``i``: a string over P (passed),
    F (failed), E (error), S (skipped), e.g. ``"FP"`` = failed, then passed on rerun; ``""`` = not run.
    Build ``i`` is on commit ``c{i // builds_per_commit}`` of ``main``.
    """
    start = start or timezone.now() - timedelta(days=10)
    comp = Component.objects.get_or_create(project=project, name=component)[0] if component else None
    tests = {
        name: TestCase.objects.get_or_create(project=project, classname=classname, name=name,
                                             defaults={"component": comp})[0]
        for name in outcomes
    }
    n_builds = max(len(v) for v in outcomes.values())
    existing = Build.objects.filter(project=project).count()
    builds = []
    for i in range(n_builds):
        build = Build(project=project, external_id=f"{prefix}-{existing + i}", commit=f"c{i // builds_per_commit:03d}",
                      branch="main", started_at=start + timedelta(hours=i))
        build.save()
        builds.append(build)
    code = {"P": "passed", "F": "failed", "E": "error", "S": "skipped"}
    results = []
    for name, per_build in outcomes.items():
        for build, attempts in zip(builds, per_build, strict=False):
            for attempt, letter in enumerate(attempts, start=1):
                failed = letter in "FE"
                results.append(TestResult(
                    project=project, build=build, test_case=tests[name], outcome=code[letter], attempt=attempt,
                    duration=0.5, failure_type="AssertionError" if failed else "",
                    message="berth 7 not free" if failed else "",
                ))
    TestResult.objects.bulk_create(results, batch_size=2000)
    return tests


def simulated_outcomes(seed: int = 11, *, n_builds: int = 40) -> tuple[dict[str, list[str]], dict[str, tuple]]:
    """Stable, broken-at-a-commit and intermittently failing tests; truth = name -> (kind, failure rate)."""
    rng = np.random.default_rng(seed)
    outcomes: dict[str, list[str]] = {}
    truth: dict[str, tuple] = {}
    for i in range(40):
        outcomes[f"test_stable_{i:02d}"] = ["P"] * n_builds
        truth[f"test_stable_{i:02d}"] = ("stable", 0.0)
    for i in range(25):
        at = int(rng.integers(5, n_builds - 5))
        outcomes[f"test_broken_{i:02d}"] = ["P"] * at + ["F"] * (n_builds - at)
        truth[f"test_broken_{i:02d}"] = ("broken", 1.0)
    for i in range(70):
        rate = float(rng.uniform(0.05, 0.35))
        outcomes[f"test_flaky_{i:02d}"] = ["F" if rng.random() < rate else "P" for _ in range(n_builds)]
        truth[f"test_flaky_{i:02d}"] = ("flaky", rate)
    return outcomes, truth


@pytest.mark.django_db
def test_runs_frame_leaves_out_results_of_a_build_committed_between_its_two_reads():
    # runs_frame reads the window's builds, then the results: a build (with results) that appears between the
    # two statements must not lend its results another build's commit and start. Simulated by writing one
    # through a hook on the second statement.
    from datetime import UTC, datetime

    from django.db import connection

    from analytics.selectors import runs_frame
    from ingest.models import Build, Project, TestCase, TestResult

    project = Project.objects.create(slug="p", name="P")
    test = TestCase.objects.create(project=project, name="t")
    early = Build.objects.create(project=project, external_id="1", commit="a" * 40,
                                 started_at=datetime(2026, 10, 1, tzinfo=UTC))
    TestResult.objects.create(project=project, build=early, test_case=test, outcome="passed")
    state = {"done": False}

    def late_build(execute, sql, params, many, context):
        if not state["done"] and "r.test_case_id" in sql:
            state["done"] = True
            late = Build.objects.create(project=project, external_id="2", commit="b" * 40,
                                        started_at=datetime(2026, 10, 2, tzinfo=UTC))
            TestResult.objects.create(project=project, build=late, test_case=test, outcome="failed")
        return execute(sql, params, many, context)

    with connection.execute_wrapper(late_build):
        frame = runs_frame(project_id=project.pk)
    assert state["done"]
    assert list(frame["build_id"]) == [early.pk] and list(frame["commit"]) == ["a" * 40]
    assert len(runs_frame(project_id=project.pk)) == 2  # the next refresh sees both
