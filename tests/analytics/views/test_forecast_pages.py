"""The "Defect outlook" pages: the page and its selectors, the CSV export, the planning sheet, escaping."""

from __future__ import annotations

import csv
import io
import re
from datetime import timedelta

import pytest
from django.urls import reverse
from scipy import stats

from analytics.charts.forecasts import forecast_chart, series_frames
from analytics.models import ForecastSnapshot
from analytics.services.forecasts import EXPORT_FIELDS
from analytics.views.forecasts import TOTAL_LABEL, UNKNOWN_SERIES, outlook_sum
from barometer_common.csvsafe import neutralise_cell
from ingest.models import Project
from tests.analytics.views.test_forecast_pages_support import (  # noqa: F401 (fixtures)
    FIRST_FORECAST_WEEK,
    FORMULA,
    XSS,
    _fresh_cache,
    outlook_fixture,
    poisson_week,
    viewer_client_fixture,
)

pytestmark = pytest.mark.django_db
TOTAL = ForecastSnapshot.TOTAL
ESCAPED_XSS = "&lt;img src=x onerror=alert(1)&gt;"


def url(project, name: str = "forecasts") -> str:
    return reverse(name, kwargs={"slug": project.slug})


@pytest.mark.parametrize("name", ["forecasts", "forecasts-chart", "forecasts-csv", "forecasts-sheet"])
def test_anonymous_users_are_sent_to_login(client, outlook, name):
    project, _ = outlook
    response = client.get(url(project, name))
    assert response.status_code == 302
    assert response["Location"].startswith(reverse("login"))


def test_page_shows_the_total_first_with_stored_numbers(viewer_client, outlook):
    project, snapshots = outlook
    response = viewer_client.get(url(project))
    assert response.status_code == 200
    assert response.context["series"]["series_name"] == TOTAL
    assert response.context["report"]["source"] == "stored"
    assert response.context["horizon"] == 12
    html = response.content.decode()
    assert TOTAL_LABEL in html
    # every stored week is in the numbers table, with both intervals in words
    table = html[html.index('id="forecast-table"') :]
    for week in snapshots[TOTAL].forecast:
        assert week["week_start"] in table
        assert f"{week['lower_80']} to {week['upper_80']}" in table
    assert table.count("<tr>") == 1 + len(snapshots[TOTAL].forecast)
    # the total is bottom-up: it says so and marks no backtest row as the one used
    assert "sum of the component forecasts (bottom-up)" in html
    assert '<tr class="chosen">' not in html
    assert "Reliability growth: defects are arriving less often (u = -2.4); p = 0.02." in html
    # export links carry the series and the horizon
    assert "format=png" in html and "format=svg" in html and url(project, "forecasts-csv") in html


def test_series_selector_shows_one_component(viewer_client, outlook):
    project, snapshots = outlook
    response = viewer_client.get(url(project), {"series": "Payments"})
    assert response.status_code == 200
    assert response.context["series"]["series_name"] == "Payments"
    html = response.content.decode()
    assert '<option value="Payments" selected>' in html
    # the chosen model is marked in words, not only by style
    chosen = re.search(r'<tr class="chosen">(.*?)</tr>', html, re.S).group(1)
    assert "Goel–Okumoto growth curve" in chosen and "chosen" in chosen
    assert "About <strong>7</strong> defects not yet found" in html
    assert "95 % interval 3 to 16" in html
    assert snapshots["Payments"].note in html


def test_unknown_series_is_404(viewer_client, outlook):
    project, _ = outlook
    response = viewer_client.get(url(project), {"series": "No such component"})
    assert response.status_code == 404
    assert (
        UNKNOWN_SERIES.format(name="No such component")
        == "No forecast for series 'No such component' in this project."
    )


@pytest.mark.parametrize("horizon", [4, 8, 12])
def test_horizons_within_the_stored_one_use_the_stored_weeks(viewer_client, outlook, horizon):
    project, snapshots = outlook
    response = viewer_client.get(url(project), {"horizon": horizon, "series": "Payments"})
    assert response.context["report"]["source"] == "stored"
    assert response.context["forecast"] == snapshots["Payments"].forecast[:horizon]
    assert f'<option value="{horizon}" selected>' in response.content.decode()


