"""Failure episodes on short-lived branches: a branch based on broken code is not evidence of flakiness.

Found on the generated demo: a test broken on ``main`` also fails on every pull-request branch based on
``main`` while it is broken; each such branch (one or two commits) used to count as a separate short
failure episode, so a test failing in 100 % of its runs was called flaky. A short episode now counts only
when passing versions of the same branch lie before and after it (see ``evidence_frame``).
Hand-built histories; ground truth by construction.
"""

from __future__ import annotations

import pandas as pd

from analytics.core.flaky import score_tests
from tests.analytics.core.test_flaky_evidence import NOW, run


def _pr_branches(test_id, outcome_of, *, first_build, n_branches=8, commits_per_branch=2):
    """``n_branches`` pull-request branches of one or two commits, each built once per commit."""
    rows, build = [], first_build
    for b in range(n_branches):
        for c in range(1 + b % commits_per_branch):
            rows.append(run(test_id, build, f"pr{b:02d}c{c}", outcome_of(b, c), branch=f"feature/pr-{b}"))
            build += 1
    return rows, build


def test_broken_from_the_start_on_main_and_every_branch_is_broken_not_flaky():
    rows = [run(1, i, f"main{i:03d}", "failed") for i in range(12)]
    pr, _ = _pr_branches(1, lambda b, c: "failed", first_build=100)
    result = score_tests(pd.DataFrame(rows + pr), now=NOW).loc[1]
    assert result["failures"] == result["runs"]  # fails every run: deterministic by construction
    assert result["short_episodes"] == 0 and result["scattered_episodes"] == 0
    assert result["verdict"] == "broken"


def test_regression_on_main_copied_to_branches_based_on_it_is_not_flaky():
    # main passes for 10 commits, fails from commit 10 to 19, passes again after the fix;
    # the pull-request branches based on main during the breakage fail on all their builds.
    rows = [run(2, i, f"main{i:03d}", "failed" if 10 <= i < 20 else "passed") for i in range(30)]
    pr, _ = _pr_branches(2, lambda b, c: "failed", first_build=100)
    result = score_tests(pd.DataFrame(rows + pr), now=NOW).loc[2]
    assert result["scattered_episodes"] == 0 and result["long_episodes"] == 1
    assert result["verdict"] != "flaky"


def test_intermittent_failures_between_passes_on_a_branch_still_count():
    # A flaky test: on main and on three longer branches it fails once between passing commits.
    rows = [run(3, i, f"main{i:03d}", "failed" if i in (5, 14) else "passed") for i in range(20)]
    build = 100
    for b in range(3):
        for c in range(5):
            rows.append(run(3, build, f"br{b}c{c}", "failed" if c == 2 else "passed", branch=f"feature/long-{b}"))
            build += 1
    result = score_tests(pd.DataFrame(rows), now=NOW).loc[3]
    assert result["short_episodes"] == 5 and result["scattered_episodes"] == 4
    assert result["verdict"] == "flaky"
