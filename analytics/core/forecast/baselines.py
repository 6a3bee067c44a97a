"""Baseline forecasters for weekly defect counts: naive, seasonal naive, mean, simple exponential
smoothing (statsmodels) and a Poisson regression on a time trend (statsmodels GLM).

Every model follows the statsmodels split: ``Model(...).fit(y)`` returns a results object with
``forecast(h)``, ``predict_interval(h, level=...)`` and ``simulate(h, ...)``.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import statsmodels.api as sm
from statsmodels.tsa.holtwinters import SimpleExpSmoothing

from analytics.core.forecast.predictive import CountForecastResults, check_counts

BAD_SEASON = "season must be a positive whole number of periods, got {season!r}"
TREND_NEEDS_TWO = "the trend regression needs at least 2 periods of history, got {n}"
SES_NEEDS_THREE = "simple exponential smoothing needs at least 3 periods of history, got {n}"


class NaiveResults(CountForecastResults):
    model_name = "naive"

    def __init__(self, *, y: pd.Series, params: pd.Series, season: int, sigma2: float) -> None:
        super().__init__(y=y, params=params)
        self.season = season
        self.sigma2 = sigma2
        if season > 1:
            self.model_name = "seasonal_naive"

    def _moments(self, h: int) -> tuple[np.ndarray, np.ndarray]:
        values = self.y.to_numpy()
        m = min(self.season, len(values))
        k = np.arange(h)
        mean = values[len(values) - m + (k % m)]
        # Hyndman & Athanasopoulos, FPP3 5.5: var_h = sigma^2 * (floor((h - 1) / m) + 1).
        var = self.sigma2 * (k // m + 1)
        return mean, var


class NaiveForecaster:
    """Naive (``season=1``) or seasonal-naive forecast: repeat the last observed season.

    Parameters
    ----------
    season : int, default 1
        Season length in periods (7 for daily counts with a weekly pattern).

    Notes
    -----
    Predictive variance follows the random-walk form sigma^2 * (floor((h-1)/m) + 1), with
    sigma^2 the mean squared seasonal difference, floored at the Poisson variance (= mean).

    References
    ----------
    R. J. Hyndman and G. Athanasopoulos, *Forecasting: Principles and Practice*, 3rd ed., 2021, 5.2 and 5.5.
    """

    def __init__(self, *, season: int = 1) -> None:
        self.season = season

    def fit(self, y: pd.Series) -> NaiveResults:
        if isinstance(self.season, bool) or not isinstance(self.season, int) or self.season < 1:
            raise ValueError(BAD_SEASON.format(season=self.season))
        y = check_counts(y)
        values = y.to_numpy()
        m = self.season
        diffs = values[m:] - values[:-m] if len(values) > m else np.zeros(0)
        sigma2 = float(np.mean(diffs**2)) if diffs.size else 0.0
        return NaiveResults(y=y, params=pd.Series({"sigma2": sigma2}), season=m, sigma2=sigma2)


class MeanResults(CountForecastResults):
    model_name = "mean"

    def _moments(self, h: int) -> tuple[np.ndarray, np.ndarray]:
        n = len(self.y)
        mu = float(self.params["mean"])
        s2 = float(self.params["variance"])
        # FPP3 5.5: the mean method's forecast variance is s^2 (1 + 1/n).
        return np.full(h, mu), np.full(h, s2 * (1 + 1 / n))


class MeanForecaster:
    """Forecast every future period by the mean of the history.

    Notes
    -----
    The predictive variance is s^2 (1 + 1/n) with s^2 the sample variance (0 when n = 1),
    floored at the Poisson variance (= mean); this is the fallback for short histories.
    """

    def fit(self, y: pd.Series) -> MeanResults:
        y = check_counts(y)
        values = y.to_numpy()
        s2 = float(np.var(values, ddof=1)) if len(values) > 1 else 0.0
        return MeanResults(y=y, params=pd.Series({"mean": float(values.mean()), "variance": s2}))


class SESResults(CountForecastResults):
    model_name = "ses"

    def __init__(self, *, y: pd.Series, params: pd.Series, statsmodels_results: object) -> None:
        super().__init__(y=y, params=params)
        self.statsmodels_results = statsmodels_results

    @property
    def level(self) -> float:
        """Smoothed level at the end of the history (the flat point forecast before clipping at 0)."""
        return float(self.params["level"])

    def _moments(self, h: int) -> tuple[np.ndarray, np.ndarray]:
        alpha = float(self.params["alpha"])
        sigma2 = float(self.params["sigma2"])
        k = np.arange(1, h + 1)
        mean = np.full(h, max(self.level, 0.0))
        # ETS(A,N,N) forecast variance, Hyndman et al. (2008) table 6.1: sigma^2 (1 + (h-1) alpha^2).
        var = sigma2 * (1 + (k - 1) * alpha**2)
        return mean, var


class SimpleExpSmoothingForecaster:
    """Simple exponential smoothing, fitted by statsmodels.

    The smoothing parameter and the initial level are estimated by statsmodels
    (``SimpleExpSmoothing(y, initialization_method="estimated").fit()``); the point forecast
    is the final level, clipped at zero.

    Notes
    -----
    The predictive variance is the ETS(A,N,N) one, sigma^2 (1 + (h-1) alpha^2), with sigma^2
    the mean squared one-step residual, floored at the Poisson variance.

    References
    ----------
    R. J. Hyndman, A. B. Koehler, J. K. Ord, R. D. Snyder, *Forecasting with Exponential
    Smoothing: The State Space Approach*, Springer, 2008.
    """

    def fit(self, y: pd.Series) -> SESResults:
        y = check_counts(y)
        if len(y) < 3:
            raise ValueError(SES_NEEDS_THREE.format(n=len(y)))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = SimpleExpSmoothing(y.to_numpy(), initialization_method="estimated").fit()
        alpha = float(res.params["smoothing_level"])
        level = float(res.level[-1])
        resid = y.to_numpy() - np.asarray(res.fittedvalues)
        sigma2 = float(np.mean(resid**2))
        params = pd.Series(
            {
                "alpha": alpha,
                "initial_level": float(res.params["initial_level"]),
                "level": level,
                "sigma2": sigma2,
            }
        )
        if not np.isfinite(params.to_numpy()).all():
            raise ValueError("simple exponential smoothing produced a non-finite fit")
        return SESResults(y=y, params=params, statsmodels_results=res)


class PoissonTrendResults(CountForecastResults):
    model_name = "poisson_trend"

    def __init__(self, *, y: pd.Series, params: pd.Series, cov: np.ndarray, dispersion: float) -> None:
        super().__init__(y=y, params=params)
        self.cov = cov
        self.dispersion = dispersion

    def _moments(self, h: int) -> tuple[np.ndarray, np.ndarray]:
        n = len(self.y)
        x = np.column_stack([np.ones(h), np.arange(n, n + h, dtype=float)])
        beta = self.params[["const", "trend"]].to_numpy()
        eta = np.clip(x @ beta, -700, 50)
        mean = np.exp(eta)
        # Delta method for the uncertainty of the fitted mean, plus quasi-Poisson count noise.
        var_eta = np.einsum("ij,jk,ik->i", x, self.cov, x)
        return mean, self.dispersion * mean + mean**2 * np.maximum(var_eta, 0.0)


class PoissonTrendForecaster:
    """Poisson regression of the counts on a linear time trend (log link), statsmodels GLM.

    Notes
    -----
    Over-dispersion is estimated by the Pearson statistic, phi = X^2 / (n - 2), floored at 1;
    the parameter covariance is scaled by phi (quasi-Poisson) and the predictive count
    distribution has variance phi * mu + Var(mu_hat), i.e. negative binomial when phi > 1.

    References
    ----------
    P. McCullagh and J. A. Nelder, *Generalized Linear Models*, 2nd ed., Chapman & Hall, 1989, ch. 6.
    """

    def fit(self, y: pd.Series) -> PoissonTrendResults:
        y = check_counts(y)
        n = len(y)
        if n < 2:
            raise ValueError(TREND_NEEDS_TWO.format(n=n))
        values = y.to_numpy()
        if values.sum() == 0:
            params = pd.Series({"const": -700.0, "trend": 0.0})
            return PoissonTrendResults(y=y, params=params, cov=np.zeros((2, 2)), dispersion=1.0)
        x = np.column_stack([np.ones(n), np.arange(n, dtype=float)])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = sm.GLM(values, x, family=sm.families.Poisson()).fit()
        beta = np.asarray(res.params, dtype=float)
        dispersion = max(1.0, float(res.pearson_chi2) / max(n - 2, 1)) if n > 2 else 1.0
        cov = np.asarray(res.cov_params(), dtype=float) * dispersion
        if not (np.isfinite(beta).all() and np.isfinite(cov).all()):
            raise ValueError("the trend regression did not converge to a finite fit")
        params = pd.Series({"const": beta[0], "trend": beta[1], "dispersion": dispersion})
        return PoissonTrendResults(y=y, params=params, cov=cov, dispersion=dispersion)
