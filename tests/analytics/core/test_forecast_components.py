"""The entry point: per-component forecasts, bottom-up total, edge cases, no NaN anywhere."""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from analytics.core.forecast import MIN_DEFECTS, MIN_HISTORY_WEEKS, TOTAL, forecast_components
from analytics.core.forecast.components import BAD_HORIZON_WEEKS, FORECAST_COLUMNS, NO_DEFECTS_NO_AS_OF

START = pd.Timestamp("2025-01-06")  # a Monday
AS_OF = START + pd.Timedelta(weeks=20)


def _go_defects(component, a, b, rng, weeks=20, prefix="BERTH"):
    """Invented marina scenario: GO arrivals (a total, rate b per week), ground truth built here."""
    n = rng.poisson(a)
    ages = rng.exponential(1 / b, n)
    ages = np.sort(ages[ages < weeks])
    return [
        {
            "key": f"{prefix}-{i}",
            "created": START + pd.Timedelta(weeks=float(t)),
            "resolved": None,
            "components": (component,),
        }
        for i, t in enumerate(ages)
    ]


def _frame(rows):
    return pd.DataFrame(rows, columns=["key", "created", "resolved", "components"])


def _assert_well_formed(result):
    assert list(result.forecast.columns) == list(FORECAST_COLUMNS)
    assert list(result.history.columns) == ["week_start", "count"]
    for frame in (result.history, result.forecast, result.backtest):
        numeric = frame.select_dtypes("number").to_numpy(dtype=float)
        assert np.isfinite(numeric).all(), result.series_name
        assert not frame.isna().any().any()
    f = result.forecast
    assert (f["lower_95"] >= 0).all()
    assert (f["lower_95"] <= f["lower_80"]).all() and (f["lower_80"] <= f["upper_80"]).all()
    assert (f["upper_80"] <= f["upper_95"]).all()
    assert (f["lower_80"] <= f["expected"]).all() and (f["expected"] <= f["upper_95"]).all()
    assert result.note
    assert set(result.trend) == {"u", "p_value", "reading"}
    assert np.isfinite([result.trend["u"], result.trend["p_value"]]).all()
    if result.residual is not None:
        values = [result.residual[k] for k in ("expected", "lower", "upper")]
        assert np.isfinite(values).all()


@pytest.fixture(scope="module")
def marina():
    rng = np.random.default_rng(11)
    rows = _go_defects("berths", 150, 0.1, rng) + _go_defects("payments", 60, 0.06, rng, prefix="PAY")
    rows.append(
        {
            "key": "LONE-1",
            "created": START + pd.Timedelta(weeks=15),
            "resolved": None,
            "components": ("harbour-map",),
        }
    )
    rows.append(
        {
            "key": "MULTI-1",
            "created": START + pd.Timedelta(weeks=3),
            "resolved": None,
            "components": ("berths", "payments"),
        }
    )
    defects = _frame(rows)
    before = defects.copy()
    out = forecast_components(
        defects, as_of=AS_OF, horizon_weeks=6, components=["quiet-dock"], n_origins=6, n_simulations=4000
    )
    pd.testing.assert_frame_equal(defects, before)  # input not modified (scikit-learn convention)
    return defects, out


def test_every_series_is_well_formed(marina):
    _, out = marina
    assert set(out) == {"berths", "payments", "harbour-map", "quiet-dock", TOTAL}
    for result in out.values():
        _assert_well_formed(result)
        assert list(result.forecast["week_start"]) == list(pd.date_range(AS_OF, periods=6, freq="7D"))


def test_chosen_model_is_the_backtest_winner_and_scores_all_models(marina):
    _, out = marina
    result = out["berths"]
    assert set(result.backtest["model"]) == {
        "naive",
        "mean",
        "ses",
        "poisson_trend",
        "goel_okumoto",
        "delayed_s_shaped",
    }
    best = result.backtest["mase"].min()
    assert result.backtest.loc[result.backtest["model"] == result.model, "mase"].iloc[0] == best
    assert "backtest" in result.note
    assert result.residual is not None and result.residual["lower"] <= result.residual["expected"]


def test_total_is_bottom_up(marina):
    defects, out = marina
    total = out[TOTAL]
    assert total.model == "bottom_up"
    # The scale factor: distinct defects / component memberships over the history (one defect has two).
    memberships = sum(len(c) for c in defects["components"])
    ratio = len(defects) / memberships
    component_sum = sum(out[n].forecast["expected"].to_numpy() for n in out if n != TOTAL)
    np.testing.assert_allclose(total.forecast["expected"].to_numpy(), ratio * component_sum, rtol=1e-12)
    assert "Bottom-up" in total.note
    # The backtest table of the total scores models fitted to it directly: the note must not claim that one
    # of them was chosen, since the bottom-up sum made the forecast.
    assert "Chosen by backtest" not in total.note and "none of them made this forecast" in total.note


