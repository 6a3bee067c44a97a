"""export_analytics --what forecast: per series and future week, as JSON and as injection-safe CSV.

Reference for the figures: the forecast service (tests/analytics/test_forecasts.py checks it against the
pure core called directly); here we check that the command passes them on unchanged, in both formats.
"""

from __future__ import annotations

import csv
import io
import json
from datetime import timedelta

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError
from django.utils import timezone

from analytics.core.forecast import TOTAL
from analytics.services.forecasts import (
    AS_OF_IN_FUTURE,
    BAD_HORIZON,
    EXPORT_FIELDS,
    MAX_HORIZON_WEEKS,
    forecast_export_rows,
    forecasts_refresh,
)
from tests.analytics.test_forecasts import (  # noqa: F401  (_few_origins is an autouse fixture)
    COMPONENTS,
    CUTOFF,
    FORECAST_START,
    HORIZON,
    START,
    _few_origins,
    quiet_rows,
    store_defects,
)

FORMULA = '=HYPERLINK("http://x")'  # a component name a spreadsheet would run (OWASP CSV injection)


@pytest.fixture
def project(db):
    from ingest.models import Project

    project = Project.objects.create(slug="berthwise", name="Berthwise")
    rows = [*quiet_rows(), ("DOCK-1", START + timedelta(weeks=14, hours=3), (FORMULA,))]
    store_defects(project, rows, component_names=COMPONENTS)
    return project


def export(fmt: str, *, slug: str = "berthwise", **options) -> str:
    out = io.StringIO()
    call_command("export_analytics", project=slug, what="forecast", format=fmt, stdout=out, **options)
    return out.getvalue()


def test_json_lists_every_series_and_future_week(project):
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    rows = json.loads(export("json", horizon_weeks=2))
    assert rows == forecast_export_rows(project=project, horizon_weeks=2)
    assert all(tuple(row) == EXPORT_FIELDS for row in rows)
    names = [TOTAL, *sorted([*COMPONENTS, FORMULA])]
    assert [row["component"] for row in rows] == [name for name in names for _ in range(2)]
    weeks = [(FORECAST_START + timedelta(weeks=i)).date().isoformat() for i in range(2)]
    assert [row["week_start"] for row in rows] == weeks * len(names)
    for row in rows:
        assert 0 <= row["lower_95"] <= row["lower_80"] <= row["upper_80"] <= row["upper_95"]
        assert row["lower_80"] <= row["expected"] <= row["upper_95"]


def test_csv_has_the_same_rows_and_neutralises_formulas(project):
    rows = json.loads(export("json", horizon_weeks=2))
    table = list(csv.DictReader(io.StringIO(export("csv", horizon_weeks=2))))
    assert tuple(table[0]) == EXPORT_FIELDS
    assert len(table) == len(rows)
    for got, want in zip(table, rows, strict=True):
        name = want["component"]
        assert got["component"] == ("'" + name if name.startswith("=") else name)
        assert (got["week_start"], got["model"]) == (want["week_start"], want["model"])
        assert float(got["expected"]) == pytest.approx(want["expected"], rel=1e-12)
        for col in ("lower_80", "upper_80", "lower_95", "upper_95"):
            assert int(got[col]) == want[col]


def test_as_of_and_default_horizon(project):
    rows = json.loads(export("json", as_of=(CUTOFF - timedelta(weeks=1)).date()))
    assert rows == forecast_export_rows(
        project=project, horizon_weeks=12, as_of=(CUTOFF - timedelta(weeks=1)).date()
    )
    first_week = (FORECAST_START - timedelta(weeks=1)).date().isoformat()
    assert len(rows) == 12 * (len(COMPONENTS) + 2) and rows[0]["week_start"] == first_week
    # DOCK-1 was created in week 14, before that as_of; the series is there.
    assert FORMULA in {row["component"] for row in rows}


def test_bad_options_are_named(project):
    with pytest.raises(CommandError) as err:
        export("json", horizon_weeks=MAX_HORIZON_WEEKS + 1)
    assert str(err.value) == BAD_HORIZON.format(max=MAX_HORIZON_WEEKS, value=MAX_HORIZON_WEEKS + 1)
    tomorrow = timezone.now().date() + timedelta(days=1)
    with pytest.raises(CommandError) as err:
        export("csv", as_of=tomorrow)
    assert str(err.value) == AS_OF_IN_FUTURE.format(as_of=tomorrow, today=timezone.now().date())
