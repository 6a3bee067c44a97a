"""Sequence statistics of the flaky-test detector, checked against published values and libraries."""

from __future__ import annotations

import itertools
import math
import re

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.sandbox.stats.runs import runstest_1samp

from analytics.core.flaky import (
    BAD_FAILURE_COUNT,
    BAD_LAMBDA,
    BAD_LEVEL,
    BAD_OUTCOMES,
    BAD_PRIOR,
    evidence_frame,
    failure_rate_interval,
    flip_rate,
    outcome_entropy,
    runs_test,
    weighted_flakiness,
)

# Kowalczyk et al., "Modeling and Ranking Flaky Tests at Apple", ICSE-SEIP 2020, as re-implemented
# publicly; REFERENCES.md section 5 (medium confidence; the example numbers are from memory).
TEST_X = [[0, 0, 1, 1], [0, 0, 0, 0], [1, 0, 1, 0], [1, 0, 1]]
TEST_Y = [[0, 1, 0, 1], [0, 0, 0, 0], [0, 0, 0, 0], [1, 1, 1]]


@pytest.mark.parametrize(
    ("outcomes", "flips", "entropy"),
    [
        # Hand-computed: changes / (n - 1); H(p) = -p log2 p - (1 - p) log2 (1 - p).
        ([], 0.0, 0.0),
        ([1], 0.0, 0.0),
        ([0, 0, 0], 0.0, 0.0),
        ([1, 1, 1, 1], 0.0, 0.0),
        ([0, 1], 1.0, 1.0),
        ([0, 1, 0, 1], 1.0, 1.0),
        ([0, 0, 0, 1], 1 / 3, -(0.25 * math.log2(0.25) + 0.75 * math.log2(0.75))),
        ([1, 0, 0, 0, 1], 0.5, -(0.4 * math.log2(0.4) + 0.6 * math.log2(0.6))),
    ],
)
def test_flip_rate_and_entropy_hand_computed(outcomes, flips, entropy):
    assert flip_rate(outcomes) == pytest.approx(flips)
    assert outcome_entropy(outcomes) == pytest.approx(entropy)


def test_per_version_values_of_the_worked_example():
    # Kowalczyk et al. 2020 via REFERENCES.md section 5 (medium confidence): test X per version.
    assert [outcome_entropy(v) for v in TEST_X] == pytest.approx([1.0, 0.0, 1.0, 0.9183], abs=1e-4)
    assert [flip_rate(v) for v in TEST_X] == pytest.approx([1 / 3, 0.0, 1.0, 1.0])


@pytest.mark.parametrize(
    ("versions", "flip_3", "entropy_3", "flip_w", "entropy_w"),
    [
        # Kowalczyk et al. 2020 via REFERENCES.md section 5 (medium confidence): unweighted over the
        # first three versions, weighted (lambda = 0.1) over all four.
        (TEST_X, 0.4444, 0.6667, 0.6231, 0.7407),
        (TEST_Y, 0.3333, 0.3333, 0.2120, 0.2120),
    ],
)
def test_weighted_flakiness_matches_the_worked_example(versions, flip_3, entropy_3, flip_w, entropy_w):
    flips = [flip_rate(v) for v in versions]
    entropies = [outcome_entropy(v) for v in versions]
    # lam = 0 makes every weight 1: the unweighted mean.
    assert weighted_flakiness(flips[:3], lam=0.0) == pytest.approx(flip_3, abs=1e-4)
    assert weighted_flakiness(entropies[:3], lam=0.0) == pytest.approx(entropy_3, abs=1e-4)
    assert weighted_flakiness(flips, lam=0.1) == pytest.approx(flip_w, abs=1e-4)
    assert weighted_flakiness(entropies, lam=0.1) == pytest.approx(entropy_w, abs=1e-4)


