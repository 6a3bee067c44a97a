"""The duplicate-defect detector on the demo generator's export, at a reduced size.

Ground truth: the generator's ground_truth.json ("duplicate_defects", pairs it planted itself). The export is
read with the csv module (RFC 4180 reference reader) through the generator's own column map. Precision and
recall over all pairs come from ``sklearn.metrics`` (general-purpose reference library). Target from the
issue: recall at least 0.8 with a short triage list (at most three suggestions per planted pair).
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import pandas as pd
import pytest
from sklearn.metrics import precision_score, recall_score

from analytics.core.duplicates import duplicate_candidates
from demo_fixtures.generate import generate
from demo_fixtures.scenario import ScenarioParams

# The demo's defect export at full size (400 defects over 150 days), with few tests and builds (fast).
PARAMS = ScenarioParams.for_scale("demo", n_tests=30, builds_per_day=1.0)


@pytest.fixture(scope="module")
def export(tmp_path_factory: pytest.TempPathFactory) -> tuple[pd.DataFrame, set[frozenset[str]]]:
    out: Path = tmp_path_factory.mktemp("demo_dups")
    generate(out, params=PARAMS)
    fields = json.loads((out / "defects.columnmap.json").read_text(encoding="utf-8"))["fields"]
    with open(out / "defects.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    frame = pd.DataFrame(
        {
            "key": [r[fields["key"]] for r in rows],
            "title": [r[fields["title"]] for r in rows],
            "description": [r[fields["description"]] for r in rows],
            "created": pd.to_datetime([r[fields["created"]] for r in rows], utc=True),
        }
    )
    truth = json.loads((out / "ground_truth.json").read_text(encoding="utf-8"))
    planted = {frozenset((p["original"], p["duplicate"])) for p in truth["duplicate_defects"]}
    return frame, planted


def test_planted_duplicates_are_found_in_a_short_list(export, capsys):
    frame, planted = export
    assert len(frame) == PARAMS.n_defects and len(planted) >= 3
    found = duplicate_candidates(frame)
    suggested = {frozenset(p) for p in zip(found["key_a"], found["key_b"], strict=True)}
    # precision / recall over every unordered pair, without building the n^2 list: the pairs that are
    # neither planted nor suggested are true negatives and do not enter either score.
    pairs = sorted(planted | suggested, key=sorted)
    truth = [p in planted for p in pairs]
    predicted = [p in suggested for p in pairs]
    precision = precision_score(truth, predicted, zero_division=0)  # scikit-learn metrics
    recall = recall_score(truth, predicted, zero_division=0)
    with capsys.disabled():
        print(
            f"\ndemo duplicates ({len(frame)} defects, {math.comb(len(frame), 2)} pairs): {len(planted)} planted, "
            f"{len(suggested)} suggested, precision {precision:.2f}, recall {recall:.2f}"
        )
    assert recall >= 0.8
    assert len(suggested) <= 3 * len(planted)
