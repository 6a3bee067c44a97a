"""Defect-inflow forecasts: load defects, call the pure core, store one ForecastSnapshot per series.

Stored JSON shapes (the dashboard and the API read them):

- ``history``: ``[{"week_start": "YYYY-MM-DD", "count": int}]``, complete weeks before the forecast;
- ``forecast``: ``[{"week_start", "expected", "lower_80", "upper_80", "lower_95", "upper_95"}]``;
- ``backtest``: one record per scored model (``model``, ``mase``, ``coverage_80``, ``n_origins``,
  ``n_forecasts``) plus ``chosen`` (true for the model behind the forecast; the total is reconciled
  bottom-up, so none of the total's rows, which score models fitted to the total directly, is chosen);
- ``residual``: expected defects not yet found with its interval, or null;
- ``trend``: the Laplace trend test ``{"u", "p_value", "reading"}``.

No NaN or infinity is stored: such a number becomes null.

Reconciliation: bottom-up. The total's expected count is the sum of the component forecasts, scaled by
the history's ratio of distinct defects to component memberships (a defect filed under two components
counts once in the total); see the total's ``note``.

Horizon: the backtest scores models over the requested horizon, so the chosen model can differ between a
4-week and a 12-week forecast; a shorter request than the stored one reads the stored weeks.

Forecast date: the forecast starts with the week (Monday 00:00 UTC) that holds the data cutoff, the
latest defect import (today when there is none); weeks with no defect count as zeros.
"""

from __future__ import annotations

import math
from datetime import UTC, date, datetime
from typing import Any

import pandas as pd
from django.core.cache import cache
from django.db import transaction
from django.db.models import Count, Max
from django.utils import timezone

from analytics.core.forecast import TOTAL, SeriesForecast, forecast_components
from analytics.models import ForecastSnapshot
from analytics.selectors_forecasts import (
    as_of_moment,
    component_names,
    defects_data_cutoff,
    defects_frame,
    forecast_snapshots,
)
from ingest.models import Component, Project

DEFAULT_HORIZON_WEEKS = 12
MAX_HORIZON_WEEKS = 104
RANDOM_STATE = 0
"""Seed of the simulation behind the total's intervals: the same defects give the same forecast."""
BACKTEST_ORIGINS = 8
"""Rolling forecast origins per series in the model-choosing backtest."""
TOTAL_SIMULATIONS = 2000
"""Simulated sums behind the total's bottom-up intervals."""

BAD_HORIZON = "horizon_weeks must be a whole number from 1 to {max}, got {value!r}"
AS_OF_IN_FUTURE = (
    "as_of {as_of} is after today ({today}): a forecast can only be made from defects already known"
)

EXPORT_FIELDS = (
    "component",
    "week_start",
    "expected",
    "lower_80",
    "upper_80",
    "lower_95",
    "upper_95",
    "model",
)
FORECAST_FIELDS = EXPORT_FIELDS[1:7]

assert TOTAL == ForecastSnapshot.TOTAL


def _json_value(value: Any) -> Any:
    """A JSON-safe scalar: NaN and infinity become None, numpy numbers plain Python, dates ISO strings."""
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, (pd.Timestamp, datetime, date)):
        return value.date().isoformat() if isinstance(value, (pd.Timestamp, datetime)) else value.isoformat()
    if hasattr(value, "item"):  # numpy scalar
        value = value.item()
    if isinstance(value, bool):
        return value
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    return str(value)


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    columns = list(frame.columns)
    return [
        {c: _json_value(v) for c, v in zip(columns, row, strict=True)}
        for row in frame.itertuples(index=False, name=None)
    ]


def series_payload(result: SeriesForecast) -> dict[str, Any]:
    """A SeriesForecast as the JSON stored in ForecastSnapshot (same keys as the model's fields)."""
    backtest = _records(result.backtest)
    for row in backtest:
        row["chosen"] = row["model"] == result.model
    history = [
        {"week_start": _json_value(r["week_start"]), "count": int(r["count"])}
        for r in _records(result.history)
    ]
    residual = None if result.residual is None else {k: _json_value(v) for k, v in result.residual.items()}
    return {
        "series_name": result.series_name,
        "model": result.model,
        "note": result.note,
        "history": history,
        "forecast": _records(result.forecast.loc[:, list(FORECAST_FIELDS)]),
        "backtest": backtest,
        "residual": residual,
        "trend": {k: _json_value(result.trend.get(k)) for k in ("u", "p_value", "reading")},
    }


def _check_horizon(horizon_weeks: object) -> int:
    if (
        isinstance(horizon_weeks, bool)
        or not isinstance(horizon_weeks, int)
        or not (1 <= horizon_weeks <= MAX_HORIZON_WEEKS)
    ):
        raise ValueError(BAD_HORIZON.format(max=MAX_HORIZON_WEEKS, value=horizon_weeks))
    return horizon_weeks


def forecasts_compute(
    *, project_id: int, horizon_weeks: int, as_of: date | datetime
) -> dict[str, SeriesForecast]:
    """Forecast every component of the project and the total from the defects created before ``as_of``.

    Every component of the project gets a forecast (zeros, explained, when it has no defect), so the
    set of series does not depend on defects created after ``as_of``.
    """
    moment = as_of_moment(as_of)
    return forecast_components(
        defects_frame(project_id=project_id, before=moment),
        horizon_weeks=_check_horizon(horizon_weeks),
        as_of=pd.Timestamp(moment),
        random_state=RANDOM_STATE,
        components=component_names(project_id=project_id),
        n_origins=BACKTEST_ORIGINS,
        n_simulations=TOTAL_SIMULATIONS,
    )


