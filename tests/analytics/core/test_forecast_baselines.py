"""Baseline forecasters against statsmodels and textbook formulas."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.tsa.holtwinters import SimpleExpSmoothing

from analytics.core.forecast import (
    MeanForecaster,
    NaiveForecaster,
    PoissonTrendForecaster,
    SimpleExpSmoothingForecaster,
)
from analytics.core.forecast.baselines import BAD_SEASON

WEEKS = pd.date_range("2025-01-06", periods=20, freq="7D")
COUNTS = pd.Series([12, 9, 14, 8, 11, 7, 10, 6, 9, 5, 8, 7, 4, 6, 5, 3, 6, 4, 2, 3], index=WEEKS, dtype=float)


def test_ses_agrees_with_statsmodels():
    # Reference library: statsmodels.tsa.holtwinters.SimpleExpSmoothing with the same settings
    # (REFERENCES.md section 7).
    res = SimpleExpSmoothingForecaster().fit(COUNTS)
    ref = SimpleExpSmoothing(COUNTS.to_numpy(), initialization_method="estimated").fit()
    assert res.params["alpha"] == pytest.approx(ref.params["smoothing_level"], rel=1e-9)
    assert res.level == pytest.approx(ref.level[-1], rel=1e-9)
    np.testing.assert_allclose(res.forecast(5).to_numpy(), ref.forecast(5), rtol=1e-9)
    # Future weeks continue the weekly index.
    assert list(res.forecast(2).index) == [pd.Timestamp("2025-05-26"), pd.Timestamp("2025-06-02")]


def test_ses_level_matches_slow_recursion():
    # Hyndman et al. (2008): l_t = alpha y_t + (1 - alpha) l_{t-1}, from the estimated initial level.
    res = SimpleExpSmoothingForecaster().fit(COUNTS)
    alpha, level = res.params["alpha"], res.params["initial_level"]
    for value in COUNTS:
        level = alpha * value + (1 - alpha) * level
    assert res.level == pytest.approx(level, rel=1e-9)


def test_poisson_trend_agrees_with_statsmodels_glm():
    # Reference library: statsmodels GLM, Poisson family, log link, regressors [1, t].
    res = PoissonTrendForecaster().fit(COUNTS)
    n = len(COUNTS)
    glm = sm.GLM(
        COUNTS.to_numpy(), sm.add_constant(np.arange(n, dtype=float)), family=sm.families.Poisson()
    ).fit()
    x_new = sm.add_constant(np.arange(n, n + 3, dtype=float), has_constant="add")
    np.testing.assert_allclose(res.forecast(3).to_numpy(), glm.predict(x_new), rtol=1e-8)
    # Pearson dispersion X^2 / (n - p), floored at 1 (McCullagh & Nelder 1989, quasi-Poisson).
    assert res.params["dispersion"] == pytest.approx(max(1.0, glm.pearson_chi2 / (n - 2)), rel=1e-9)


def test_naive_and_mean_follow_textbook_formulas():
    # Hyndman & Athanasopoulos, FPP3 5.5: naive sd_h = sigma sqrt(h); mean sd = s sqrt(1 + 1/n).
    # A level well above the spread, so the variance cap (mean + 2 mean^2) does not bind.
    values = COUNTS.to_numpy() + 20
    naive = NaiveForecaster().fit(COUNTS + 20)
    mean, var = naive.moments(3)
    sigma2 = np.mean(np.diff(values) ** 2)
    np.testing.assert_allclose(mean, [values[-1]] * 3)
    # ... floored at the Poisson variance (= mean) of a count, and capped at mean + 2 mean^2 (not binding).
    np.testing.assert_allclose(var, np.maximum(sigma2 * np.arange(1, 4), values[-1]))
    avg = MeanForecaster().fit(COUNTS + 20)
    mean, var = avg.moments(2)
    np.testing.assert_allclose(mean, [values.mean()] * 2)
    np.testing.assert_allclose(var, [max(np.var(values, ddof=1) * (1 + 1 / len(values)), values.mean())] * 2)


def test_seasonal_naive_repeats_last_season():
    daily = pd.Series([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14], dtype=float)
    res = NaiveForecaster(season=7).fit(daily)
    assert res.model_name == "seasonal_naive"
    np.testing.assert_allclose(res.forecast(9).to_numpy(), [8, 9, 10, 11, 12, 13, 14, 8, 9])
    with pytest.raises(ValueError) as err:
        NaiveForecaster(season=0).fit(daily)
    assert str(err.value) == BAD_SEASON.format(season=0)


def test_interval_bounds_are_count_quantiles():
    # Mean model with s^2 (1 + 1/n) <= mean -> Poisson quantiles (scipy.stats.poisson.ppf).
    from scipy import stats

    y = pd.Series([3.0, 3.0, 4.0, 3.0, 3.0])
    res = MeanForecaster().fit(y)
    mu = y.mean()
    interval = res.predict_interval(2, level=0.8)
    assert (interval["lower"] == stats.poisson.ppf(0.1, mu)).all()
    assert (interval["upper"] == stats.poisson.ppf(0.9, mu)).all()
    # Over-dispersed history -> negative binomial with the same mean and variance (moment matching).
    y = pd.Series([0.0, 10.0, 1.0, 12.0, 0.0, 9.0])
    res = MeanForecaster().fit(y)
    mu, var = res.moments(1)
    n_nb, p_nb = mu[0] ** 2 / (var[0] - mu[0]), mu[0] / var[0]
    interval = res.predict_interval(1, level=0.95)
    assert interval["upper"].iloc[0] == stats.nbinom.ppf(0.975, n_nb, p_nb)
    assert stats.nbinom.mean(n_nb, p_nb) == pytest.approx(mu[0])


def test_simulate_is_seeded_and_non_negative():
    res = SimpleExpSmoothingForecaster().fit(COUNTS)
    a = res.simulate(4, n_paths=50, random_state=3)
    b = res.simulate(4, n_paths=50, random_state=3)
    pd.testing.assert_frame_equal(a, b)
    assert a.shape == (4, 50) and (a.to_numpy() >= 0).all()
