"""Reliability growth models (Goel–Okumoto, delayed S-shaped) against published fits and simulations."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from analytics.core.forecast import DelayedSShaped, GoelOkumoto
from analytics.core.forecast.predictive import BAD_COUNTS, EMPTY_SERIES
from analytics.core.forecast.srgm import BAD_TIMES, END_BEFORE_LAST, SRGM_NO_DEFECTS

# NTDS data: Jelinski & Moranda (1972), as reproduced in Davison, Statistical Models (2003), p. 299
# (REFERENCES.md section 1): the first 26 times between failures, in days; S_26 = 250.
NTDS_GAPS = [9, 12, 11, 4, 7, 2, 5, 8, 5, 7, 1, 6, 1, 9, 4, 1, 3, 3, 6, 1, 11, 33, 7, 91, 2, 1]
# Musa's System T1 (SYS1), cumulative failures in 25 intervals (REFERENCES.md section 2).
SYS1_CUMULATIVE = [27, 43, 54, 64, 75, 82, 84, 89, 92, 93, 97, 104, 106, 111, 116, 122, 122, 127, 128, 129]
SYS1_CUMULATIVE += [131, 132, 134, 135, 136]


def test_ntds_goel_okumoto_matches_published_fit():
    ages = np.cumsum(NTDS_GAPS)
    assert ages[-1] == 250  # S_26 = 250 days (REFERENCES.md section 1)
    res = GoelOkumoto().fit_times(ages)
    a, b = res.params["a"], res.params["b"]
    # Goel & Okumoto (1979): a = 33.99, b = 0.00579 per day, to the published precision.
    assert round(a, 2) == 33.99
    assert round(b, 5) == 0.00579
    # Recomputed values in REFERENCES.md section 1: a = 33.9935, b = 0.005790.
    assert a == pytest.approx(33.9935, abs=5e-4)
    assert b == pytest.approx(0.005790, abs=5e-7)
    # Expected remaining faults a - m(S_26) ~ 8.0 (REFERENCES.md section 1).
    assert res.residual()["expected"] == pytest.approx(8.0, abs=0.05)


def test_ntds_estimates_solve_the_published_likelihood_equations():
    # MLE equations quoted in REFERENCES.md section 1 (Goel & Okumoto 1979):
    # a = n / (1 - e^(-b S_n)) and n / b = sum S_i + a S_n e^(-b S_n).
    ages = np.cumsum(NTDS_GAPS).astype(float)
    res = GoelOkumoto().fit_times(ages)
    a, b, n, s_n = res.params["a"], res.params["b"], len(ages), ages[-1]
    assert a == pytest.approx(n / (1 - np.exp(-b * s_n)), rel=1e-9)
    assert n / b == pytest.approx(ages.sum() + a * s_n * np.exp(-b * s_n), rel=1e-6)


def test_sys1_grouped_goel_okumoto_fit():
    # Goel (1985), grouped GO fit on SYS1: a = 142.32, b = 0.1246 per interval
    # (from memory / medium-high confidence, REFERENCES.md section 2; recomputed 142.3154, 0.124602).
    counts = pd.Series(np.diff([0, *SYS1_CUMULATIVE]).astype(float))
    res = GoelOkumoto().fit(counts)
    assert res.params["a"] == pytest.approx(142.32, abs=0.005)
    assert res.params["b"] == pytest.approx(0.1246, abs=5e-5)


def test_grouped_goel_okumoto_forecast_equals_statsmodels_poisson_glm():
    # On unit periods the GO increments a e^{-b(i-1)} (1 - e^{-b}) are log-linear in i, so the grouped
    # GO likelihood is a Poisson log-linear trend (McCullagh & Nelder 1989) when the slope is negative:
    # statsmodels' GLM must give the same fitted and forecast means.
    counts = np.diff([0, *SYS1_CUMULATIVE]).astype(float)
    res = GoelOkumoto().fit(pd.Series(counts))
    n, h = len(counts), 4
    x = sm.add_constant(np.arange(n, dtype=float))
    glm = sm.GLM(counts, x, family=sm.families.Poisson()).fit()
    x_new = sm.add_constant(np.arange(n, n + h, dtype=float), has_constant="add")
    np.testing.assert_allclose(res.forecast(h).to_numpy(), glm.predict(x_new), rtol=1e-5)
    assert np.exp(-res.params["b"]) == pytest.approx(np.exp(glm.params[1]), rel=1e-5)


def _simulate_grouped(a, b, cdf, n_periods, rng):
    edges = np.arange(n_periods + 1, dtype=float)
    return rng.poisson(a * np.diff(cdf(edges, b)))


@pytest.mark.parametrize(
    ("model", "a", "b"),
    [(GoelOkumoto(), 400.0, 0.05), (DelayedSShaped(), 300.0, 0.12)],
)
def test_simulated_nhpp_parameters_recovered_within_asymptotic_error(model, a, b):
    # Ground truth built here: NHPP counts with a known mean-value function. Tolerance: 3 asymptotic
    # standard errors (inverse observed information), i.e. a two-sided 99.7 % band for a normal estimator.
    rng = np.random.default_rng(7)
    counts = _simulate_grouped(a, b, model.cdf, 30, rng)
    res = model.fit(pd.Series(counts.astype(float)))
    assert abs(res.params["a"] - a) < 3 * res.bse["a"]
    assert abs(res.params["b"] - b) < 3 * res.bse["b"]
    assert not res.at_bound


def test_simulated_nhpp_standard_errors_are_calibrated_and_intervals_cover():
    # 300 independent replications of a GO process (a = 400, b = 0.05 per week), 30 weeks fitted,
    # the next 8 weeks predicted. Ground truth is constructed here.
    a, b, n, h, reps = 400.0, 0.05, 30, 8, 300
    rng = np.random.default_rng(20240601)
    edges = np.arange(n + h + 1, dtype=float)
    mu = a * np.diff(GoelOkumoto.cdf(edges, b))
    z, cover80, cover95 = [], [], []
    for _ in range(reps):
        counts = rng.poisson(mu)
        res = GoelOkumoto().fit(pd.Series(counts[:n].astype(float)))
        z.append(((res.params - pd.Series({"a": a, "b": b})) / res.bse).to_numpy())
        future = counts[n:]
        i80 = res.predict_interval(h, level=0.8)
        i95 = res.predict_interval(h, level=0.95)
        cover80.append(np.mean((i80["lower"] <= future) & (future <= i80["upper"])))
        cover95.append(np.mean((i95["lower"] <= future) & (future <= i95["upper"])))
        assert (i80["lower"] >= 0).all()
    z = np.asarray(z)
    # Asymptotic normality of the MLE: |z| < 1.96 in ~95 % of replications; with 300 replications the
    # binomial standard error is sqrt(.95 * .05 / 300) = 0.013, so allow 0.95 +/- 0.04.
    assert np.all(np.abs((np.abs(z) < 1.96).mean(axis=0) - 0.95) < 0.04)
    # Coverage over 300 x 8 = 2400 future weeks. Weeks of one replication share a fit, so the standard
    # error is taken across replications (cluster-robust): sd(per-replication coverage) / sqrt(300).
    cover80, cover95 = np.asarray(cover80), np.asarray(cover95)
    se80 = cover80.std(ddof=1) / np.sqrt(reps)
    se95 = cover95.std(ddof=1) / np.sqrt(reps)
    # Integer quantiles make coverage >= nominal; the most an exact interval could reach is the coverage
    # of the oracle interval built from the true Poisson means with the same integer quantiles.
    lo, hi = stats.poisson.ppf(0.1, mu[n:]), stats.poisson.ppf(0.9, mu[n:])
    oracle80 = np.mean(stats.poisson.cdf(hi, mu[n:]) - stats.poisson.cdf(lo - 1, mu[n:]))
    assert cover80.mean() >= 0.80 - 3 * se80
    assert abs(cover80.mean() - oracle80) < 3 * se80 + 0.01  # + 0.01 for parameter noise widening
    assert cover95.mean() >= 0.95 - 3 * se95


def test_residual_interval_is_ordered_and_contains_estimate():
    counts = pd.Series(np.diff([0, *SYS1_CUMULATIVE]).astype(float))
    est = GoelOkumoto().fit(counts).residual(level=0.95)
    assert est["identified"]
    assert 0 <= est["lower"] < est["expected"] < est["upper"]
    # Wilks (common practice): a wider level gives a wider profile-likelihood interval.
    narrow = GoelOkumoto().fit(counts).residual(level=0.8)
    assert est["lower"] < narrow["lower"] and narrow["upper"] < est["upper"]


def test_no_saturation_leaves_residual_unidentified():
    # Increasing arrivals: the GO fit runs to b -> 0 (no levelling off), so a is not bounded.
    counts = pd.Series([1, 2, 3, 4, 5, 6, 7, 8, 9, 10], dtype=float)
    res = GoelOkumoto().fit(counts)
    assert res.at_bound
    assert res.residual()["identified"] is False
    assert np.isfinite(res.forecast(4)).all()


def test_bad_input_raises_clear_errors():
    with pytest.raises(ValueError) as err:
        GoelOkumoto().fit(pd.Series([0.0, 0.0, 0.0]))
    assert str(err.value) == SRGM_NO_DEFECTS
    with pytest.raises(ValueError) as err:
        GoelOkumoto().fit(pd.Series([1.0, -2.0]))
    assert str(err.value) == BAD_COUNTS.format(period=1, value=-2.0)
    with pytest.raises(ValueError) as err:
        GoelOkumoto().fit(pd.Series([], dtype=float))
    assert str(err.value) == EMPTY_SERIES
    with pytest.raises(ValueError) as err:
        GoelOkumoto().fit_times([3.0, 2.0])
    assert str(err.value) == BAD_TIMES.format(index=2, value=2.0)
    with pytest.raises(ValueError) as err:
        GoelOkumoto().fit_times([1.0, 5.0], end=4.0)
    assert str(err.value) == END_BEFORE_LAST.format(end=4.0, last=5.0)


def test_fit_does_not_modify_input():
    counts = pd.Series(np.diff([0, *SYS1_CUMULATIVE]).astype(float))
    before = counts.copy()
    GoelOkumoto().fit(counts)
    DelayedSShaped().fit(counts)
    pd.testing.assert_series_equal(counts, before)
