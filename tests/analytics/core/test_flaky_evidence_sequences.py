"""evidence_frame over many tests at once equals the per-sequence statistics of each test on its own.

``evidence_frame`` computes every test's row on whole columns with per-test group codes; these checks
recompute the figures one test at a time from its ordered outcomes with the functions in
``analytics.core.flaky.metrics`` and, for the runs test, with statsmodels' ``runstest_1samp``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from statsmodels.sandbox.stats.runs import runstest_1samp

from analytics.core.flaky import evidence_frame, flip_rate, outcome_entropy, runs_test, weighted_flakiness
from tests.analytics.core.test_flaky_properties import NOW, history_strategy, to_runs

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def frame_of(histories) -> pd.DataFrame:
    rows = [r for tid, h in enumerate(histories, start=1) for r in to_runs(tid, h, first_build_id=100 * tid)]
    return pd.DataFrame(rows)


def ordered_outcomes(runs: pd.DataFrame, test_id: int) -> pd.DataFrame:
    own = runs[(runs["test_id"] == test_id) & (runs["outcome"] != "skipped")]
    own = own.sort_values(["started_at", "build_id", "attempt"], kind="stable")
    return own.assign(y=own["outcome"].isin(["failed", "error"]).astype(int))


@SETTINGS
@given(histories=st.lists(history_strategy, min_size=1, max_size=5))
def test_each_row_equals_the_test_scored_alone(histories):
    runs = frame_of(histories)
    together = evidence_frame(runs, now=NOW)
    for test_id in together.index:
        alone = evidence_frame(runs[runs["test_id"] == test_id], now=NOW)
        pd.testing.assert_series_equal(together.loc[test_id], alone.loc[test_id], check_exact=False, rtol=1e-12)


@SETTINGS
@given(histories=st.lists(history_strategy, min_size=1, max_size=5))
def test_sequence_statistics_match_the_metrics_of_each_history(histories):
    runs = frame_of(histories)
    result = evidence_frame(runs, now=NOW)
    for test_id, row in result.iterrows():
        own = ordered_outcomes(runs, test_id)
        y = own["y"].to_numpy()
        assert row["runs"] == y.size and row["failures"] == y.sum()
        assert np.isclose(row["history_flip_rate"], flip_rate(y), rtol=0, atol=1e-12)
        assert np.isclose(row["history_entropy"], outcome_entropy(y), rtol=0, atol=1e-12)
        z, p = runs_test(y)
        assert np.isclose(row["runs_z"], z, rtol=0, atol=1e-12) and np.isclose(row["runs_p"], p, rtol=0, atol=1e-12)
        if 0 < y.sum() < y.size and y.size > 2:
            # statsmodels' runs test (continuity-corrected below 50 runs), as metrics.runs_test documents.
            sm_z, sm_p = runstest_1samp(y, cutoff="mean", correction=True)
            assert np.isclose(row["runs_z"], sm_z, rtol=0, atol=1e-9)
            assert np.isclose(row["runs_p"], sm_p, rtol=0, atol=1e-9)
        # A version is a commit, or the build itself without one; its flip rate and entropy are over its
        # runs in order, versions in order of their first run.
        version = np.where(own["commit"] == "", "build " + own["build_id"].astype(str), own["commit"])
        order = list(dict.fromkeys(version))
        flips = [flip_rate(y[version == v]) for v in order]
        entropies = [outcome_entropy(y[version == v]) for v in order]
        assert row["versions"] == len(order)
        assert np.isclose(row["flip_rate"], weighted_flakiness(flips, lam=0.1), rtol=0, atol=1e-12)
        assert np.isclose(row["entropy"], weighted_flakiness(entropies, lam=0.1), rtol=0, atol=1e-12)