def test_evidence_frame_reproduces_the_worked_example():
    # The same example fed as runs: one commit per day, the reruns as attempts of one build.
    # Kowalczyk et al. 2020 via REFERENCES.md section 5 (medium confidence).
    day0 = pd.Timestamp("2024-05-01", tz="UTC")
    rows = []
    for test_id, versions in ((1, TEST_X), (2, TEST_Y)):
        for day, outcomes in enumerate(versions):
            for attempt, fail in enumerate(outcomes, start=1):
                rows.append(
                    {
                        "test_id": test_id,
                        "build_id": 100 + day,
                        "commit": f"c0ffee{day}",
                        "branch": "main",
                        "started_at": day0 + pd.Timedelta(days=day),
                        "attempt": attempt,
                        "outcome": "failed" if fail else "passed",
                        "duration": 1.0,
                        "failure_type": "",
                        "message": "",
                    }
                )
    evidence = evidence_frame(pd.DataFrame(rows), now=day0 + pd.Timedelta(days=5))
    assert evidence.loc[1, "flip_rate"] == pytest.approx(0.6231, abs=1e-4)
    assert evidence.loc[1, "entropy"] == pytest.approx(0.7407, abs=1e-4)
    assert evidence.loc[2, "flip_rate"] == pytest.approx(0.2120, abs=1e-4)
    assert evidence.loc[2, "entropy"] == pytest.approx(0.2120, abs=1e-4)


def test_weighted_flakiness_edges():
    assert weighted_flakiness([]) == 0.0
    assert weighted_flakiness([0.7]) == pytest.approx(0.7)
    with pytest.raises(ValueError, match=re.escape(BAD_LAMBDA)):
        weighted_flakiness([0.1], lam=1.0)


def _random_binary_sequences(count: int, seed: int) -> list[np.ndarray]:
    rng = np.random.default_rng(seed)
    sequences = []
    while len(sequences) < count:
        n = int(rng.integers(2, 130))
        seq = (rng.random(n) < rng.uniform(0.05, 0.6)).astype(int)
        if 0 < seq.sum() < n:
            sequences.append(seq)
    return sequences


@pytest.mark.parametrize("sequence", _random_binary_sequences(40, seed=11), ids=lambda s: f"n{s.size}")
def test_runs_test_equals_statsmodels(sequence):
    # Reference library: statsmodels.sandbox.stats.runs.runstest_1samp (REFERENCES.md section 4).
    z, p = runs_test(sequence.tolist())
    z_ref, p_ref = runstest_1samp(sequence, cutoff="mean", correction=True)
    assert z == pytest.approx(float(z_ref), rel=1e-12, abs=1e-12)
    assert p == pytest.approx(float(p_ref), rel=1e-12, abs=1e-300)


@pytest.mark.parametrize(
    "sequence",
    [
        [1, 0, 1],
        [0, 0, 0, 1, 1, 1, 0, 0],
        [1, 1, 0, 0, 0, 0, 0, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0],  # R - E[R] inside (-0.5, 0.5)
    ],
)
def test_runs_test_equals_statsmodels_on_short_sequences(sequence):
    # statsmodels' continuity correction below 50 observations (REFERENCES.md section 4).
    z_ref, p_ref = runstest_1samp(np.array(sequence), cutoff="mean", correction=True)
    assert runs_test(sequence) == pytest.approx((float(z_ref), float(p_ref)), rel=1e-12)


def test_runs_test_moments_follow_nist_for_long_sequences():
    # NIST/SEMATECH e-Handbook 1.3.5.13: E[R] = 2 n1 n2 / n + 1, Var[R] = 2 n1 n2 (2 n1 n2 - n) / (n^2 (n - 1)),
    # no continuity correction from 50 observations on. Slow reference written here.
    rng = np.random.default_rng(5)
    for _ in range(10):
        seq = [int(v) for v in rng.random(int(rng.integers(50, 200))) < 0.3]
        n1, n2 = seq.count(1), seq.count(0)
        n = n1 + n2
        runs = 1 + sum(1 for a, b in itertools.pairwise(seq) if a != b)
        mean = 2 * n1 * n2 / n + 1
        var = 2 * n1 * n2 * (2 * n1 * n2 - n) / (n**2 * (n - 1))
        z_ref = (runs - mean) / math.sqrt(var)
        z, p = runs_test(seq)
        assert z == pytest.approx(z_ref, rel=1e-12)
        assert p == pytest.approx(2 * stats.norm.sf(abs(z_ref)), rel=1e-12)


