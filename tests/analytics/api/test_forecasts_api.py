"""Forecasts API: token and session auth, the fields, horizon_weeks and as_of, no NaN in the body.

Reference for the figures: the forecast service (tests/analytics/test_forecasts.py checks it against the
pure core called directly); here we check that the API passes them on with the documented fields.
"""

from __future__ import annotations

import json
from datetime import timedelta

import pytest
from django.contrib.auth.models import User
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.utils import timezone
from rest_framework.test import APIClient

from analytics.core.forecast import TOTAL
from analytics.models import ForecastSnapshot
from analytics.services.forecasts import (
    AS_OF_IN_FUTURE,
    EXPORT_FIELDS,
    MAX_HORIZON_WEEKS,
    forecast_export_rows,
    forecasts_refresh,
)
from ingest.models import ApiToken, Project
from tests.analytics.test_forecasts import (  # noqa: F401  (_few_origins is an autouse fixture)
    COMPONENTS,
    CUTOFF,
    FORECAST_START,
    HORIZON,
    _few_origins,
    quiet_rows,
    store_defects,
)

URL = "/api/v1/projects/berthwise/forecasts/"
BACKTEST_FIELDS = {"model", "mase", "coverage_80", "n_origins", "n_forecasts", "chosen"}


@pytest.fixture
def project(db):
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    store_defects(project, quiet_rows(), component_names=COMPONENTS)
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    return project


@pytest.fixture
def token_client(project):
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=project, name='planner')[1]}")
    return client


def strict_json(response):
    return json.loads(response.content, parse_constant=lambda name: pytest.fail(f"{name} in the body"))


def test_needs_a_token_of_this_project_or_a_session(project):
    assert APIClient().get(URL).status_code == 401
    wrong = APIClient()
    wrong.credentials(HTTP_AUTHORIZATION="Bearer bmt_nope")
    assert wrong.get(URL).status_code == 401
    other = Project.objects.create(slug="other", name="Other")
    foreign = APIClient()
    foreign.credentials(HTTP_AUTHORIZATION=f"Bearer {ApiToken.issue(project=other, name='x')[1]}")
    assert foreign.get(URL).status_code == 403
    viewer = APIClient()
    viewer.force_login(User.objects.create_user("viewer", password="x"))  # any signed-in person may read
    assert viewer.get(URL).status_code == 200


def test_body_has_the_export_fields_and_the_evidence_per_series(project, token_client):
    response = token_client.get(URL, {"horizon_weeks": 2})
    assert response.status_code == 200, response.content
    body = strict_json(response)
    assert (body["project"], body["horizon_weeks"], body["source"]) == ("berthwise", 2, "stored")
    assert body["as_of"] == CUTOFF.date().isoformat() and "bottom-up" in body["reconciliation"]
    assert [s["component"] for s in body["series"]] == [TOTAL, *sorted(COMPONENTS)]
    flat = [week for series in body["series"] for week in series["forecast"]]
    assert flat == forecast_export_rows(project=project, horizon_weeks=2)
    assert all(tuple(week) == EXPORT_FIELDS for week in flat)
    assert flat[0]["week_start"] == FORECAST_START.date().isoformat()
    stored = {s.series_name: s for s in ForecastSnapshot.objects.filter(project=project)}
    for series in body["series"]:
        snap = stored[series["component"]]
        assert (series["model"], series["note"]) == (snap.model, snap.note)
        assert series["backtest"] == snap.backtest
        assert all(set(row) == BACKTEST_FIELDS for row in series["backtest"])
        assert series["residual"] == snap.residual
        assert series["trend"] == snap.trend and set(series["trend"]) == {"u", "p_value", "reading"}


def test_longer_horizon_and_as_of_are_computed_not_stored(project, token_client):
    body = strict_json(token_client.get(URL, {"horizon_weeks": HORIZON + 2}))
    assert body["source"] == "computed"
    assert {len(s["forecast"]) for s in body["series"]} == {HORIZON + 2}
    as_of = (CUTOFF - timedelta(weeks=1)).date()
    body = strict_json(token_client.get(URL, {"as_of": as_of.isoformat(), "horizon_weeks": 1}))
    assert body["source"] == "computed" and body["as_of"] == as_of.isoformat()
    flat = [week for series in body["series"] for week in series["forecast"]]
    assert flat == forecast_export_rows(project=project, horizon_weeks=1, as_of=as_of)
    assert (
        ForecastSnapshot.objects.filter(project=project, horizon_weeks=HORIZON).count() == len(COMPONENTS) + 1
    )


def test_bad_parameters_answer_400_with_the_reason(project, token_client):
    response = token_client.get(URL, {"horizon_weeks": MAX_HORIZON_WEEKS + 1})
    assert response.status_code == 400 and "horizon_weeks" in response.json()
    assert token_client.get(URL, {"as_of": "27/03/2025"}).status_code == 400
    tomorrow = timezone.now().date() + timedelta(days=1)
    response = token_client.get(URL, {"as_of": tomorrow.isoformat()})
    assert response.status_code == 400
    assert response.json()["detail"] == AS_OF_IN_FUTURE.format(as_of=tomorrow, today=timezone.now().date())


def test_unknown_project_is_404_for_a_session(project):
    viewer = APIClient()
    viewer.force_login(User.objects.create_user("viewer", password="x"))
    assert viewer.get("/api/v1/projects/nowhere/forecasts/").status_code == 404


def test_stored_read_takes_a_fixed_number_of_queries(project, token_client):
    with CaptureQueriesContext(connection) as few:
        assert strict_json(token_client.get(URL, {"horizon_weeks": HORIZON}))["source"] == "stored"
    Project.objects.get(slug="berthwise").components.create(name="Fuel Dock")
    forecasts_refresh(project_id=project.pk, horizon_weeks=HORIZON)
    with CaptureQueriesContext(connection) as more:
        assert (
            len(strict_json(token_client.get(URL, {"horizon_weeks": HORIZON}))["series"])
            == len(COMPONENTS) + 2
        )
    assert len(more) == len(few)  # one more series, no more queries