def forecasts_refresh(*, project_id: int, horizon_weeks: int = DEFAULT_HORIZON_WEEKS) -> int:
    """Recompute and store the forecast of every component and of the total; returns how many were stored.

    Snapshots of series that no longer exist are deleted. Without any defect the project still gets its
    total (zero forecast, with a note saying why), dated today.
    """
    horizon_weeks = _check_horizon(horizon_weeks)
    as_of = defects_data_cutoff(project_id=project_id) or timezone.now()
    results = forecasts_compute(project_id=project_id, horizon_weeks=horizon_weeks, as_of=as_of)
    computed_at = timezone.now()
    as_of_date = as_of_moment(as_of).astimezone(UTC).date()
    with transaction.atomic():
        components = {c.name: c for c in Component.objects.filter(project_id=project_id)}
        ForecastSnapshot.objects.filter(project_id=project_id).exclude(series_name__in=list(results)).delete()
        for name, result in results.items():
            payload = series_payload(result)
            del payload["series_name"]
            ForecastSnapshot.objects.update_or_create(
                project_id=project_id,
                series_name=name,
                defaults={
                    **payload,
                    "component": None if name == TOTAL else components.get(name),
                    "computed_at": computed_at,
                    "as_of": as_of_date,
                    "horizon_weeks": horizon_weeks,
                },
            )
    return len(results)


def _snapshot_payload(snapshot: ForecastSnapshot, horizon_weeks: int) -> dict[str, Any]:
    return {
        "series_name": snapshot.series_name,
        "model": snapshot.model,
        "note": snapshot.note,
        "history": snapshot.history,
        "forecast": snapshot.forecast[:horizon_weeks],
        "backtest": snapshot.backtest,
        "residual": snapshot.residual,
        "trend": snapshot.trend,
    }


def _ordered(payloads: list[dict[str, Any]]) -> list[dict[str, Any]]:
    return sorted(payloads, key=lambda p: (p["series_name"] != TOTAL, p["series_name"]))


def forecast_report(
    *, project: Project, horizon_weeks: int = DEFAULT_HORIZON_WEEKS, as_of: date | None = None
) -> dict[str, Any]:
    """Every series' forecast for the next ``horizon_weeks`` weeks, total first, then components by name.

    With ``as_of``: computed now from the defects created before that date, not stored. Without: the
    stored snapshots when they exist and reach far enough ahead, else computed from all defects (not
    stored either; ``forecasts_refresh`` stores). ``source`` says which.
    """
    horizon_weeks = _check_horizon(horizon_weeks)
    if as_of is not None:
        today = timezone.now().astimezone(UTC).date()
        if as_of > today:
            raise ValueError(AS_OF_IN_FUTURE.format(as_of=as_of.isoformat(), today=today.isoformat()))
    else:
        snapshots = forecast_snapshots(project=project)
        if snapshots and all(s.horizon_weeks >= horizon_weeks for s in snapshots):
            return {
                "as_of": snapshots[0].as_of.isoformat(),
                "horizon_weeks": horizon_weeks,
                "source": "stored",
                "computed_at": max(s.computed_at for s in snapshots),
                "series": [_snapshot_payload(s, horizon_weeks) for s in snapshots],
            }
    moment = as_of if as_of is not None else defects_data_cutoff(project_id=project.pk) or timezone.now()
    results = forecasts_compute(project_id=project.pk, horizon_weeks=horizon_weeks, as_of=moment)
    return {
        "as_of": as_of_moment(moment).astimezone(UTC).date().isoformat(),
        "horizon_weeks": horizon_weeks,
        "source": "computed",
        "computed_at": timezone.now(),
        "series": _ordered([series_payload(r) for r in results.values()]),
    }


def forecast_rows(payload: dict[str, Any]) -> list[dict[str, Any]]:
    """The export rows of one series: one per future week, fields ``EXPORT_FIELDS``."""
    return [
        {
            "component": payload["series_name"],
            **{f: week[f] for f in FORECAST_FIELDS},
            "model": payload["model"],
        }
        for week in payload["forecast"]
    ]


def forecast_export_rows(
    *, project: Project, horizon_weeks: int = DEFAULT_HORIZON_WEEKS, as_of: date | None = None
) -> list[dict[str, Any]]:
    """Per series (``'__total__'`` first, then components by name) and future week: ``EXPORT_FIELDS``.

    ``as_of``: use only defects created before that date (what the forecast would have said then);
    computed on the fly, nothing stored.
    """
    report = forecast_report(project=project, horizon_weeks=horizon_weeks, as_of=as_of)
    return [row for payload in report["series"] for row in forecast_rows(payload)]


#: A computed report (``as_of`` or a longer horizon than stored) takes seconds; it is kept this long, keyed on
#: the data version, so a new defect import or forecast refresh is seen at once.
REPORT_CACHE_SECONDS = 6 * 3600


def forecast_report_cached(
    *, project: Project, horizon_weeks: int = DEFAULT_HORIZON_WEEKS, as_of: date | None = None
) -> dict[str, Any]:
    """:func:`forecast_report`, cached per project, horizon, ``as_of`` and data state (snapshots, imports).

    The dashboard pages and the API share this cache.
    """
    stored = ForecastSnapshot.objects.filter(project=project).aggregate(at=Max("computed_at"), n=Count("id"))
    cutoff = defects_data_cutoff(project_id=project.pk)
    key = (
        f"barometer:forecast-report:{project.pk}:{horizon_weeks}:{as_of and as_of.isoformat()}:"
        f"{stored['n']}:{stored['at'] and stored['at'].isoformat()}:{cutoff and cutoff.isoformat()}"
    )
    report = cache.get(key)
    if report is None:
        report = forecast_report(project=project, horizon_weeks=horizon_weeks, as_of=as_of)
        cache.set(key, report, REPORT_CACHE_SECONDS)
    return report
