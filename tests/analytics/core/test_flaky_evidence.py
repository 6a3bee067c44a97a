"""Evidence table, verdicts and explanations of the flaky-test detector on small hand-built histories."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from analytics.core.flaky import (
    BAD_CONFIG,
    BAD_NOW,
    BAD_OUTCOME_VALUE,
    EVIDENCE_COLUMNS,
    MISSING_COLUMNS,
    MISSING_EVIDENCE,
    NON_MONOTONE_WEIGHTS,
    RUN_COLUMNS,
    VERDICTS,
    EvidenceConfig,
    FlakinessScorer,
    evidence_frame,
    normalise_message,
    score_tests,
)

NOW = pd.Timestamp("2024-06-30 12:00", tz="UTC")
REPO = Path(__file__).resolve().parents[3]


def run(
    test_id,
    build_id,
    commit,
    outcome,
    *,
    attempt=1,
    hours_ago=None,
    branch="main",
    duration=1.0,
    failure_type="",
    message="",
):
    """One run row; builds start one hour apart by default (later build ids are newer)."""
    hours = 500 - build_id if hours_ago is None else hours_ago
    if outcome in ("failed", "error") and not message:
        message = "AssertionError: expected 2 berths, got 1"
    return {
        "test_id": test_id,
        "build_id": build_id,
        "commit": commit,
        "branch": branch,
        "started_at": NOW - pd.Timedelta(hours=hours),
        "attempt": attempt,
        "outcome": outcome,
        "duration": duration,
        "failure_type": failure_type,
        "message": message,
    }


def history(test_id, outcomes, *, commits=None):
    """One build per outcome on main; commit i unless given."""
    commits = commits or [f"{i:07x}aa" for i in range(len(outcomes))]
    return [
        run(test_id, i, c, "failed" if o else "passed") for i, (o, c) in enumerate(zip(outcomes, commits))
    ]


def test_edge_cases_get_defined_scores_and_verdicts():
    rows = []
    rows += [run(1, i, f"c{i}", "skipped", duration=np.nan) for i in range(10)]  # all skipped
    rows += [run(2, 3, "c3", "failed")]  # a single run
    rows += [run(3, i, f"c{i}", "failed") for i in range(12)]  # always failed
    rows += [run(4, i, f"c{i}", "passed", duration=np.nan) for i in range(12)]  # no durations
    rows += [run(5, i, "", "error" if i % 3 == 0 else "passed", duration=np.nan) for i in range(12)]
    result = score_tests(pd.DataFrame(rows), now=NOW)
    assert list(result.index) == [1, 2, 3, 4, 5]
    assert result["score"].notna().all() and result["score"].between(0.0, 1.0).all()
    assert result["verdict"].isin(VERDICTS).all()
    assert result.loc[1, ["runs", "skipped"]].tolist() == [0, 10]
    assert result.loc[1, "verdict"] == "insufficient data"
    assert result.loc[2, "verdict"] == "insufficient data"
    # Without sufficient data the score is the prior: no pretence of knowing.
    assert result.loc[1, "score"] == result.loc[2, "score"] == pytest.approx(FlakinessScorer().prior)
    assert result.loc[3, "verdict"] == "broken"
    assert result.loc[4, "verdict"] == "stable" and np.isnan(result.loc[4, "duration_cv"])
    # Empty commits: each build is its own version, so no same-commit contradiction is invented.
    assert result.loc[5, "same_commit_contradictions"] == 0
    assert all(isinstance(e, list) and e for e in result["explanation"])
    assert set(EVIDENCE_COLUMNS) <= set(result.columns)


def test_same_commit_contradictions_and_pass_on_rerun_are_counted():
    rows = [
        run(9, 1, "aaaaaaa1", "passed"),
        run(9, 2, "aaaaaaa1", "failed"),  # contradiction across builds
        run(9, 3, "bbbbbbb2", "failed", attempt=1),
        run(9, 3, "bbbbbbb2", "passed", attempt=2),  # pass on rerun, contradiction across attempts
        run(9, 4, "ccccccc3", "failed", attempt=1),
        run(9, 4, "ccccccc3", "failed", attempt=2),  # rerun that failed too
        run(9, 5, "ddddddd4", "passed", attempt=1),
        run(9, 5, "ddddddd4", "failed", attempt=2),  # passed then failed: contradiction, not a pass on rerun
    ] + [run(9, 10 + i, f"eeeeee{i}", "passed") for i in range(4)]
    evidence = evidence_frame(pd.DataFrame(rows), now=NOW)
    row = evidence.loc[9]
    assert row["same_commit_contradictions"] == 3
    assert row["contradiction_commits"] == ("aaaaaaa1", "bbbbbbb2", "ddddddd4")
    assert row["pass_on_rerun"] == 1 and row["rerun_pass_builds"] == (3,)
    assert row["runs"] == 12 and row["failures"] == 5 and row["builds"] == 9 and row["versions"] == 8
    scorer = FlakinessScorer().fit(evidence)
    assert scorer.verdicts(evidence).loc[9] == "flaky"
    text = " ".join(scorer.explain(row))
    assert "Passed and failed on the same commit 3 times (aaaaaaa, bbbbbbb, ddddddd)" in text
    assert "Failed then passed on rerun in 1 build (#3)" in text


def test_regression_fixed_later_is_not_flaky():
    outcomes = [0] * 10 + [1] * 6 + [0] * 10  # one contiguous block, fixed
    result = score_tests(pd.DataFrame(history(4, outcomes)), now=NOW)
    row = result.loc[4]
    assert row["verdict"] == "stable"
    assert (
        row["failure_episodes"] == 1 and row["long_episodes"] == 1 and row["same_commit_contradictions"] == 0
    )
    assert row["score"] < FlakinessScorer().prior
    assert row["runs_z"] < 0 and row["runs_p"] < 0.05  # fewer runs than chance: clustered
    assert row["first_failure_commit"] == f"{10:07x}aa"
    assert any("block over 6 consecutive commits" in line for line in row["explanation"])


def test_broken_at_a_commit_reports_where_it_started():
    outcomes = [0] * 10 + [1] * 5
    result = score_tests(pd.DataFrame(history(6, outcomes)), now=NOW)
    row = result.loc[6]
    assert row["verdict"] == "broken" and bool(row["failing_now"])
    assert row["streak_start_commit"] == f"{10:07x}aa" and row["longest_failure_streak"] == 5
    assert any("since commit 000000a." in line for line in row["explanation"])  # 7-character short form


def test_scattered_failures_on_different_commits_are_flaky():
    outcomes = [0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0, 0]
    result = score_tests(pd.DataFrame(history(8, outcomes)), now=NOW)
    row = result.loc[8]
    assert row["short_episodes"] == 3 and row["scattered_episodes"] == 2
    assert row["verdict"] == "flaky"
    assert any(line.startswith("Failures are scattered") for line in row["explanation"])
    assert any(line.startswith("Runs test over the ordered history: z = ") for line in row["explanation"])


def test_failures_on_a_feature_branch_do_not_scatter_with_main():
    # A feature branch broken for a while, built between passing builds of main.
    rows = []
    for i in range(12):
        rows.append(run(3, 2 * i, f"{i:07x}ma", "passed", branch="main"))
        rows.append(run(3, 2 * i + 1, f"{i:07x}fe", "failed", branch="feature/waitlist"))
    rows.append(run(3, 40, "fffffff0", "passed", branch="main"))
    result = score_tests(pd.DataFrame(rows), now=NOW)
    assert result.loc[3, "failure_episodes"] == 1
    assert result.loc[3, "verdict"] == "stable"


def test_message_diversity_timeouts_and_durations():
    rows = [
        run(2, 1, "a1", "failed", message="Timed out after 30 s waiting for berth 12", duration=2.0),
        run(2, 2, "a2", "failed", message="Timed out after 45 s waiting for berth 7", duration=4.0),
        run(2, 3, "a3", "error", failure_type="SocketTimeout", message="connection reset", duration=np.nan),
        run(2, 4, "a4", "failed", message="AssertionError: expected 2 bookings, got 1", duration=6.0),
    ] + [run(2, 10 + i, f"b{i}", "passed", duration=4.0) for i in range(6)]
    row = evidence_frame(pd.DataFrame(rows), now=NOW).loc[2]
    assert row["timeout_failures"] == 3
    assert row["message_diversity"] == pytest.approx(3 / 4)  # the two time-outs differ only in digits
    known = np.array([2.0, 4.0, 6.0] + [4.0] * 6)
    assert row["duration_cv"] == pytest.approx(known.std() / known.mean())  # population sd / mean
    assert normalise_message("Timed out after 30 s at 0xdeadBEEF") == "timed out after s at"


def test_window_and_max_runs_limit_the_evidence():
    old = [run(1, i, f"o{i}", "failed", hours_ago=24 * 100 + i) for i in range(5)]  # outside 90 days
    recent = [run(1, 100 + i, f"r{i}", "passed", hours_ago=50 - i) for i in range(20)]
    future = [run(1, 200, "f0", "failed", hours_ago=-5)]  # after now
    evidence = evidence_frame(
        pd.DataFrame(old + recent + future), now=NOW, config=EvidenceConfig(max_runs=15)
    )
    assert evidence.loc[1, ["runs", "failures"]].tolist() == [15, 0]


def test_input_is_not_modified_and_naive_now_is_utc():
    frame = pd.DataFrame(history(1, [0, 1, 0, 0, 1, 0, 0, 0, 0, 1]))
    before = frame.copy(deep=True)
    a = score_tests(frame, now=NOW)
    b = score_tests(frame, now=NOW.tz_localize(None))
    pd.testing.assert_frame_equal(frame, before)
    pd.testing.assert_frame_equal(a.drop(columns="explanation"), b.drop(columns="explanation"))


def test_bad_input_is_named():
    frame = pd.DataFrame(history(1, [0, 1, 0]))
    with pytest.raises(ValueError, match=re.escape(MISSING_COLUMNS) + "commit, message"):
        evidence_frame(frame.drop(columns=["message", "commit"]), now=NOW)
    frame.loc[2, "outcome"] = "PASSED"
    with pytest.raises(ValueError, match=re.escape(BAD_OUTCOME_VALUE) + r"'PASSED' \(first at row 2\)"):
        evidence_frame(frame, now=NOW)
    with pytest.raises(ValueError, match=re.escape(BAD_NOW)):
        evidence_frame(frame, now="2024-06-30")
    with pytest.raises(ValueError, match=re.escape(BAD_CONFIG) + "min_runs=0"):
        evidence_frame(frame, now=NOW, config=EvidenceConfig(min_runs=0))
    with pytest.raises(ValueError, match=re.escape(MISSING_EVIDENCE) + "pass_on_rerun"):
        FlakinessScorer().fit().predict_proba(
            pd.DataFrame({"runs": [1]}).assign(
                failures=0,
                sufficient=True,
                same_commit_contradictions=0,
                scattered_episodes=0,
                long_episodes=0,
                failing_now=False,
            )
        )
    with pytest.raises(ValueError, match=re.escape(NON_MONOTONE_WEIGHTS)):
        FlakinessScorer(contradiction_lr=10.0).fit()


def test_empty_frame_gives_empty_result():
    result = score_tests(pd.DataFrame(columns=list(RUN_COLUMNS)), now=NOW)
    assert result.empty and {"score", "verdict", "source", "explanation"} <= set(result.columns)


def test_pure_core_does_not_import_django():
    # STYLE.md: the pure core imports nothing from Django.
    code = "import sys, analytics.core.flaky; assert 'django' not in sys.modules, 'django was imported'"
    subprocess.run([sys.executable, "-c", code], check=True, cwd=REPO)