@pytest.mark.parametrize("sequence", [[], [1], [0] * 12, [1] * 30, [0, 1], [1, 0]])
def test_runs_test_without_both_outcomes_is_defined(sequence):
    # Documented choice: nothing to say about ordering, so z = 0 and p = 1 (statsmodels reports a
    # binomial tail for one outcome, and divides by a zero variance for one pass and one failure).
    assert runs_test(sequence) == (0.0, 1.0)


@pytest.mark.parametrize(
    ("failures", "runs", "level", "prior"),
    [
        (0, 0, 0.95, (1.0, 1.0)),
        (0, 10, 0.95, (1.0, 1.0)),
        (3, 40, 0.95, (1.0, 1.0)),
        (17, 20, 0.95, (1.0, 1.0)),
        (50, 50, 0.95, (1.0, 1.0)),
        (7, 300, 0.9, (0.5, 0.5)),
        (2, 9, 0.99, (2.0, 5.0)),
    ],
)
def test_failure_rate_interval_equals_scipy_beta(failures, runs, level, prior):
    # Reference library: scipy.stats.beta (posterior Beta(a + f, b + n - f), equal-tailed interval).
    a, b = prior[0] + failures, prior[1] + runs - failures
    tail = (1 - level) / 2
    mean, low, high = failure_rate_interval(failures, runs, level=level, prior=prior)
    assert mean == pytest.approx(stats.beta.mean(a, b), rel=1e-12)
    assert low == pytest.approx(stats.beta.ppf(tail, a, b), rel=1e-12)
    assert high == pytest.approx(stats.beta.ppf(1 - tail, a, b), rel=1e-12)
    assert low <= mean <= high


def test_evidence_failure_rate_columns_equal_scipy_beta():
    day0 = pd.Timestamp("2024-05-01", tz="UTC")
    rows = [
        {
            "test_id": 7,
            "build_id": i,
            "commit": f"abc{i}",
            "branch": "main",
            "started_at": day0 + pd.Timedelta(hours=i),
            "attempt": 1,
            "outcome": "failed" if i % 4 == 0 else "passed",
            "duration": 1.0,
            "failure_type": "",
            "message": "",
        }
        for i in range(20)
    ]
    evidence = evidence_frame(pd.DataFrame(rows), now=day0 + pd.Timedelta(days=1))
    # scipy.stats.beta on 5 failures in 20 runs with the uniform prior.
    assert evidence.loc[7, "failure_rate_low"] == pytest.approx(stats.beta.ppf(0.025, 6, 16), rel=1e-12)
    assert evidence.loc[7, "failure_rate_high"] == pytest.approx(stats.beta.ppf(0.975, 6, 16), rel=1e-12)
    assert evidence.loc[7, "failure_rate"] == pytest.approx(6 / 22)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: flip_rate([0, 2, 1]), BAD_OUTCOMES),
        (lambda: outcome_entropy([[0, 1]]), BAD_OUTCOMES),
        (lambda: runs_test([0.5, 1]), BAD_OUTCOMES),
        (lambda: failure_rate_interval(3, 2), BAD_FAILURE_COUNT),
        (lambda: failure_rate_interval(-1, 2), BAD_FAILURE_COUNT),
        (lambda: failure_rate_interval(1, 2, level=1.0), BAD_LEVEL),
        (lambda: failure_rate_interval(1, 2, prior=(0.0, 1.0)), BAD_PRIOR),
    ],
)
def test_bad_arguments_raise_value_error(call, message):
    with pytest.raises(ValueError, match=re.escape(message)):
        call()
