"""Defect-inflow forecasts (pure core: pandas in, pandas / dataclasses out, no Django).

Entry point: :func:`forecast_components`. Building blocks: :func:`weekly_counts`, the models
(:class:`GoelOkumoto`, :class:`DelayedSShaped`, :class:`SimpleExpSmoothingForecaster`,
:class:`PoissonTrendForecaster`, :class:`NaiveForecaster`, :class:`MeanForecaster`), the
backtest (:func:`rolling_origin_backtest`, :func:`select_model`, :func:`mase`) and the Laplace
trend tests.
"""

from analytics.core.forecast.backtest import (
    candidate_models,
    mase,
    naive_mae,
    rolling_origin_backtest,
    select_model,
)
from analytics.core.forecast.baselines import (
    MeanForecaster,
    NaiveForecaster,
    PoissonTrendForecaster,
    SimpleExpSmoothingForecaster,
)
from analytics.core.forecast.components import (
    MIN_DEFECTS,
    MIN_HISTORY_WEEKS,
    SeriesForecast,
    forecast_components,
)
from analytics.core.forecast.predictive import CountForecastResults
from analytics.core.forecast.series import TOTAL, weekly_counts
from analytics.core.forecast.srgm import DelayedSShaped, GoelOkumoto, NHPPResults
from analytics.core.forecast.trend import TrendTest, laplace_trend_counts, laplace_trend_times

__all__ = [
    "MIN_DEFECTS",
    "MIN_HISTORY_WEEKS",
    "TOTAL",
    "CountForecastResults",
    "DelayedSShaped",
    "GoelOkumoto",
    "MeanForecaster",
    "NHPPResults",
    "NaiveForecaster",
    "PoissonTrendForecaster",
    "SeriesForecast",
    "SimpleExpSmoothingForecaster",
    "TrendTest",
    "candidate_models",
    "forecast_components",
    "laplace_trend_counts",
    "laplace_trend_times",
    "mase",
    "naive_mae",
    "rolling_origin_backtest",
    "select_model",
    "weekly_counts",
]