def test_longer_horizon_is_computed_on_the_fly_and_says_so(viewer_client, outlook):
    project, _ = outlook
    response = viewer_client.get(url(project), {"horizon": 26})
    assert response.status_code == 200
    report = response.context["report"]
    assert report["source"] == "computed"
    assert len(response.context["forecast"]) == 26
    assert re.search(r"Computed on request \(.* UTC\) for 26 weeks", response.content.decode())
    # the stored snapshots are not touched by a page view
    assert all(s.horizon_weeks == 12 for s in ForecastSnapshot.objects.all())


def test_component_name_from_an_upload_is_escaped_in_html_and_chart(viewer_client, outlook):
    project, snapshots = outlook
    response = viewer_client.get(url(project), {"series": XSS})
    assert response.status_code == 200
    html = response.content.decode()
    assert "<img src=x" not in html  # not in the markup, the options, nor the figure's JSON in the script
    assert ESCAPED_XSS in html
    # the figure itself: every label and hover text holds the escaped name
    history, forecast = series_frames(response.context["series"])
    figure = forecast_chart(history, forecast, series_label=XSS).to_plotly_json()
    hover = [text for trace in figure["data"] for text in (trace.get("text") or [])]
    assert hover and all(ESCAPED_XSS in text and "<img" not in text for text in hover)
    assert ESCAPED_XSS in figure["layout"]["title"]["text"]


def read_csv(response) -> list[list[str]]:
    return list(csv.reader(io.StringIO(response.content.decode())))


def test_csv_holds_the_stored_numbers_of_every_series(viewer_client, outlook):
    project, snapshots = outlook
    response = viewer_client.get(url(project, "forecasts-csv"), {"horizon": 12})
    assert response.status_code == 200
    assert response["Content-Type"].startswith("text/csv")
    header, *rows = read_csv(response)
    assert header == list(EXPORT_FIELDS)
    expected = [
        [
            neutralise_cell(s.series_name),
            week["week_start"],
            *(str(week[f]) for f in EXPORT_FIELDS[2:7]),
            s.model,
        ]
        for s in sorted(snapshots.values(), key=lambda s: (s.series_name != TOTAL, s.series_name))
        for week in s.forecast
    ]
    assert rows == expected


def test_csv_neutralises_a_formula_component_name(viewer_client, outlook):
    project, snapshots = outlook
    response = viewer_client.get(url(project, "forecasts-csv"), {"series": FORMULA, "horizon": 4})
    header, *rows = read_csv(response)
    assert len(rows) == 4
    # OWASP "CSV Injection": a cell starting with "=" gets a leading single quote
    assert {row[0] for row in rows} == {"'" + FORMULA}
    assert [float(row[2]) for row in rows] == [w["expected"] for w in snapshots[FORMULA].forecast[:4]]


def test_planning_sheet_lists_every_series_once(viewer_client, outlook):
    project, snapshots = outlook
    response = viewer_client.get(url(project, "forecasts-sheet"))
    assert response.status_code == 200
    cards = response.context["cards"]
    assert [c["name"] for c in cards] == [TOTAL, *sorted([FORMULA, XSS, "Payments"])]
    assert all([s["weeks"] for s in c["sums"]] == [4, 8, 12] for c in cards)
    html = response.content.decode()
    assert "<img src=x" not in html and ESCAPED_XSS in html
    assert html.count('class="sheet-card"') == len(snapshots)
    assert "@page" in html and "@media print" in html