def test_total_interval_matches_poisson_additivity():
    # Two components with six identical weeks each -> mean model with zero sample variance -> Poisson
    # predictive (variance = mean). A sum of independent Poisson counts is Poisson with the summed mean
    # (Poisson additivity, textbook), so the simulated total's quantiles must equal scipy's Poisson ppf
    # up to Monte Carlo error: with 20000 draws the simulated 10 % / 90 % quantiles are within one count.
    from scipy import stats

    rows = []
    for week in range(6):
        for i in range(3):
            rows.append(
                {
                    "key": f"B-{week}-{i}",
                    "created": START + pd.Timedelta(weeks=week, hours=i),
                    "resolved": None,
                    "components": ("berths",),
                }
            )
        for i in range(2):
            rows.append(
                {
                    "key": f"P-{week}-{i}",
                    "created": START + pd.Timedelta(weeks=week, hours=i),
                    "resolved": None,
                    "components": ("payments",),
                }
            )
    out = forecast_components(_frame(rows), horizon_weeks=2, n_simulations=20000, random_state=5)
    assert out["berths"].model == "mean" and out["payments"].model == "mean"
    total = out[TOTAL].forecast
    np.testing.assert_allclose(total["expected"], 5.0)
    for level in (80, 95):
        alpha = (1 - level / 100) / 2
        assert (abs(total[f"lower_{level}"] - stats.poisson.ppf(alpha, 5.0)) <= 1).all()
        assert (abs(total[f"upper_{level}"] - stats.poisson.ppf(1 - alpha, 5.0)) <= 1).all()


def test_edge_component_with_one_defect(marina):
    _, out = marina
    lone = out["harbour-map"]
    assert lone.model == "mean"
    assert f"at least {MIN_HISTORY_WEEKS} weeks and {MIN_DEFECTS} defects" in lone.note
    assert len(lone.history) == 5 and lone.history["count"].sum() == 1  # history starts at its first defect
    assert lone.backtest.empty and lone.residual is None
    assert lone.forecast["expected"].iloc[0] == pytest.approx(1 / 5)


def test_edge_all_zeros(marina):
    _, out = marina
    quiet = out["quiet-dock"]
    assert quiet.model == "mean" and "No defects" in quiet.note
    assert (quiet.forecast[list(FORECAST_COLUMNS[1:])].to_numpy() == 0).all()
    assert quiet.trend["reading"] == "no defects: no trend can be tested"


def test_edge_single_week_of_history():
    rows = [
        {
            "key": f"B-{i}",
            "created": START + pd.Timedelta(hours=3 * i),
            "resolved": None,
            "components": ("berths",),
        }
        for i in range(6)
    ]
    out = forecast_components(_frame(rows), horizon_weeks=3)
    for result in out.values():
        _assert_well_formed(result)
        assert len(result.history) == 1
        assert result.model in {"mean", "bottom_up"}
        assert "a single period of history" in result.trend["reading"]
    assert out["berths"].forecast["expected"].iloc[0] == pytest.approx(6.0)
    assert list(out["berths"].forecast["week_start"]) == list(
        pd.date_range(START + pd.Timedelta(weeks=1), periods=3, freq="7D")
    )


def test_edge_burst_week():
    rows = [
        {
            "key": f"B-{i}",
            "created": START + pd.Timedelta(weeks=4, hours=i),
            "resolved": None,
            "components": ("berths",),
        }
        for i in range(40)
    ]
    rows += [
        {
            "key": "B-late",
            "created": START + pd.Timedelta(weeks=11),
            "resolved": None,
            "components": ("berths",),
        }
    ]
    out = forecast_components(_frame(rows), as_of=START + pd.Timedelta(weeks=12), random_state=1)
    for result in out.values():
        _assert_well_formed(result)
    assert out["berths"].history["count"].tolist() == [40, 0, 0, 0, 0, 0, 0, 1]


def test_as_of_ignores_later_defects_and_the_partial_week(marina):
    defects, out = marina
    later = pd.DataFrame(
        [
            {
                "key": "LATE-1",
                "created": AS_OF + pd.Timedelta(days=2),
                "resolved": None,
                "components": ("berths",),
            }
        ]
    )
    again = forecast_components(
        pd.concat([defects, later], ignore_index=True),
        as_of=AS_OF,
        horizon_weeks=6,
        components=["quiet-dock"],
        n_origins=6,
        n_simulations=4000,
    )
    for name, result in out.items():
        pd.testing.assert_frame_equal(result.forecast, again[name].forecast)
    # as_of in mid-week: the forecast starts with the week holding as_of; that week's defects are unused.
    mid = forecast_components(
        pd.concat([defects, later], ignore_index=True),
        as_of=AS_OF + pd.Timedelta(days=3),
        horizon_weeks=6,
        components=["quiet-dock"],
        n_origins=6,
        n_simulations=4000,
    )
    pd.testing.assert_frame_equal(mid["berths"].history, out["berths"].history)


def test_no_defects_needs_as_of():
    empty = _frame([])
    with pytest.raises(ValueError) as err:
        forecast_components(empty)
    assert str(err.value) == NO_DEFECTS_NO_AS_OF
    out = forecast_components(empty, as_of=AS_OF, horizon_weeks=2)
    _assert_well_formed(out[TOTAL])
    assert (out[TOTAL].forecast["expected"] == 0).all()
    with pytest.raises(ValueError) as err:
        forecast_components(empty, as_of=AS_OF, horizon_weeks=0)
    assert str(err.value) == BAD_HORIZON_WEEKS.format(h=0)


def test_pure_core_does_not_import_django():
    # STYLE.md: the pure core must not load django.
    root = Path(__file__).resolve().parents[3]
    code = "import sys, analytics.core.forecast; print('django' in sys.modules)"
    done = subprocess.run([sys.executable, "-c", code], cwd=root, capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "False"
