"""Forecast service: stored snapshots, reconciliation, as_of, JSON hygiene, edge cases.

Reference for the numbers: the pure core ``analytics.core.forecast.forecast_components`` called directly on
the test's own defect rows (the core is checked against published values in tests/analytics/core/:
NTDS fit, statsmodels, Hyndman & Koehler's MASE, Kanoun & Laprie's trend factor). Defect data is an
invented marina scenario whose ground truth (Goel-Okumoto arrivals) the helpers below build.
"""

from __future__ import annotations

import json
from datetime import UTC, date, datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from django.utils import timezone

from analytics.core.forecast import TOTAL, forecast_components
from analytics.models import ForecastSnapshot
from analytics.selectors_forecasts import defects_frame, forecast_snapshots
from analytics.services import forecasts as forecasts_service
from analytics.services.forecasts import (
    AS_OF_IN_FUTURE,
    BAD_HORIZON,
    EXPORT_FIELDS,
    MAX_HORIZON_WEEKS,
    RANDOM_STATE,
    forecast_export_rows,
    forecast_report,
    forecasts_refresh,
)
from ingest.models import Component, Defect, Project

START = datetime(2025, 1, 6, tzinfo=UTC)  # a Monday
WEEKS = 16
# Last import on the Wednesday of week 16: that week is incomplete, so the forecast starts with it.
CUTOFF = START + timedelta(weeks=WEEKS, days=2, hours=9)
FORECAST_START = START + timedelta(weeks=WEEKS)
HORIZON = 3
COMPONENTS = ("Berth Sensors", "Harbour Map", "Payments")  # Harbour Map never gets a defect
FEW_ORIGINS, FEW_SIMULATIONS = 3, 300  # fewer than in production, to keep the tests fast


def go_arrivals(rng, *, a, b, weeks, prefix, components):
    """Goel-Okumoto arrivals built here: Poisson(a) faults, detection ages Exponential(rate b per week)."""
    ages = np.sort(rng.exponential(1 / b, rng.poisson(a)))
    return [
        (f"{prefix}-{i}", START + timedelta(weeks=float(t)), components)
        for i, t in enumerate(ages[ages < weeks])
    ]


def scenario_rows():
    rng = np.random.default_rng(7)
    rows = go_arrivals(rng, a=60, b=0.12, weeks=WEEKS, prefix="SEN", components=("Berth Sensors",))
    rows += go_arrivals(rng, a=35, b=0.08, weeks=WEEKS, prefix="PAY", components=("Payments",))
    rows.append(("MULTI-1", START + timedelta(weeks=3, hours=5), ("Berth Sensors", "Payments")))
    rows.append(("LOOSE-1", START + timedelta(weeks=5, hours=2), ()))
    # Created in the incomplete week of the cutoff: not used (only complete weeks are).
    rows.append(("LATE-1", CUTOFF - timedelta(hours=3), ("Payments",)))
    return rows


def store_defects(project, rows, *, imported=CUTOFF, component_names=()):
    components = {
        name: Component.objects.get_or_create(project=project, name=name)[0]
        for name in {*component_names, *(n for _, _, names in rows for n in names)}
    }
    for key, created, names in rows:
        defect = Defect.objects.create(
            project=project,
            key=key,
            title=f"{key} in the berth planner",
            created_at=created,
            first_imported=imported,
            last_imported=imported,
        )
        defect.components.set([components[n] for n in names])
    return components


def rows_frame(rows, *, before=None):
    """The test's own DataFrame for the core (not built by the selector under test)."""
    kept = [r for r in rows if before is None or r[1] < before]
    return pd.DataFrame(
        {
            "key": [r[0] for r in kept],
            "created": [pd.Timestamp(r[1]) for r in kept],
            "resolved": [None] * len(kept),
            "components": [r[2] for r in kept],
        },
        columns=["key", "created", "resolved", "components"],
    )


def quiet_rows():
    """A few defects in the last weeks: every series is too short for a backtest (cheap to compute)."""
    week = lambda n, h=10: START + timedelta(weeks=n, hours=h)  # noqa: E731
    return [
        ("SEN-1", week(13), ("Berth Sensors",)),
        ("SEN-2", week(15), ("Berth Sensors",)),
        ("PAY-1", week(14), ("Payments",)),
        ("MULTI-1", week(15, 12), ("Berth Sensors", "Payments")),
    ]


@pytest.fixture(autouse=True)
def _few_origins(monkeypatch):
    monkeypatch.setattr(forecasts_service, "BACKTEST_ORIGINS", FEW_ORIGINS)
    monkeypatch.setattr(forecasts_service, "TOTAL_SIMULATIONS", FEW_SIMULATIONS)


