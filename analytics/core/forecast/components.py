"""One entry point: weekly defect-inflow forecasts per component and for the total."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from analytics.core.forecast.backtest import (
    BACKTEST_COLUMNS,
    candidate_models,
    rolling_origin_backtest,
    select_model,
)
from analytics.core.forecast.baselines import MeanForecaster
from analytics.core.forecast.predictive import CountForecastResults, count_draws
from analytics.core.forecast.series import TOTAL, period_floor, to_utc_naive, weekly_counts
from analytics.core.forecast.srgm import DelayedSShaped, GoelOkumoto, NHPPResults
from analytics.core.forecast.trend import laplace_trend_counts

MIN_HISTORY_WEEKS = 8
"""A series with fewer weeks of history than this falls back to the mean model."""
MIN_DEFECTS = 5
"""A series with fewer defects than this falls back to the mean model."""
RESIDUAL_LEVEL = 0.95

NO_DEFECTS_NO_AS_OF = "no defects to forecast from: pass as_of to get zero forecasts for an empty history"
BAD_HORIZON_WEEKS = "horizon_weeks must be a positive whole number, got {h!r}"

WEEK = pd.Timedelta(days=7)
FORECAST_COLUMNS = ("week_start", "expected", "lower_80", "upper_80", "lower_95", "upper_95")


@dataclass(frozen=True)
class SeriesForecast:
    """Forecast of weekly defect inflow for one component (or ``'__total__'``).

    Attributes
    ----------
    series_name : str
    model : str
        Model that produced the forecast (``'bottom_up'`` for the reconciled total).
    note : str
        Plain words: why this model, how accurate it has been, and any fallback.
    history : DataFrame
        ``week_start``, ``count``: defects created per week used for fitting.
    forecast : DataFrame
        ``week_start``, ``expected`` (float), ``lower_80``, ``upper_80``, ``lower_95``,
        ``upper_95`` (integers, never negative).
    backtest : DataFrame
        ``model``, ``mase``, ``coverage_80``, ``n_origins``, ``n_forecasts``: every model scored
        (empty when the history is too short to compare models).
    residual : dict or None
        Expected defects not yet found with a 95 % profile-likelihood interval: ``expected``,
        ``lower``, ``upper``, ``level``, ``model``; None when not identified (see ``note``).
    trend : dict
        Laplace trend test on the weekly counts: ``u``, ``p_value``, ``reading``.
    """

    series_name: str
    model: str
    note: str
    history: pd.DataFrame
    forecast: pd.DataFrame
    backtest: pd.DataFrame
    residual: dict[str, Any] | None
    trend: dict[str, Any]


def _empty_backtest() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "model": pd.Series([], dtype=object),
            "mase": pd.Series([], dtype=float),
            "coverage_80": pd.Series([], dtype=float),
            "n_origins": pd.Series([], dtype="int64"),
            "n_forecasts": pd.Series([], dtype="int64"),
        },
        columns=list(BACKTEST_COLUMNS),
    )


def _forecast_frame(results: CountForecastResults, weeks: pd.DatetimeIndex) -> pd.DataFrame:
    h = len(weeks)
    i80 = results.predict_interval(h, level=0.8)
    i95 = results.predict_interval(h, level=0.95)
    return pd.DataFrame(
        {
            "week_start": weeks,
            "expected": i80["expected"].to_numpy(dtype=float),
            "lower_80": i80["lower"].to_numpy(dtype="int64"),
            "upper_80": i80["upper"].to_numpy(dtype="int64"),
            "lower_95": i95["lower"].to_numpy(dtype="int64"),
            "upper_95": i95["upper"].to_numpy(dtype="int64"),
        }
    )


def _residual(y: pd.Series, chosen: CountForecastResults) -> tuple[dict[str, Any] | None, str]:
    """Remaining-defect estimate from the chosen growth model, else the better-fitting one."""
    if isinstance(chosen, NHPPResults):
        fit: NHPPResults = chosen
        prefix = ""
    else:
        fits = []
        for model in (GoelOkumoto(), DelayedSShaped()):
            try:
                fits.append(model.fit(y))
            except ValueError:
                continue
        if not fits:
            return (
                None,
                "No reliability growth model could be fitted, so defects not yet found are not estimated.",
            )
        fit = max(fits, key=lambda r: r.loglik)
        prefix = f"Defects not yet found are estimated with {fit.model_name} (better likelihood of the two growth models). "
    estimate = fit.residual(level=RESIDUAL_LEVEL)
    if not estimate["identified"]:
        return None, (
            "Defects not yet found cannot be estimated: arrivals show no sign of levelling off, "
            "so the growth model does not bound the total."
        )
    keep = {k: estimate[k] for k in ("expected", "lower", "upper", "level", "model")}
    text = (
        f"{prefix}About {keep['expected']:.0f} defect(s) not yet found "
        f"({keep['level']:.0%} interval {keep['lower']:.0f} to {keep['upper']:.0f})."
    )
    return keep, text


def _forecast_one(
    y: pd.Series, *, name: str, weeks: pd.DatetimeIndex, n_origins: int
) -> tuple[SeriesForecast, CountForecastResults | None]:
    n, total = len(y), float(y.sum())
    history = pd.DataFrame({"week_start": y.index, "count": y.to_numpy(dtype="int64")})
    trend = laplace_trend_counts(y.to_numpy()).as_dict()
    if n == 0:
        forecast = pd.DataFrame(
            {"week_start": weeks, "expected": 0.0, "lower_80": 0, "upper_80": 0, "lower_95": 0, "upper_95": 0}
        ).astype({c: "int64" for c in FORECAST_COLUMNS[2:]})
        note = "No history before the forecast date: forecasting zero defects."
        return SeriesForecast(name, "mean", note, history, forecast, _empty_backtest(), None, trend), None
    if total == 0:
        res = MeanForecaster().fit(y)
        note = f"No defects in {n} week(s) of history: forecasting zero defects per week."
        return SeriesForecast(
            name, "mean", note, history, _forecast_frame(res, weeks), _empty_backtest(), None, trend
        ), res
    if n < MIN_HISTORY_WEEKS or total < MIN_DEFECTS:
        res = MeanForecaster().fit(y)
        note = (
            f"Only {n} week(s) of history and {total:.0f} defect(s); at least {MIN_HISTORY_WEEKS} weeks and "
            f"{MIN_DEFECTS} defects are needed to compare models, so the forecast is the weekly mean "
            f"({float(res.params['mean']):.2f} per week)."
        )
        return SeriesForecast(
            name, "mean", note, history, _forecast_frame(res, weeks), _empty_backtest(), None, trend
        ), res

    models = candidate_models()
    scores, bt_notes = rolling_origin_backtest(y, models=models, horizon=len(weeks), n_origins=n_origins)
    scores = scores.sort_values(["mase", "model"], kind="stable").reset_index(drop=True)
    winner = select_model(scores, order=list(models))
    ranked = ([winner] if winner else []) + [m for m in scores["model"] if m != winner]
    fitted: CountForecastResults | None = None
    chosen_name = "mean"
    for candidate in ranked:
        try:
            fitted = models[candidate].fit(y)
        except ValueError:
            bt_notes.append(f"{candidate} could not be fitted on the full history.")
            continue
        chosen_name = candidate
        break
    if fitted is None:
        fitted = MeanForecaster().fit(y)
        parts = ["No model could be scored by backtest, so the forecast is the weekly mean."]
    else:
        row = scores[scores["model"] == chosen_name].iloc[0]
        how = "lowest scaled error" if chosen_name == winner else "next-lowest scaled error"
        summary = (
            f"Chosen by backtest: {how} (MASE {row['mase']:.2f}; below 1 beats the in-sample one-week-ahead "
            f"naive error) over {int(row['n_origins'])} forecast origins; its 80 % intervals held "
            f"{row['coverage_80']:.0%} of the actual weeks."
        )
        parts = [summary]
    parts += bt_notes
    residual, residual_note = _residual(y, fitted)
    parts.append(residual_note)
    forecast = _forecast_frame(fitted, weeks)
    return SeriesForecast(
        name, chosen_name, " ".join(parts), history, forecast, scores, residual, trend
    ), fitted


def _bottom_up_total(
    direct: SeriesForecast,
    parts: dict[str, CountForecastResults],
    *,
    ratio: float,
    weeks: pd.DatetimeIndex,
    n_simulations: int,
    random_state: int,
) -> SeriesForecast:
    h = len(weeks)
    rng = np.random.default_rng(random_state)
    expected = np.zeros(h)
    sums = np.zeros((h, n_simulations))
    for name in sorted(parts):
        mean, var = parts[name].moments(h)
        expected += mean
        sums += count_draws(mean, var, size=n_simulations, rng=rng)
    expected *= ratio
    sums *= ratio
    forecast = pd.DataFrame({"week_start": weeks, "expected": expected})
    for level in (80, 95):
        alpha = (1 - level / 100) / 2
        forecast[f"lower_{level}"] = np.floor(np.quantile(sums, alpha, axis=1, method="inverted_cdf") + 1e-9)
        forecast[f"upper_{level}"] = np.ceil(
            np.quantile(sums, 1 - alpha, axis=1, method="inverted_cdf") - 1e-9
        )
    forecast = forecast.astype({c: "int64" for c in FORECAST_COLUMNS[2:]})
    note = (
        f"Bottom-up: the expected count is the sum of the {len(parts)} component forecasts times {ratio:.3f} "
        "(the history's ratio of distinct defects to component memberships, since a defect filed under "
        f"several components counts once here); intervals are quantiles of {n_simulations} simulated sums of "
        "independent component counts, scaled the same way. Backtest scores are for models fitted to the "
        "total directly, for comparison: none of them made this forecast. "
        + direct.note.replace("Chosen by backtest: ", "The best of them by backtest had the ", 1)
    )
    return SeriesForecast(
        TOTAL, "bottom_up", note, direct.history, forecast, direct.backtest, direct.residual, direct.trend
    )


def forecast_components(
    defects: pd.DataFrame,
    *,
    horizon_weeks: int = 8,
    as_of: pd.Timestamp | str | None = None,
    random_state: int = 0,
    components: Iterable[str] | None = None,
    severity: str | Iterable[str] | None = None,
    type: str | Iterable[str] | None = None,  # the field is called "type" in defect exports
    n_origins: int = 8,
    n_simulations: int = 2000,
) -> dict[str, SeriesForecast]:
    """Forecast weekly defect inflow per component and for the total.

    Parameters
    ----------
    defects : DataFrame
        Columns ``key``, ``created``, ``components`` (tuple of names), optionally ``resolved``,
        ``severity``, ``type``; see :func:`weekly_counts`.
    horizon_weeks : int, default 8
        Number of future weeks.
    as_of : Timestamp, optional
        Forecast date. Only defects created before it are used, and only complete weeks:
        the forecast starts with the week (Monday 00:00 UTC) holding ``as_of``, and defects
        created earlier in that same week are not used. Default: the week after the latest
        creation, so the latest week counts as complete.
    random_state : int, default 0
        Seed of the simulation behind the total's intervals.
    components : iterable of str, optional
        Component names to report even without defects (they get zero forecasts).
    severity, type : optional
        Filters passed to :func:`weekly_counts`.
    n_origins : int, default 8
        Number of rolling forecast origins in the backtest.
    n_simulations : int, default 2000
        Simulated sums behind the total's intervals.

    Returns
    -------
    dict of str to SeriesForecast
        One entry per component name and ``'__total__'``.

    Notes
    -----
    Per series: a component's history starts at the week of its first defect; fewer than
    8 weeks or 5 defects → the mean model; otherwise the rolling-origin backtest picks the
    model with the lowest MASE (ties → simpler). Intervals are integer quantiles of a
    Poisson / negative-binomial predictive distribution. The total is reconciled bottom-up
    (see the total's ``note``); when no defect has a component the total is forecast directly.
    """
    if (
        isinstance(horizon_weeks, bool)
        or not isinstance(horizon_weeks, (int, np.integer))
        or horizon_weeks < 1
    ):
        raise ValueError(BAD_HORIZON_WEEKS.format(h=horizon_weeks))
    counts = weekly_counts(defects, severity=severity, type=type, components=components)
    if as_of is not None:
        forecast_start = period_floor(to_utc_naive(as_of), freq="W-MON")
    elif len(counts) and counts["created"].sum() > 0:
        created_weeks = counts.loc[(counts["series"] == TOTAL) & (counts["created"] > 0), "period_start"]
        forecast_start = created_weeks.max() + WEEK
    else:
        raise ValueError(NO_DEFECTS_NO_AS_OF)
    weeks = pd.date_range(forecast_start, periods=int(horizon_weeks), freq=WEEK).astype("datetime64[ns]")
    if len(counts) and counts["period_start"].min() < forecast_start:
        # Quiet weeks between the last defect and the forecast date are zeros, not missing.
        counts = weekly_counts(
            defects, severity=severity, type=type, components=components, end=forecast_start - WEEK
        )
    counts = counts[counts["period_start"] < forecast_start]
    names = sorted({*counts["series"].unique(), *(components or ())} - {TOTAL})

    total_y = _series(counts, TOTAL)
    results: dict[str, SeriesForecast] = {}
    fitted: dict[str, CountForecastResults] = {}
    component_sum = 0.0
    for name in names:
        y = _series(counts, name)
        component_sum += float(y.sum())
        nonzero = np.flatnonzero(y.to_numpy() > 0)
        if nonzero.size:
            y = y.iloc[nonzero[0] :]
        elif len(total_y):
            y = pd.Series(0.0, index=total_y.index)
        forecast, res = _forecast_one(y, name=name, weeks=weeks, n_origins=n_origins)
        results[name] = forecast
        if res is not None:
            fitted[name] = res

    direct, _ = _forecast_one(total_y, name=TOTAL, weeks=weeks, n_origins=n_origins)
    total_count = float(total_y.sum())
    if component_sum > 0 and fitted:
        results[TOTAL] = _bottom_up_total(
            direct,
            fitted,
            ratio=total_count / component_sum,
            weeks=weeks,
            n_simulations=n_simulations,
            random_state=random_state,
        )
    else:
        reason = "No defect names a component, so the total is forecast directly. " if total_count else ""
        results[TOTAL] = SeriesForecast(
            TOTAL,
            direct.model,
            reason + direct.note,
            direct.history,
            direct.forecast,
            direct.backtest,
            direct.residual,
            direct.trend,
        )
    return results


def _series(counts: pd.DataFrame, name: str) -> pd.Series:
    rows = counts[counts["series"] == name]
    return pd.Series(
        rows["created"].to_numpy(dtype=float),
        index=pd.DatetimeIndex(
            rows["period_start"].to_numpy(), freq=WEEK if len(rows) else None, name="week_start"
        ),
        name=name,
    )
