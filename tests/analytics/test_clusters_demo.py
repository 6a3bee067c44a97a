"""Demo check: the generated Berthwise history, ingested through ``ingest_results --manifest``, groups by the
failure causes the generator planted (demo_fixtures ground_truth.json).

Truth per failure: a failed or errored result of a test that a planted cause affects, whose message (or
traceback) matches one of that cause's templates (the ``{placeholders}`` match anything). Agreement is
measured with scikit-learn's ``adjusted_rand_score`` (sklearn.metrics).

A cause can be planted in two languages: e.g. "disk-full" is a ``java.io.IOException`` in a JVM suite and an
``OSError`` in a Python suite, with nothing but a few words in common. The check therefore scores two
partitions: by cause and language template (what text clustering can recover, asserted >= 0.9), and by
cause alone (printed; 0.87 at this size, 0.91 on the full demo; asserted >= 0.8 so a regression shows).

Defect suggestions are checked against the planted defect -> cause matches of the same file: recall is
printed; recall and precision must both stay >= 0.5 (floors set by us, not by the issue: the generator's
defect texts are being reworked, recall 0.69-0.84 and precision 0.87-0.92 seen so far). The incremental path (each build assigned in order, no refit) is scored
too, by cause and language template, with a floor of 0.8 (it is the refit that must reach 0.9).
"""

from __future__ import annotations

import csv
import io
import json
import re
from collections import Counter, defaultdict
from pathlib import Path

import pytest
from django.core.management import call_command
from django.utils import timezone
from sklearn.metrics import adjusted_rand_score

from analytics.models import ClusterDefectLink, FailureCluster, FailureSignature
from analytics.services.clusters import clusters_assign_build, clusters_refresh
from demo_fixtures.generate import generate
from demo_fixtures.scenario import ScenarioParams
from ingest.models import Build, Defect, Project, TestResult

pytestmark = pytest.mark.django_db

# Reduced size: every planted cause occurs, the ingest stays a few seconds.
PARAMS = ScenarioParams.for_scale("demo", n_tests=120, n_days=30, n_defects=60)


def _pattern(template: str) -> re.Pattern[str]:
    parts = re.split(r"\{\w+\}", template)
    return re.compile(".*?".join(re.escape(part) for part in parts), re.S)


def planted_causes(truth: dict) -> list[tuple[str, str, set[tuple[str, str]], re.Pattern[str]]]:
    causes = []
    for cause in truth["failure_causes"]:
        tests = {(t["classname"], t["name"]) for t in cause["tests"]}
        for language, template in cause["templates"].items():
            causes.append((cause["id"], language, tests, _pattern(template["message"])))
    return causes


def test_demo_failures_group_by_their_planted_cause(tmp_path: Path, capsys):
    generate(tmp_path, params=PARAMS)
    truth = json.loads((tmp_path / "ground_truth.json").read_text(encoding="utf-8"))
    call_command(
        "ingest_results", manifest=tmp_path / "manifest.csv", project="berthwise", stdout=io.StringIO()
    )
    project = Project.objects.get(slug="berthwise")
    causes = planted_causes(truth)
    # Start from unclustered failures, whatever analytics refresh the backfill itself ran.
    FailureSignature.objects.filter(project=project).delete()
    FailureCluster.objects.filter(project=project).delete()
    TestResult.objects.filter(project=project).update(signature="")

    def score() -> tuple[list[str], list[str], list[int]]:
        cluster_of = dict(FailureSignature.objects.filter(project=project).values_list("key", "cluster_id"))
        rows = TestResult.objects.filter(project=project, outcome__in=["failed", "error"]).values_list(
            "test_case__classname", "test_case__name", "message", "details", "signature"
        )
        by_cause, by_template, predicted = [], [], []
        for classname, name, message, details, signature in rows:
            hits = [
                (cause, language)
                for cause, language, tests, pattern in causes
                if (classname, name) in tests and (pattern.search(message) or pattern.search(details))
            ]
            if hits:
                by_cause.append(hits[0][0])
                by_template.append("/".join(hits[0]))
                predicted.append(cluster_of[signature])
        return by_cause, by_template, predicted

    # 1. Incremental only: each build placed in history order, as the per-ingest task does.
    for build_id in (
        Build.objects.filter(project=project).order_by("started_at", "id").values_list("pk", flat=True)
    ):
        clusters_assign_build(project_id=project.pk, build_id=build_id)
    _, by_template, predicted = score()
    ari_incremental = adjusted_rand_score(by_template, predicted)
    # 2. Full refit on top of it.
    clusters_refresh(project_id=project.pk)
    by_cause, by_template, predicted = score()
    assert len(set(by_cause)) >= 10, "the reduced demo should contain most planted causes"
    assert len(by_cause) >= 200
    ari_template = adjusted_rand_score(by_template, predicted)
    ari_cause = adjusted_rand_score(by_cause, predicted)
    with capsys.disabled():
        print(
            f"\ndemo failure causes: {len(by_cause)} failures of {len(set(by_cause))} planted causes; "
            f"ARI by cause and language {ari_template:.3f}, by cause alone {ari_cause:.3f}"
        )
    with capsys.disabled():
        print(f"incremental assignment alone (no refit): ARI by cause and language {ari_incremental:.3f}")
    assert ari_template >= 0.9
    assert ari_cause >= 0.8
    assert ari_incremental >= 0.8  # the refit above corrects it; seeds 3, 7, 11 give 0.95, 0.94, 0.86

    # Defect suggestions: the export's defects (title and description, read with the csv module through
    # the generator's column map) against the planted defect -> cause matches.
    column_map = json.loads((tmp_path / "defects.columnmap.json").read_text(encoding="utf-8"))["fields"]
    with open(tmp_path / "defects.csv", newline="", encoding="utf-8") as fh:
        Defect.objects.bulk_create(
            Defect(
                project=project,
                key=row[column_map["key"]],
                title=row[column_map["title"]],
                description=row[column_map["description"]],
                created_at=timezone.now(),
            )
            for row in csv.DictReader(fh)
        )
    clusters_refresh(project_id=project.pk)
    votes: dict[int, Counter] = defaultdict(Counter)
    for cause, cluster_id in zip(by_cause, predicted, strict=True):
        votes[cluster_id][cause] += 1
    cause_of_cluster = {cluster_id: counts.most_common(1)[0][0] for cluster_id, counts in votes.items()}
    planted = {(m["defect"], m["cause"]) for m in truth["defect_cause_matches"]}
    suggested = {
        (key, cause_of_cluster.get(cluster_id))
        for key, cluster_id in ClusterDefectLink.objects.filter(cluster__project=project).values_list(
            "defect__key", "cluster_id"
        )
    }
    found = planted & suggested
    recall = len(found) / len(planted)
    on_causes = {pair for pair in suggested if pair[1] is not None}
    precision = len(found) / max(1, len(on_causes))
    with capsys.disabled():
        print(
            f"defect suggestions: {len(found)} of {len(planted)} planted matches found (recall {recall:.2f}); "
            f"precision on planted-cause clusters {precision:.2f}"
        )
    assert recall >= 0.5 and precision >= 0.5