@pytest.fixture
def project(db):
    return Project.objects.create(slug="berthwise", name="Berthwise")


@pytest.fixture
def scenario(project):
    rows = scenario_rows()
    store_defects(project, rows, component_names=COMPONENTS)
    return project, rows


@pytest.fixture
def quiet(project):
    rows = quiet_rows()
    store_defects(project, rows, component_names=COMPONENTS)
    return project, rows


def direct(rows, *, as_of=CUTOFF, horizon=HORIZON, before=None):
    return forecast_components(
        rows_frame(rows, before=before),
        horizon_weeks=horizon,
        as_of=pd.Timestamp(as_of),
        random_state=RANDOM_STATE,
        components=COMPONENTS,
        n_origins=FEW_ORIGINS,
        n_simulations=FEW_SIMULATIONS,
    )


def dumps_strict(value):
    return json.dumps(value, allow_nan=False)  # raises ValueError on NaN or infinity


def snapshots_by_name(project):
    return {s.series_name: s for s in forecast_snapshots(project=project)}


def test_stored_snapshots_match_the_core_called_directly(scenario):
    # Reference: forecast_components on the test's own rows (module docstring).
    project, rows = scenario
    stored = forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    expected = direct(rows)
    snapshots = snapshots_by_name(project)
    assert stored == len(expected) == 4 and set(snapshots) == set(expected) == {*COMPONENTS, TOTAL}
    for name, want in expected.items():
        snap = snapshots[name]
        assert (snap.model, snap.note, snap.horizon_weeks, snap.as_of) == (
            want.model,
            want.note,
            HORIZON,
            CUTOFF.date(),
        )
        assert snap.history == [
            {"week_start": ts.date().isoformat(), "count": int(c)}
            for ts, c in zip(want.history["week_start"], want.history["count"])
        ]
        assert [w["week_start"] for w in snap.forecast] == [
            (FORECAST_START + timedelta(weeks=i)).date().isoformat() for i in range(HORIZON)
        ]
        np.testing.assert_allclose(
            [w["expected"] for w in snap.forecast], want.forecast["expected"], rtol=1e-12
        )
        for col in ("lower_80", "upper_80", "lower_95", "upper_95"):
            assert [w[col] for w in snap.forecast] == want.forecast[col].tolist()
            assert all(type(w[col]) is int for w in snap.forecast)
        assert [r["model"] for r in snap.backtest] == want.backtest["model"].tolist()
        assert [r["chosen"] for r in snap.backtest] == [m == want.model for m in want.backtest["model"]]
        np.testing.assert_allclose([r["mase"] for r in snap.backtest], want.backtest["mase"], rtol=1e-12)
        assert snap.residual == want.residual
        assert snap.trend == pytest.approx(want.trend)
        for field in ("history", "forecast", "backtest", "residual", "trend"):
            dumps_strict(getattr(snap, field))  # no NaN or infinity anywhere
    assert snapshots["Berth Sensors"].backtest, "the growth-model component should have been backtested"

    # History: counted by hand from the rows, only complete weeks (LATE-1 is in the cutoff's week).
    by_hand = sum(1 for _, created, names in rows if "Payments" in names and created < FORECAST_START)
    assert sum(w["count"] for w in snapshots["Payments"].history) == by_hand
    assert (
        snapshots["Payments"].history[-1]["week_start"]
        == (FORECAST_START - timedelta(weeks=1)).date().isoformat()
    )
    assert sum(w["count"] for w in snapshots[TOTAL].history) == sum(1 for r in rows if r[1] < FORECAST_START)

    # The selector: total first, then components by name; components link their row, the total none.
    ordered = forecast_snapshots(project=project)
    assert [s.series_name for s in ordered] == [TOTAL, *sorted(COMPONENTS)]
    assert ordered[0].component is None
    for snap in ordered[1:]:
        assert snap.component == Component.objects.get(project=project, name=snap.series_name)


