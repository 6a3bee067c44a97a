"""Checks of the demo-data generator: determinism, readable reports, and files that agree with the planted truth.

External references used here:
* junitparser (general-purpose JUnit-XML library) for per-file counts and for the Surefire rerun elements
  (``junitparser.xunit2``: flakyFailure/flakyError/rerunFailure/rerunError);
* the Surefire 3.0 report schema and pytest's ``--junitxml`` writer as summarised in REFERENCES.md section 8;
* Goel & Okumoto (1979), mean value function m(t) = a (1 - exp(-b t)), for the defect-inflow check;
* scipy.stats for the binomial / normal tail probabilities.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import re
from collections import Counter, defaultdict
from datetime import UTC, datetime
from pathlib import Path

import pytest
from junitparser import Error, Failure, Skipped, xunit2
from scipy import stats

from demo_fixtures.generate import MANIFEST_COLUMNS, generate, main
from demo_fixtures.scenario import ScenarioParams

# Small enough to run in a few seconds, big enough that reruns and every dialect occur.
SMALL = ScenarioParams(seed=11, n_tests=150, n_days=45, builds_per_day=4.0, n_defects=120)


@pytest.fixture(scope="module")
def out(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    generate(folder, params=SMALL)
    return folder


@pytest.fixture(scope="module")
def manifest(out: Path) -> list[dict[str, str]]:
    with open(out / "manifest.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="module")
def truth(out: Path) -> dict:
    return json.loads((out / "ground_truth.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def parsed(out: Path, manifest: list[dict[str, str]]) -> dict[str, tuple[list, list[str], dict[str, int]]]:
    """Every report through the project's own reader: build -> (results, warnings, per-element totals)."""
    from ingest.parsers.junit import JUnitReader

    done = {}
    for row in manifest:
        reader = JUnitReader(out / row["file"], filename=row["file"])
        results = list(reader)
        done[row["build"]] = (results, reader.warnings, dict(reader.parsed_totals))
    return done


def _tree_hashes(folder: Path) -> dict[str, str]:
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _final_outcomes(results: list) -> dict[tuple[str, str], str]:
    """Per test: 'passed' if any attempt passed, else the first attempt's outcome."""
    by_test: dict[tuple[str, str], list[str]] = defaultdict(list)
    for r in results:
        by_test[(r.classname, r.name)].append(r.outcome)
    return {k: ("passed" if "passed" in v else v[0]) for k, v in by_test.items()}


# -- determinism ---------------------------------------------------------------------------------------------


def test_two_runs_write_byte_identical_files(out: Path, tmp_path: Path) -> None:
    generate(tmp_path, params=SMALL)
    first, second = _tree_hashes(out), _tree_hashes(tmp_path)
    assert len(first) > 10
    assert first == second


def test_another_seed_writes_other_reports(out: Path, tmp_path: Path) -> None:
    other = ScenarioParams(seed=12, n_tests=150, n_days=45, builds_per_day=4.0, n_defects=120)
    generate(tmp_path, params=other)
    assert _tree_hashes(out)["manifest.csv"] != _tree_hashes(tmp_path)["manifest.csv"]


def test_stale_reports_of_an_earlier_run_are_removed(tmp_path: Path) -> None:
    small = ScenarioParams(seed=3, n_tests=40, n_days=14, builds_per_day=2.0, n_defects=20)
    (tmp_path / "reports").mkdir()
    stale = tmp_path / "reports" / "pr-checks-999999.xml"
    stale.write_text("<testsuite/>")
    keep = tmp_path / "reports" / "notes.txt"
    keep.write_text("mine")
    generate(tmp_path, params=small)
    assert not stale.exists()
    assert keep.exists()


# -- reports -------------------------------------------------------------------------------------------------


def test_every_report_reads_without_warnings(parsed: dict) -> None:
    assert parsed
    noisy = {build: warnings for build, (_, warnings, _) in parsed.items() if warnings}
    assert noisy == {}


