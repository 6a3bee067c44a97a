"""Defect texts of the demo generator: unrelated reports differ, re-reports of one problem look alike.

Ground truth is the generator's own ground_truth.json ("duplicate_defects", "defect_cause_matches") and the
problems drawn by demo_fixtures.defect_texts. Similarities are TF-IDF cosines computed with scikit-learn's
``TfidfVectorizer`` and ``cosine_similarity`` (general-purpose reference library), on words of two or more
letters (numbers and ids left out, as in duplicate-report retrieval: Runeson et al., ICSE 2007).
What a duplicate is (the same problem re-filed by another person, same component, some days later, partly
reworded) is common practice in defect triage.
"""

from __future__ import annotations

import csv
import itertools
import json
import random
from collections import defaultdict
from datetime import datetime
from pathlib import Path

import numpy as np
import pytest
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.metrics.pairwise import cosine_similarity

from demo_fixtures.defect_texts import (
    CAUSE_REPORTS,
    OBJECTS,
    SITUATIONS,
    SYMPTOMS,
    Problem,
    ProblemDrawer,
    report_text,
    reworded,
)
from demo_fixtures.generate import generate
from demo_fixtures.scenario import ScenarioParams
from demo_fixtures.texts import CAUSES

PARAMS = ScenarioParams.for_scale("demo", n_tests=30, builds_per_day=1.0)
WORDS = r"(?u)(?<![\w])[^\W\d_]{2,}(?![\w])"


@pytest.fixture(scope="module")
def out(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("demo_texts")
    generate(folder, params=PARAMS)
    return folder


@pytest.fixture(scope="module")
def rows(out: Path) -> dict[str, dict[str, str]]:
    fields = json.loads((out / "defects.columnmap.json").read_text(encoding="utf-8"))["fields"]
    with open(out / "defects.csv", newline="", encoding="utf-8") as fh:
        return {
            r[fields["key"]]: {name: r[column] for name, column in fields.items()} for r in csv.DictReader(fh)
        }


@pytest.fixture(scope="module")
def truth(out: Path) -> dict:
    return json.loads((out / "ground_truth.json").read_text(encoding="utf-8"))


def similarities(rows: dict[str, dict[str, str]]) -> tuple[list[str], np.ndarray]:
    keys = list(rows)
    texts = [f"{rows[k]['title']}\n{rows[k]['description']}" for k in keys]
    vec = TfidfVectorizer(token_pattern=WORDS, stop_words="english", sublinear_tf=True)
    return keys, cosine_similarity(vec.fit_transform(texts))


def component(row: dict[str, str], aliases: dict[str, str]) -> str:
    first = row["components"].split(";")[0].strip()
    return aliases.get(first, first)


def test_unrelated_defects_are_not_copies_of_one_template(rows):
    titles = [r["title"] for r in rows.values()]
    assert len(set(titles)) == len(titles)  # no two reports with one title
    keys, sims = similarities(rows)
    upper = sims[np.triu_indices(len(keys), 1)]
    # a few near pairs at most (re-reports and reports of one failure cause); the earlier generator had
    # thousands of pairs above 0.5 among 400 defects, because many reports shared one headline
    assert (upper >= 0.5).mean() < 0.002


def test_planted_duplicates_are_later_reports_by_someone_else_in_the_same_component(out, rows, truth):
    doc = json.loads((out / "components.json").read_text(encoding="utf-8"))["components"]
    aliases = {a: c["name"] for c in doc for a in c["aliases"]}
    assert len(truth["duplicate_defects"]) >= 3
    for pair in truth["duplicate_defects"]:
        orig, dup = rows[pair["original"]], rows[pair["duplicate"]]
        assert component(orig, aliases) == component(dup, aliases)
        gap = datetime.fromisoformat(dup["created"]) - datetime.fromisoformat(orig["created"])
        assert 0 < gap.total_seconds() <= 20 * 86400
        assert dup["reporter"] != orig["reporter"]
        assert dup["title"] != orig["title"]  # reworded, not copied


def test_each_planted_duplicate_is_most_like_its_original(rows, truth):
    keys, sims = similarities(rows)
    index = {k: i for i, k in enumerate(keys)}
    np.fill_diagonal(sims, 0.0)
    first = 0
    for pair in truth["duplicate_defects"]:
        o, d = index[pair["original"]], index[pair["duplicate"]]
        earlier = [i for i, k in enumerate(keys) if rows[k]["created"] < rows[pair["duplicate"]]["created"]]
        first += int(max(earlier, key=lambda i: sims[d, i]) == o)
    assert first >= 0.8 * len(truth["duplicate_defects"])


def test_reports_of_one_failure_cause_tell_different_consequences(rows, truth):
    by_cause = defaultdict(list)
    for match in truth["defect_cause_matches"]:
        by_cause[match["cause"]].append(rows[match["defect"]]["title"])
    assert by_cause
    for titles in by_cause.values():
        assert len(set(titles)) == len(titles)


def test_every_failure_cause_has_its_further_reports():
    assert set(CAUSE_REPORTS) == {c.id for c in CAUSES}


def test_problem_drawer_keeps_problems_of_a_component_apart():
    # As long as there is room, no two problems of one component share two of (object, symptom, situation).
    drawer = ProblemDrawer(random.Random(3))
    for name in OBJECTS:
        problems = [drawer.draw(name) for _ in range(40)]
        for a, b in itertools.combinations(problems, 2):
            shared = (a.obj == b.obj) + (a.symptom == b.symptom) + (a.situation == b.situation)
            assert shared <= 1, (a, b)


def test_a_re_report_changes_some_wording_and_keeps_the_rest():
    rnd = random.Random(5)
    for _ in range(200):
        before = (rnd.randrange(2), rnd.randrange(3), rnd.randrange(2))
        after = reworded(before, rnd)
        changed = sum(x != y for x, y in zip(before, after, strict=True))
        assert 1 <= changed <= 2


def test_report_text_names_the_problem_and_the_customer():
    problem = Problem("Mobile App", obj=0, symptom=1, situation=0)
    title, text = report_text(
        problem,
        random.Random(1),
        vessel="Sea Otter",
        skipper="Berit Vane",
        device="on an iPad",
        version="8.1.0",
    )
    assert OBJECTS["Mobile App"][0][0].removeprefix("the ") in title.lower()
    assert SYMPTOMS[1][0][0] in title
    assert SITUATIONS["Mobile App"][0][0] in title.lower()
    assert "Sea Otter" in text and "Berit Vane" in text and "on an iPad" in text