def test_total_is_reconciled_bottom_up(scenario):
    # Bottom-up (documented in analytics/services/forecasts.py): total expected = sum of the components'
    # expected counts times distinct defects / component memberships, both counted here from the rows.
    project, rows = scenario
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    snaps = snapshots_by_name(project)
    used = [r for r in rows if r[1] < FORECAST_START]
    ratio = len(used) / sum(len(names) for _, _, names in used)
    parts = np.sum([[w["expected"] for w in snaps[c].forecast] for c in COMPONENTS], axis=0)
    np.testing.assert_allclose([w["expected"] for w in snaps[TOTAL].forecast], ratio * parts, rtol=1e-9)
    assert snaps[TOTAL].model == "bottom_up"
    # The total's backtest scores models fitted to the total directly: none of them made the forecast.
    assert snaps[TOTAL].backtest and not any(r["chosen"] for r in snaps[TOTAL].backtest)
    assert sum(r["chosen"] for r in snaps["Berth Sensors"].backtest) == 1


def test_refresh_is_deterministic_and_deletes_stale_series(quiet):
    project, _ = quiet
    ForecastSnapshot.objects.create(
        project=project, series_name="Fuel Dock", computed_at=timezone.now(), as_of=date(2025, 1, 1),
        horizon_weeks=HORIZON, model="mean",
    )  # fmt: skip
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    fields = ("series_name", "model", "note", "history", "forecast", "backtest", "residual", "trend")
    first = list(ForecastSnapshot.objects.filter(project=project).order_by("series_name").values(*fields))
    assert [row["series_name"] for row in first] == sorted([*COMPONENTS, TOTAL])  # Fuel Dock is gone
    assert first[-1]["model"] == "bottom_up"  # the seeded simulation is part of what must repeat
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    again = list(ForecastSnapshot.objects.filter(project=project).order_by("series_name").values(*fields))
    assert again == first


def test_as_of_ignores_defects_created_later(scenario):
    # Reference: the core on the rows created before as_of, cut by the test itself.
    project, rows = scenario
    as_of = date(2025, 3, 27)  # a Thursday in week 12
    moment = datetime(2025, 3, 27, tzinfo=UTC)
    before = forecast_export_rows(project=project, horizon_weeks=HORIZON, as_of=as_of)
    dumps_strict(before)
    later = [
        ("SEN-LATE-A", moment + timedelta(hours=1), ("Berth Sensors",)),
        ("PAY-LATE-B", moment + timedelta(weeks=2), ("Payments", "Berth Sensors")),
        ("LOOSE-LATE", moment + timedelta(days=1), ()),
    ]
    store_defects(project, later)
    Defect.objects.filter(project=project, key="SEN-0").update(resolved_at=moment + timedelta(days=3))
    assert forecast_export_rows(project=project, horizon_weeks=HORIZON, as_of=as_of) == before
    want = direct(rows, as_of=moment, before=moment)
    by_series: dict[str, list[dict]] = {}
    for row in before:
        by_series.setdefault(row["component"], []).append(row)
    assert list(by_series) == [TOTAL, *sorted(COMPONENTS)]
    for name, result in want.items():
        assert [r["model"] for r in by_series[name]] == [result.model] * HORIZON
        assert [r["week_start"] for r in by_series[name]] == ["2025-03-24", "2025-03-31", "2025-04-07"]
        np.testing.assert_allclose([r["expected"] for r in by_series[name]], result.forecast["expected"])
        assert [r["upper_95"] for r in by_series[name]] == result.forecast["upper_95"].tolist()
    assert not ForecastSnapshot.objects.filter(project=project).exists()  # computed, not stored


def test_export_reads_snapshots_when_they_reach_far_enough(quiet):
    project, _ = quiet
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    ForecastSnapshot.objects.filter(project=project, series_name="Payments").update(model="marker")
    assert forecast_report(project=project, horizon_weeks=HORIZON - 1)["source"] == "stored"
    rows = forecast_export_rows(project=project, horizon_weeks=HORIZON - 1)
    assert len(rows) == 4 * (HORIZON - 1)
    assert [tuple(r) for r in rows] == [EXPORT_FIELDS] * len(rows)
    assert {r["model"] for r in rows if r["component"] == "Payments"} == {"marker"}
    assert [r["component"] for r in rows[:: HORIZON - 1]] == [TOTAL, *sorted(COMPONENTS)]
    longer = forecast_report(project=project, horizon_weeks=HORIZON + 1)
    assert longer["source"] == "computed" and longer["as_of"] == CUTOFF.date().isoformat()
    assert all(len(series["forecast"]) == HORIZON + 1 for series in longer["series"])
    assert "marker" not in {series["model"] for series in longer["series"]}
    assert ForecastSnapshot.objects.get(project=project, series_name="Payments").horizon_weeks == HORIZON