def test_per_file_counts_agree_with_junitparser(
    out: Path, manifest: list[dict[str, str]], parsed: dict
) -> None:
    # Reference: junitparser. Count convention: one per testcase element, by that element's final result
    # (failure / error / skipped children); Surefire rerun and flaky children are not final results
    # (Surefire 3.0 schema, REFERENCES.md section 8).
    for row in manifest:
        xml = xunit2.JUnitXml.fromfile(str(out / row["file"]))
        suites = [xml] if isinstance(xml, xunit2.TestSuite) else list(xml)
        counts = Counter(tests=0, failures=0, errors=0, skipped=0)
        attempts = 0
        for suite in suites:
            for case in suite:
                final = case.result
                counts["tests"] += 1
                counts["failures"] += any(isinstance(r, Failure) for r in final)
                counts["errors"] += any(isinstance(r, Error) for r in final)
                counts["skipped"] += any(isinstance(r, Skipped) for r in final) and not any(
                    isinstance(r, (Failure, Error)) for r in final
                )
                attempts += 1 + len(case.interim_result)
        results, _, totals = parsed[row["build"]]
        assert {k: totals.get(k, 0) for k in counts} == dict(counts), row["file"]
        # every attempt (testcase element plus each flaky/rerun child) is one result of our reader
        assert len(results) == attempts, row["file"]


def test_reports_cover_the_three_dialects_and_both_rerun_styles(
    out: Path, manifest: list[dict[str, str]]
) -> None:
    texts = [(out / row["file"]).read_text(encoding="utf-8") for row in manifest]
    bare_testsuite = [t for t in texts if re.search(r"\?>\s*<testsuite[ >]", t)]
    pytest_style = [t for t in texts if '<testsuites name="pytest tests"><testsuite name="pytest"' in t]
    ant_nested = [t for t in texts if re.search(r"<testsuite name=\"[^\"]+\"[^>]*>\n  <testsuite name=", t)]
    assert bare_testsuite and pytest_style and ant_nested
    # pytest xunit2: only classname and name (and time) on testcase; failure without a type attribute
    for t in pytest_style:
        assert not re.search(r"<testcase classname=\"[^\"]*\" name=\"[^\"]*\" time=\"[^\"]*\" \w", t)
        assert not re.search(r"<failure [^>]*type=", t)
    joined = "\n".join(texts)
    assert "<flakyFailure " in joined or "<flakyError " in joined
    assert "<rerunFailure " in joined or "<rerunError " in joined
    assert "<stackTrace>" in joined
    assert 'type="pytest.skip"' in joined
    # pytest-rerun style: the same test as several testcase elements of one report
    repeated = 0
    for t in texts:
        if '<testsuite name="pytest"' in t:
            keys = re.findall(r'<testcase classname="([^"]+)" name="([^"]+)"', t)
            repeated += sum(1 for n in Counter(keys).values() if n > 1)
    assert repeated > 0


def test_failure_texts_vary_per_occurrence(parsed: dict) -> None:
    details = [
        r.details for results, _, _ in parsed.values() for r in results if r.outcome in ("failed", "error")
    ]
    assert len(details) > 20
    assert len(set(details)) > len(details) * 0.3
    joined = "\n".join(details)
    assert 'File "' in joined and ", line " in joined  # Python tracebacks
    assert "\tat " in joined and "Caused by: " in joined  # JVM stack traces


def test_every_classname_maps_to_exactly_one_component(out: Path, parsed: dict) -> None:
    doc = json.loads((out / "components.json").read_text(encoding="utf-8"))
    assert doc["project"]["slug"] == "berthwise"
    prefixes = [(c["name"], p) for c in doc["components"] for p in c["classname_prefixes"]]
    seen = {r.classname for results, _, _ in parsed.values() for r in results}
    for classname in seen:
        owners = {name for name, p in prefixes if classname.startswith(p)}
        assert len(owners) == 1, classname


# -- manifest ------------------------------------------------------------------------------------------------


