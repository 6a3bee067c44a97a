"""Small forecast snapshots built in the tests for the "Defect outlook" pages and exports (no tests here).

The weekly intervals are the integer quantiles of a Poisson distribution (scipy.stats.poisson), the
shape the forecast core documents for its intervals; the numbers are constructed here, not copied from
any output.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, timedelta

import pytest
from django.contrib.auth.models import User
from django.core.cache import cache
from scipy import stats

from analytics.models import ForecastSnapshot
from ingest.models import Component, Project

XSS = "<img src=x onerror=alert(1)>"
FORMULA = '=HYPERLINK("http://attacker.invalid","open")'
FIRST_FORECAST_WEEK = date(2026, 11, 30)  # a Monday
HISTORY_WEEKS = 10
HORIZON = 12


def poisson_week(week_start: date, mean: float) -> dict:
    """One forecast week whose intervals are the central Poisson quantiles (scipy.stats.poisson.ppf)."""
    return {
        "week_start": week_start.isoformat(),
        "expected": mean,
        "lower_80": int(stats.poisson.ppf(0.10, mean)),
        "upper_80": int(stats.poisson.ppf(0.90, mean)),
        "lower_95": int(stats.poisson.ppf(0.025, mean)),
        "upper_95": int(stats.poisson.ppf(0.975, mean)),
    }


def snapshot_payload(mean: float, *, model: str = "goel_okumoto", horizon: int = HORIZON) -> dict:
    history = [
        {
            "week_start": (FIRST_FORECAST_WEEK - timedelta(weeks=HISTORY_WEEKS - i)).isoformat(),
            "count": 3 + i % 4,
        }
        for i in range(HISTORY_WEEKS)
    ]
    forecast = [
        poisson_week(FIRST_FORECAST_WEEK + timedelta(weeks=i), mean * 0.97**i) for i in range(horizon)
    ]
    backtest = [
        {
            "model": "goel_okumoto",
            "mase": 0.61,
            "coverage_80": 0.83,
            "n_origins": 8,
            "n_forecasts": 40,
            "chosen": model == "goel_okumoto",
        },
        {
            "model": "naive",
            "mase": 1.12,
            "coverage_80": 0.55,
            "n_origins": 8,
            "n_forecasts": 40,
            "chosen": model == "naive",
        },
    ]
    return {
        "model": model,
        "note": "Chosen by backtest in this test.",
        "history": history,
        "forecast": forecast,
        "backtest": backtest,
        "residual": {"expected": 7.4, "lower": 3.1, "upper": 15.9, "level": 0.95, "model": "goel_okumoto"},
        "trend": {
            "u": -2.4,
            "p_value": 0.016,
            "reading": "reliability growth: defects are arriving less often (u = -2.4)",
        },
    }


def store(
    project: Project, name: str, payload: dict, *, component: Component | None = None
) -> ForecastSnapshot:
    return ForecastSnapshot.objects.create(
        project=project,
        component=component,
        series_name=name,
        computed_at=datetime(2026, 12, 1, 6, tzinfo=UTC),
        as_of=FIRST_FORECAST_WEEK,
        horizon_weeks=len(payload["forecast"]),
        **payload,
    )


@pytest.fixture(autouse=True)
def _fresh_cache():
    """Forecast reports are cached per project; each test starts without."""
    cache.clear()
    yield
    cache.clear()


@pytest.fixture(name="outlook")
def outlook_fixture(db):
    """A project with the total and three components, one named like markup and one like a formula."""
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    snapshots = {
        ForecastSnapshot.TOTAL: store(
            project, ForecastSnapshot.TOTAL, snapshot_payload(9.0, model="bottom_up")
        )
    }
    for name, mean in (("Payments", 4.0), (XSS, 2.5), (FORMULA, 1.5)):
        component = Component.objects.create(project=project, name=name)
        snapshots[name] = store(project, name, snapshot_payload(mean), component=component)
    return project, snapshots


@pytest.fixture(name="viewer_client")
def viewer_client_fixture(client, db):
    User.objects.create_user("vera", password="pw-vera")
    assert client.login(username="vera", password="pw-vera")
    return client