def test_bad_arguments_name_the_problem(project):
    for bad in (0, MAX_HORIZON_WEEKS + 1, 2.5, True):
        with pytest.raises(ValueError) as err:
            forecast_export_rows(project=project, horizon_weeks=bad)
        assert str(err.value) == BAD_HORIZON.format(max=MAX_HORIZON_WEEKS, value=bad)
    tomorrow = timezone.now().date() + timedelta(days=1)
    with pytest.raises(ValueError) as err:
        forecast_export_rows(project=project, as_of=tomorrow)
    assert str(err.value) == AS_OF_IN_FUTURE.format(as_of=tomorrow, today=timezone.now().date())


# -- edge cases at the service level ---------------------------------------------------------------------


def test_project_without_defects_gets_an_explained_zero_total(project):
    assert forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON) == 1
    (snap,) = forecast_snapshots(project=project)
    assert snap.series_name == TOTAL and snap.component is None and snap.model == "mean"
    assert snap.history == [] and snap.backtest == [] and snap.residual is None and snap.note
    assert snap.as_of == timezone.now().date()
    assert [(w["expected"], w["lower_95"], w["upper_95"]) for w in snap.forecast] == [(0.0, 0, 0)] * HORIZON
    dumps_strict(snap.trend)


def test_components_without_defects_get_explained_zeros(project):
    Component.objects.create(project=project, name="Harbour Map")
    assert forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON) == 2
    snap = ForecastSnapshot.objects.get(project=project, series_name="Harbour Map")
    assert snap.component.name == "Harbour Map" and snap.note
    assert {w["upper_95"] for w in snap.forecast} == {0}


def _one_defect_checks(project, n_weeks):
    # Hand computation: the mean forecast (Hyndman & Athanasopoulos, "Forecasting: principles and practice",
    # the average method; from memory) of 1 defect in n weeks of history is 1/n per week.
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    for name in ("Berth Sensors", TOTAL):
        snap = ForecastSnapshot.objects.get(project=project, series_name=name)
        # The total is the (bottom-up) sum of its one component, so it carries the same numbers.
        assert snap.model == ("mean" if name != TOTAL else "bottom_up") and "1 defect" in snap.note
        assert sum(w["count"] for w in snap.history) == 1
        assert len(snap.history) == n_weeks
        for week in snap.forecast:
            assert week["expected"] == pytest.approx(1 / n_weeks)
            assert week["lower_95"] == 0 and week["upper_95"] >= 1
        assert snap.residual is None
        dumps_strict(snap.trend)


def test_one_component_with_one_defect_in_the_last_complete_week(project):
    store_defects(project, [("SEN-1", FORECAST_START - timedelta(days=3), ("Berth Sensors",))])
    _one_defect_checks(project, n_weeks=1)


def test_quiet_weeks_between_the_last_defect_and_the_forecast_count_as_zeros(project):
    # Issue 7: "weeks with no defect are zeros, not gaps"; a series starts at the week of its first defect.
    store_defects(project, [("SEN-1", START + timedelta(weeks=2, days=4), ("Berth Sensors",))])
    _one_defect_checks(project, n_weeks=WEEKS - 2)


def test_defect_dated_after_the_last_import_is_left_out(quiet):
    # The defect import refuses future dates (tests/ingest/parsers/test_defects.py); a direct database
    # write can still store one: it must not move the forecast date or change the forecast.
    project, rows = quiet
    store_defects(project, [("SEN-FUTURE", timezone.now() + timedelta(days=30), ("Berth Sensors",))])
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    snap = ForecastSnapshot.objects.get(project=project, series_name="Berth Sensors")
    want = direct(rows)["Berth Sensors"]
    assert snap.as_of == CUTOFF.date() and snap.model == want.model
    assert sum(w["count"] for w in snap.history) == 3
    np.testing.assert_allclose([w["expected"] for w in snap.forecast], want.forecast["expected"])


def test_defects_frame_shape_and_what_was_known_before(quiet):
    project, rows = quiet
    cut = START + timedelta(weeks=15)
    Defect.objects.filter(project=project, key="SEN-1").update(resolved_at=cut + timedelta(days=1))
    frame = defects_frame(project_id=project.pk).set_index("key")
    assert sorted(frame.index) == sorted(r[0] for r in rows)
    assert frame.loc["MULTI-1", "components"] == ("Berth Sensors", "Payments")
    assert pd.notna(frame.loc["SEN-1", "resolved"]) and pd.isna(frame.loc["SEN-2", "resolved"])
    early = defects_frame(project_id=project.pk, before=cut).set_index("key")
    assert sorted(early.index) == ["PAY-1", "SEN-1"]
    assert pd.isna(early.loc["SEN-1", "resolved"])  # resolved after the cut: still open then