@pytest.mark.parametrize("mean, weeks", [(2.5, 12), (0.8, 4), (9.0, 8)])
def test_outlook_sum_matches_the_poisson_interval_of_the_sum(mean, weeks):
    # Reference: scipy.stats.poisson. Independent Poisson weeks sum to a Poisson count, so the central 80 %
    # interval of the sum is poisson.interval(0.8, weeks * mean); the approximation may be one defect off.
    forecast = [poisson_week(FIRST_FORECAST_WEEK + timedelta(weeks=i), mean) for i in range(weeks)]
    result = outlook_sum(forecast, weeks)
    lower, upper = stats.poisson.interval(0.8, weeks * mean)
    assert result["expected"] == pytest.approx(weeks * mean)
    assert abs(result["lower"] - lower) <= 1 and abs(result["upper"] - upper) <= 1
    assert outlook_sum(forecast, weeks + 1) is None


def test_a_project_without_defects_or_snapshots_still_gets_a_page_and_a_sheet(viewer_client, db):
    project = Project.objects.create(slug="empty-harbour", name="Empty harbour")
    response = viewer_client.get(url(project))
    assert response.status_code == 200
    assert response.context["report"]["source"] == "computed"
    assert response.context["series"]["series_name"] == TOTAL
    # nothing known yet: the forecast is zero every week, said in words by the note
    assert {week["expected"] for week in response.context["forecast"]} == {0.0}
    assert response.context["series"]["note"] in response.content.decode()
    assert viewer_client.get(url(project, "forecasts-sheet")).status_code == 200


@pytest.mark.parametrize("name", ["forecasts", "forecasts-sheet", "forecasts-csv"])
def test_queries_do_not_grow_with_the_number_of_components(viewer_client, outlook, name):
    # Common practice (django-rest-framework's test suite pins query counts): pages must not go N+1.
    from django.core.cache import cache
    from django.db import connection
    from django.test.utils import CaptureQueriesContext

    from tests.analytics.views.test_forecast_pages_support import snapshot_payload, store

    project, _ = outlook
    viewer_client.get(url(project, name))  # warm the session and any one-off lookups
    cache.clear()  # both measured requests read the snapshots (no cached report)
    with CaptureQueriesContext(connection) as few:
        assert viewer_client.get(url(project, name)).status_code == 200
    for number in range(5):
        store(project, f"Extra component {number}", snapshot_payload(1.0 + number))
    cache.clear()
    with CaptureQueriesContext(connection) as many:
        response = viewer_client.get(url(project, name))
    assert response.status_code == 200
    assert b"Extra component 4" in response.content  # the new snapshots were read, not an old cached report
    assert len(many) == len(few)


def test_a_new_snapshot_is_shown_without_waiting_for_the_cache(viewer_client, outlook):
    from tests.analytics.views.test_forecast_pages_support import snapshot_payload, store

    project, _ = outlook
    assert b"Harbour Lights" not in viewer_client.get(url(project)).content
    store(project, "Harbour Lights", snapshot_payload(2.0))  # same computed_at as the others
    assert b"Harbour Lights" in viewer_client.get(url(project)).content


def test_sheet_packs_many_series_and_says_when_they_need_a_second_page(viewer_client, outlook):
    from analytics.views.forecasts import SHEET_DENSE_FROM, SHEET_ONE_PAGE_MAX
    from tests.analytics.views.test_forecast_pages_support import snapshot_payload, store

    project, snapshots = outlook
    response = viewer_client.get(url(project, "forecasts-sheet"))
    assert (
        not response.context["dense"] and "more than fit on one printed page" not in response.content.decode()
    )
    for number in range(SHEET_DENSE_FROM - len(snapshots)):
        store(project, f"Dock module {number:02d}", snapshot_payload(1.0))
    response = viewer_client.get(url(project, "forecasts-sheet"))
    assert response.context["dense"] and 'class="sheet-grid dense"' in response.content.decode()
    for number in range(SHEET_ONE_PAGE_MAX + 1 - SHEET_DENSE_FROM):
        store(project, f"Slipway module {number:02d}", snapshot_payload(1.0))
    response = viewer_client.get(url(project, "forecasts-sheet"))
    assert (
        f"{SHEET_ONE_PAGE_MAX + 1} series are more than fit on one printed page" in response.content.decode()
    )
