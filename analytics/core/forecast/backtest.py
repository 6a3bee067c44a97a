"""Rolling-origin backtest of the forecast models and the choice of one model per series."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Protocol

import numpy as np
import pandas as pd

from analytics.core.forecast.baselines import (
    MeanForecaster,
    NaiveForecaster,
    PoissonTrendForecaster,
    SimpleExpSmoothingForecaster,
)
from analytics.core.forecast.predictive import CountForecastResults, check_counts
from analytics.core.forecast.srgm import DelayedSShaped, GoelOkumoto

MIN_TRAIN_PERIODS = 4
"""Shortest training window used as a forecast origin."""

TIE_RTOL = 1e-9

BACKTEST_COLUMNS = ("model", "mase", "coverage_80", "n_origins", "n_forecasts")


class Forecaster(Protocol):
    def fit(self, y: pd.Series) -> CountForecastResults: ...


def candidate_models() -> dict[str, Forecaster]:
    """The weekly candidates, simplest first (the order breaks ties in the selection)."""
    return {
        "naive": NaiveForecaster(),
        "mean": MeanForecaster(),
        "ses": SimpleExpSmoothingForecaster(),
        "poisson_trend": PoissonTrendForecaster(),
        "goel_okumoto": GoelOkumoto(),
        "delayed_s_shaped": DelayedSShaped(),
    }


def naive_mae(y_train: np.ndarray | pd.Series, *, season: int = 1) -> float:
    """In-sample MAE of the (seasonal) naive one-step forecast: the MASE scale.

    (1 / (n - m)) * sum_{t=m+1}^{n} |y_t - y_{t-m}|; 0.0 when there are fewer than m + 1 values.

    References
    ----------
    R. J. Hyndman and A. B. Koehler, "Another look at measures of forecast accuracy",
    International Journal of Forecasting 22(4), 2006, 679-688.
    """
    values = np.asarray(y_train, dtype=float)
    if values.size <= season:
        return 0.0
    return float(np.mean(np.abs(values[season:] - values[:-season])))


def mase(actual: np.ndarray, forecast: np.ndarray, *, y_train: np.ndarray, season: int = 1) -> float:
    """Mean absolute scaled error of ``forecast`` against ``actual`` (Hyndman & Koehler 2006).

    Raises
    ------
    ValueError
        When the in-sample naive MAE is zero (a constant training series): MASE is undefined.
    """
    scale = naive_mae(y_train, season=season)
    if scale <= 0:
        raise ValueError(ZERO_SCALE)
    return float(np.mean(np.abs(np.asarray(actual, float) - np.asarray(forecast, float)) / scale))


ZERO_SCALE = "MASE is undefined: the training series is constant, so the naive in-sample error is zero"


def rolling_origin_backtest(
    y: pd.Series,
    *,
    models: Mapping[str, Forecaster] | None = None,
    horizon: int = 8,
    n_origins: int = 8,
    level: float = 0.8,
) -> tuple[pd.DataFrame, list[str]]:
    """Score every model by rolling-origin evaluation over the last ``n_origins`` periods.

    At each origin o (training window y[:o], o from max(4, n - n_origins) to n - 1) every
    model is fitted and forecasts up to ``horizon`` periods ahead, as far as the data go.
    Each error is scaled by the in-sample naive one-step MAE of that origin's training
    window (Hyndman & Koehler 2006); MASE is the mean absolute scaled error pooled over all
    origins and steps. ``coverage_80`` is the share of those actual values that fell inside
    the model's ``level`` prediction interval. Origins whose training window is constant
    (MASE undefined) are skipped for every model.

    Returns
    -------
    scores : DataFrame
        Columns ``model``, ``mase``, ``coverage_80``, ``n_origins`` (origins where the model
        was fitted and scored), ``n_forecasts`` (scored forecasts). Models that could not be
        fitted at any origin have no row.
    notes : list of str
        Plain-words remarks (skipped origins, models that failed to fit).
    """
    y = check_counts(y)
    models = candidate_models() if models is None else dict(models)
    values = y.to_numpy()
    n = values.size
    origins = list(range(max(MIN_TRAIN_PERIODS, n - n_origins), n))
    notes: list[str] = []
    usable = [o for o in origins if naive_mae(values[:o]) > 0]
    skipped = len(origins) - len(usable)
    if skipped:
        notes.append(
            f"{skipped} of {len(origins)} forecast origins skipped: their training weeks were all equal, "
            "so the accuracy scale is zero."
        )
    rows: list[dict[str, Any]] = []
    for name, model in models.items():
        scaled: list[float] = []
        inside: list[bool] = []
        fitted = 0
        for o in usable:
            steps = min(horizon, n - o)
            try:
                res = model.fit(y.iloc[:o])
                interval = res.predict_interval(steps, level=level)
            except (ValueError, np.linalg.LinAlgError, FloatingPointError):
                continue
            fitted += 1
            actual = values[o : o + steps]
            scale = naive_mae(values[:o])
            scaled.extend(np.abs(actual - interval["expected"].to_numpy()) / scale)
            inside.extend((interval["lower"].to_numpy() <= actual) & (actual <= interval["upper"].to_numpy()))
        if fitted < len(usable):
            notes.append(f"{name} could not be fitted at {len(usable) - fitted} of {len(usable)} origins.")
        if fitted == 0:
            continue
        rows.append(
            {
                "model": name,
                "mase": float(np.mean(scaled)),
                "coverage_80": float(np.mean(inside)),
                "n_origins": fitted,
                "n_forecasts": len(scaled),
            }
        )
    scores = pd.DataFrame(rows, columns=list(BACKTEST_COLUMNS))
    return scores.astype(
        {"mase": float, "coverage_80": float, "n_origins": "int64", "n_forecasts": "int64"}
    ), notes


def select_model(scores: pd.DataFrame, *, order: list[str] | None = None) -> str | None:
    """Lowest MASE among the models scored at every origin; ties go to the simpler model.

    ``order`` lists model names simplest first (default: ``candidate_models()`` order).
    Returns None when no model was scored.
    """
    if scores.empty:
        return None
    order = list(candidate_models()) if order is None else order
    full = scores[scores["n_origins"] == scores["n_origins"].max()]
    best = float(full["mase"].min())
    tied = full[np.isclose(full["mase"], best, rtol=TIE_RTOL, atol=0.0)]
    rank = {name: i for i, name in enumerate(order)}
    return min(tied["model"], key=lambda m: rank.get(m, len(rank)))
