"""Shared pieces of the forecast models: input checks, count predictive distributions, results base.

A model's predictive distribution for one future period is a count distribution with a given
mean and variance: Poisson when the variance does not exceed the mean, otherwise the negative
binomial with that mean and variance (moment matching). Intervals are its integer quantiles, so
lower bounds are never negative and coverage is at least nominal.

The negative-binomial shape is floored at ``MIN_NB_SHAPE`` = 0.5, i.e. the variance is capped at
mean + 2 mean^2. Without the floor a history with one burst week (variance of hundreds around a
mean of 1) gives a distribution that is zero with probability 0.98 and huge otherwise, whose
intervals [0, 0] exclude the expected value. With shape >= 0.5 the 90 % and 97.5 % quantiles stay
above the mean (for a gamma of shape 0.5, P(X < mean) = 0.68).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

EMPTY_SERIES = "the count series is empty: at least one period is needed"
BAD_COUNTS = "the count series must hold finite, non-negative numbers; period {period!r} holds {value!r}"
BAD_HORIZON = "the horizon must be a positive whole number of periods, got {h!r}"
BAD_LEVEL = "the interval level must be strictly between 0 and 1, got {level!r}"

_VAR_TOLERANCE = 1e-9
MIN_NB_SHAPE = 0.5


def check_counts(y: pd.Series) -> pd.Series:
    """Validate a count series and return it as float64 (the caller's index kept)."""
    if not isinstance(y, pd.Series):
        y = pd.Series(y)
    if len(y) == 0:
        raise ValueError(EMPTY_SERIES)
    values = pd.to_numeric(y, errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ValueError(BAD_COUNTS.format(period=y.index.tolist()[i], value=y.tolist()[i]))
    return pd.Series(values, index=y.index, name=y.name)


def check_horizon(h: int) -> int:
    if isinstance(h, bool) or not isinstance(h, (int, np.integer)) or h < 1:
        raise ValueError(BAD_HORIZON.format(h=h))
    return int(h)


def check_level(level: float) -> float:
    if not 0 < level < 1:
        raise ValueError(BAD_LEVEL.format(level=level))
    return float(level)


def future_index(index: pd.Index, h: int) -> pd.Index:
    """The ``h`` periods after ``index``: same frequency for dates and periods, else integers."""
    if isinstance(index, pd.PeriodIndex):
        return pd.period_range(index[-1] + 1, periods=h, freq=index.freq)
    if isinstance(index, pd.DatetimeIndex) and len(index) > 0:
        # Without a set frequency, step by the last observed gap (one week when there is none).
        freq = index.freq or (index[-1] - index[-2] if len(index) >= 2 else pd.Timedelta(days=7))
        return pd.date_range(index[-1], periods=h + 1, freq=freq)[1:]
    if len(index) and pd.api.types.is_integer_dtype(index):
        start = int(index[-1]) + 1
    else:
        start = len(index)
    return pd.RangeIndex(start, start + h)


def capped_variance(mean: np.ndarray, var: np.ndarray) -> np.ndarray:
    """Variance between the Poisson one (= mean) and mean + mean^2 / MIN_NB_SHAPE."""
    return np.clip(var, mean, mean + mean**2 / MIN_NB_SHAPE)


def _negbin_params(mean: np.ndarray, var: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """scipy / numpy (n, p) of the negative binomial with this mean and (larger) variance."""
    var = capped_variance(mean, var)
    n = mean**2 / np.maximum(var - mean, 1e-12)
    p = n / (n + mean)
    return n, p


def count_quantiles(mean: np.ndarray, var: np.ndarray, q: float) -> np.ndarray:
    """Integer ``q``-quantile of the count distribution with this mean and variance."""
    mean = np.maximum(np.asarray(mean, dtype=float), 0.0)
    var = np.maximum(np.asarray(var, dtype=float), mean)
    out = np.zeros(mean.shape)
    pos = mean > 0
    pois = pos & (var <= mean * (1 + _VAR_TOLERANCE))
    nb = pos & ~pois
    out[pois] = stats.poisson.ppf(q, mean[pois])
    if nb.any():
        n, p = _negbin_params(mean[nb], var[nb])
        out[nb] = stats.nbinom.ppf(q, n, p)
    return np.nan_to_num(out, nan=0.0, posinf=0.0).astype("int64")


def count_draws(mean: np.ndarray, var: np.ndarray, *, size: int, rng: np.random.Generator) -> np.ndarray:
    """Draw ``size`` counts for each period: an array of shape ``(len(mean), size)``."""
    mean = np.maximum(np.asarray(mean, dtype=float), 0.0)
    var = np.maximum(np.asarray(var, dtype=float), mean)
    out = np.zeros((mean.size, size), dtype="int64")
    for k in range(mean.size):
        if mean[k] <= 0:
            continue
        if var[k] <= mean[k] * (1 + _VAR_TOLERANCE):
            out[k] = rng.poisson(mean[k], size=size)
        else:
            n, p = _negbin_params(mean[k : k + 1], var[k : k + 1])
            out[k] = rng.negative_binomial(n[0], p[0], size=size)
    return out


class CountForecastResults:
    """Base of every fitted forecast model (statsmodels style: the model object stays separate).

    Subclasses implement ``_moments(h)``, returning the predictive mean and variance of the
    count in each of the next ``h`` periods.

    Attributes
    ----------
    model_name : str
    y : Series
        The history the model was fitted on.
    params : Series
        Fitted parameters.
    """

    model_name = "base"

    def __init__(self, *, y: pd.Series, params: pd.Series) -> None:
        self.y = y
        self.params = params

    def _moments(self, h: int) -> tuple[np.ndarray, np.ndarray]:  # pragma: no cover - abstract
        raise NotImplementedError

    def _future(self, h: int) -> pd.Index:
        return future_index(self.y.index, h)

    def moments(self, h: int) -> tuple[np.ndarray, np.ndarray]:
        """Predictive mean and variance for the next ``h`` periods (finite; mean <= var <= mean + 2 mean^2)."""
        h = check_horizon(h)
        mean, var = self._moments(h)
        mean = np.nan_to_num(np.maximum(np.asarray(mean, dtype=float), 0.0), nan=0.0, posinf=0.0)
        var = np.nan_to_num(np.asarray(var, dtype=float), nan=0.0, posinf=np.finfo(float).max)
        return mean, capped_variance(mean, var)

    def forecast(self, h: int) -> pd.Series:
        """Expected count in each of the next ``h`` periods."""
        mean, _ = self.moments(h)
        return pd.Series(mean, index=self._future(h), name="expected")

    def predict_interval(self, h: int, *, level: float = 0.8) -> pd.DataFrame:
        """Central prediction interval per future period, from count quantiles.

        Returns a frame with columns ``expected``, ``lower``, ``upper``; the bounds are the
        ``(1 - level) / 2`` and ``(1 + level) / 2`` integer quantiles of the predictive count
        distribution, so ``P(lower <= Y <= upper) >= level`` under that distribution.
        """
        level = check_level(level)
        mean, var = self.moments(h)
        return pd.DataFrame(
            {
                "expected": mean,
                "lower": count_quantiles(mean, var, (1 - level) / 2),
                "upper": count_quantiles(mean, var, (1 + level) / 2),
            },
            index=self._future(h),
        )

    def simulate(self, h: int, *, n_paths: int = 1000, random_state: int | None = None) -> pd.DataFrame:
        """Simulated future counts: ``h`` rows (future periods) by ``n_paths`` columns.

        Each period is drawn from its predictive count distribution (independently across
        periods), so the draws carry both count noise and the parameter / level uncertainty
        folded into the predictive variance.
        """
        mean, var = self.moments(h)
        rng = np.random.default_rng(random_state)
        draws = count_draws(mean, var, size=int(n_paths), rng=rng)
        return pd.DataFrame(draws, index=self._future(h))