def test_manifest_lists_every_report_once_in_order(out: Path, manifest: list[dict[str, str]]) -> None:
    with open(out / "manifest.csv", newline="", encoding="utf-8") as fh:
        assert tuple(next(csv.reader(fh))) == MANIFEST_COLUMNS
    files = [row["file"] for row in manifest]
    assert len(files) == len(set(files)) == len({row["build"] for row in manifest})
    on_disk = {f"reports/{p.name}" for p in (out / "reports").glob("*.xml")}
    assert set(files) == on_disk
    started = [row["started"] for row in manifest]
    assert all(re.fullmatch(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z", s) for s in started)
    assert started == sorted(started)
    assert started[-1] < "2026-11-30"
    assert all(re.fullmatch(r"[0-9a-f]{40}", row["commit"]) for row in manifest)
    assert {row["ci_job"] for row in manifest} == {"pr-checks", "main-merge", "nightly-full"}
    assert {row["branch"] for row in manifest if row["ci_job"] != "pr-checks"} == {"main"}


# -- ground truth against the reports -----------------------------------------------------------------------------


def test_regressions_fail_in_every_main_build_between_their_commits(
    manifest: list[dict[str, str]], parsed: dict, truth: dict
) -> None:
    order = {c["commit"]: i for i, c in enumerate(truth["main_history"])}
    main_builds = [row for row in manifest if row["branch"] == "main"]
    checked_failing = checked_passing = 0
    for reg in truth["regressions"] + truth["broken_from_start"]:
        intro = order[reg["introduced_at_commit"]] if reg["introduced_at_commit"] else -1
        fix = order[reg["fixed_at_commit"]] if reg["fixed_at_commit"] else math.inf
        for row in main_builds:
            finals = _final_outcomes(parsed[row["build"]][0])
            for test in reg["tests"]:
                outcome = finals.get((test["classname"], test["name"]))
                if outcome is None:
                    continue  # this build did not run the test
                if intro <= order[row["commit"]] < fix:
                    assert outcome in ("failed", "error"), (reg["id"], row["build"])
                    checked_failing += 1
                else:
                    assert outcome == "passed", (reg["id"], row["build"])
                    checked_passing += 1
    assert checked_failing > 0 and checked_passing > 0


def test_only_planted_tests_ever_fail(parsed: dict, truth: dict) -> None:
    planted = {(t["classname"], t["name"]) for t in truth["flaky_tests"]}
    for group in ("regressions", "broken_from_start", "failure_causes"):
        planted |= {(t["classname"], t["name"]) for item in truth[group] for t in item["tests"]}
    skipped = {(t["classname"], t["name"]) for t in truth["always_skipped"]}
    failing, skipping = set(), set()
    for results, _, _ in parsed.values():
        for r in results:
            if r.outcome in ("failed", "error"):
                failing.add((r.classname, r.name))
            elif r.outcome == "skipped":
                skipping.add((r.classname, r.name))
    assert failing and failing <= planted
    assert skipping == skipped


def test_flaky_failure_counts_match_their_planted_rates(
    manifest: list[dict[str, str]], parsed: dict, truth: dict
) -> None:
    # First attempts of flaky tests outside every failure cause and regression fail independently with the
    # planted rate: the count is Poisson-binomial; normal approximation (common practice), |z| < 4.
    others = {(t["classname"], t["name"]) for c in truth["failure_causes"] for t in c["tests"]}
    rates = {
        (t["classname"], t["name"]): t["failure_rate"]
        for t in truth["flaky_tests"]
        if (t["classname"], t["name"]) not in others
    }
    observed = 0
    mean = var = 0.0
    for row in manifest:
        first_seen = set()
        for r in parsed[row["build"]][0]:
            key = (r.classname, r.name)
            if key in rates and key not in first_seen:
                first_seen.add(key)
                observed += r.outcome in ("failed", "error")
                mean += rates[key]
                var += rates[key] * (1 - rates[key])
    assert var > 5
    z = (observed - mean) / math.sqrt(var)
    assert abs(z) < 4, (observed, mean)


def test_growing_component_gets_slower(manifest: list[dict[str, str]], parsed: dict, truth: dict) -> None:
    prefix = {"Harbour-Master Reports": "harbour_reports.tests."}[truth["duration_growth"]["component"]]
    nightly = [row for row in manifest if row["ci_job"] == "nightly-full"]
    totals = [
        sum(
            r.duration
            for r in parsed[row["build"]][0]
            if r.classname.startswith(prefix) and r.outcome == "passed"
        )
        for row in nightly
    ]
    third = len(totals) // 3
    assert sum(totals[-third:]) > 1.3 * sum(totals[:third])


# -- defects ---------------------------------------------------------------------------------------------------------


def test_defect_export_reads_with_its_column_map(out: Path, truth: dict) -> None:
    from ingest.parsers.defects import ColumnMap, DefectRow, defect_rows

    cmap_doc = json.loads((out / "defects.columnmap.json").read_text(encoding="utf-8"))
    assert set(cmap_doc) == {
        "name",
        "fields",
        "closed_statuses",
        "open_statuses",
        "severity_order",
        "priority_order",
        "multi_value_delimiter",
        "date_format",
    }
    cmap = ColumnMap.from_dict(cmap_doc)
    export = defect_rows(out / "defects.csv", cmap, now=datetime(2026, 12, 1, tzinfo=UTC))
    rows = list(export)
    assert all(isinstance(r, DefectRow) for r in rows), [r for r in rows if not isinstance(r, DefectRow)][:3]
    assert len(rows) == SMALL.n_defects
    assert export.file_warnings == []
    components = json.loads((out / "components.json").read_text(encoding="utf-8"))["components"]
    known = {c["name"] for c in components} | {a for c in components for a in c["aliases"]}
    assert {name for r in rows for name in r.components} <= known
    keys = {r.key for r in rows}
    for pair in truth["duplicate_defects"]:
        assert {pair["original"], pair["duplicate"]} <= keys
    for match in truth["defect_cause_matches"]:
        assert match["defect"] in keys
    by_key = {r.key: r for r in rows}
    for row in rows:
        if row.resolved is not None:
            assert row.resolved >= row.created
    # CSV-injection safety (OWASP): no cell starts with a formula character
    with open(out / "defects.csv", newline="", encoding="utf-8") as fh:
        assert not any(cell[:1] in "=+-@\t\r" and cell for line in csv.reader(fh) for cell in line)
    assert by_key


def test_defects_before_the_release_follow_goel_okumoto(tmp_path: Path) -> None:
    # Goel & Okumoto (1979): expected defects by time t is a (1 - exp(-b t)). Given the total, the share
    # created before the release is the ratio of the mean value functions; binomial test, p > 1e-4.
    params = ScenarioParams(seed=5, n_tests=30, n_days=140, builds_per_day=1.0, n_defects=4000)
    generate(tmp_path, params=params)
    inflow = json.loads((tmp_path / "ground_truth.json").read_text(encoding="utf-8"))["defect_inflow"]
    horizon, t_rel = inflow["horizon_weeks"], inflow["release"]["t_weeks"]
    before = sum(c["a"] * (1 - math.exp(-c["b"] * t_rel)) for c in inflow["components"])
    total = sum(c["a"] * (1 - math.exp(-c["b"] * horizon)) for c in inflow["components"]) + sum(
        c["a"] * (1 - math.exp(-c["b"] * (horizon - t_rel))) for c in inflow["surge"]
    )
    release_day = inflow["release"]["date"]
    with open(tmp_path / "defects.csv", newline="", encoding="utf-8") as fh:
        created = [row["Opened On"] for row in csv.DictReader(fh)]
    assert len(created) == 4000
    n_before = sum(day < release_day for day in created)
    assert stats.binomtest(n_before, len(created), before / total).pvalue > 1e-4
    # and the surge: the weeks right after the release get more defects than the weeks right before
    rel = datetime.fromisoformat(release_day).date()
    days = [datetime.strptime(c, "%Y-%m-%d %H:%M").date() for c in created]
    just_before = sum(0 < (rel - d).days <= 14 for d in days)
    just_after = sum(0 <= (d - rel).days < 14 for d in days)
    assert just_after > 1.5 * just_before


# -- command line --------------------------------------------------------------------------------------------------


def test_cli_writes_a_custom_scale(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code = main(
        [
            "--out",
            str(tmp_path),
            "--scale",
            "custom",
            "--tests",
            "40",
            "--days",
            "14",
            "--builds-per-day",
            "2",
            "--defects",
            "25",
            "--seed",
            "9",
        ]
    )
    assert code == 0
    assert "reports" in capsys.readouterr().out
    with open(tmp_path / "defects.csv", newline="", encoding="utf-8") as fh:
        assert len(list(csv.DictReader(fh))) == 25
    truth = json.loads((tmp_path / "ground_truth.json").read_text(encoding="utf-8"))
    assert truth["scenario"]["n_tests"] == 40 and truth["scenario"]["seed"] == 9


@pytest.mark.parametrize(
    ("field", "value"),
    [("n_tests", 5), ("n_days", 3), ("builds_per_day", 0.5), ("n_defects", 1), ("pr_share", 0.0)],
)
def test_bad_sizes_are_refused(field: str, value: float) -> None:
    with pytest.raises(ValueError, match=field):
        ScenarioParams(**{field: value})


def test_cli_reports_bad_sizes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["--out", str(tmp_path), "--tests", "3"]) == 2
    assert "n_tests" in capsys.readouterr().err
