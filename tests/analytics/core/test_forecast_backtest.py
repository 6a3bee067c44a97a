"""MASE and rolling-origin backtest against hand computations (Hyndman & Koehler 2006)."""

import numpy as np
import pandas as pd
import pytest

from analytics.core.forecast import MeanForecaster, NaiveForecaster, mase, naive_mae, rolling_origin_backtest
from analytics.core.forecast.backtest import ZERO_SCALE, select_model


def test_mase_hand_computation():
    # Hyndman & Koehler (2006): q_t = e_t / ((1/(n-1)) sum_{i=2}^{n} |y_i - y_{i-1}|); MASE = mean |q_t|.
    train = [3, 5, 2, 6, 4]
    scale = (abs(5 - 3) + abs(2 - 5) + abs(6 - 2) + abs(4 - 6)) / 4  # = 11 / 4
    errors = [abs(5 - 4), abs(1 - 4)]
    assert naive_mae(train) == pytest.approx(2.75)
    assert mase([5, 1], [4, 4], y_train=train) == pytest.approx(np.mean(errors) / scale)
    with pytest.raises(ValueError) as err:
        mase([1], [1], y_train=[2, 2, 2])
    assert str(err.value) == ZERO_SCALE


def test_rolling_origin_naive_hand_computation():
    # Origins o = 4, 5, 6 (n = 7, n_origins = 3), horizon 2; naive forecast = y[o-1];
    # each error scaled by that origin's in-sample naive MAE (Hyndman & Koehler 2006).
    y = pd.Series([2.0, 4.0, 3.0, 6.0, 5.0, 9.0, 7.0])
    scores, notes = rolling_origin_backtest(y, models={"naive": NaiveForecaster()}, horizon=2, n_origins=3)
    v = y.to_numpy()
    scaled = []
    for o in (4, 5, 6):
        scale = np.mean(np.abs(np.diff(v[:o])))
        for k in range(min(2, 7 - o)):
            scaled.append(abs(v[o + k] - v[o - 1]) / scale)
    row = scores.iloc[0]
    assert row["model"] == "naive"
    assert row["mase"] == pytest.approx(np.mean(scaled), rel=1e-12)
    assert (row["n_origins"], row["n_forecasts"]) == (3, 5)
    assert 0.0 <= row["coverage_80"] <= 1.0
    assert notes == []


def test_constant_training_windows_are_skipped_and_said():
    y = pd.Series([0.0, 0.0, 0.0, 0.0, 0.0, 3.0, 1.0, 2.0])
    scores, notes = rolling_origin_backtest(y, models={"mean": MeanForecaster()}, horizon=2, n_origins=4)
    # Origins 4 and 5 have all-zero training windows: MASE undefined there (Hyndman & Koehler 2006).
    assert int(scores.iloc[0]["n_origins"]) == 2
    assert any("skipped" in note for note in notes)


def test_selection_prefers_lower_mase_and_simpler_on_ties():
    scores = pd.DataFrame(
        {
            "model": ["goel_okumoto", "mean", "naive"],
            "mase": [0.5, 0.5, 0.9],
            "coverage_80": [0.8, 0.8, 0.8],
            "n_origins": [8, 8, 8],
            "n_forecasts": [36, 36, 36],
        }
    )
    assert select_model(scores) == "mean"  # tie with goel_okumoto -> the simpler model
    scores.loc[0, "mase"] = 0.4
    assert select_model(scores) == "goel_okumoto"
    scores.loc[0, "n_origins"] = 5  # not scored at every origin -> not eligible
    assert select_model(scores) == "mean"
