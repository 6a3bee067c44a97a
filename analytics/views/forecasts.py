"""Dashboard pages: "Defect outlook" (defect-inflow forecasts), its chart and CSV exports, the planning sheet.

Glue only: the forecasts come from ``analytics.services.forecasts.forecast_report`` (stored snapshots, or
computed on the fly for a horizon longer than the stored one), the figures from ``analytics.charts.forecasts``,
the images from ``analytics.services.chart_export``.
"""

from __future__ import annotations

import io
import math
import re
from typing import Any
from urllib.parse import urlencode

from django.http import Http404, HttpRequest, HttpResponse
from django.urls import path, reverse

from analytics.charts.forecasts import forecast_chart, series_frames
from analytics.models import ForecastSnapshot
from analytics.services.chart_export import (
    CONTENT_TYPES,
    DEFAULT_HEIGHT,
    DEFAULT_SCALE,
    DEFAULT_WIDTH,
    ChartExportUnavailable,
    chart_image_render,
)
from analytics.services.forecasts import (
    DEFAULT_HORIZON_WEEKS,
    EXPORT_FIELDS,
    MAX_HORIZON_WEEKS,
    forecast_report_cached,
    forecast_rows,
)
from analytics.views.common import figure_div, int_param, project_page, render_page
from barometer_common.csvsafe import write_safe_csv

TOTAL = ForecastSnapshot.TOTAL
TOTAL_LABEL = "All components (total)"
HORIZON_CHOICES = (4, 8, 12, 26, 52)
SHEET_WEEKS = (4, 8, 12)
SHEET_HISTORY_WEEKS = 26
Z_80 = 1.2815515655446004  # standard normal 90 % quantile: scipy.stats.norm.ppf(0.9)
SHEET_CHART_SIZE = (224, 104)
SHEET_DENSE_FROM = 10  # from this many series on: four columns and smaller charts in print
SHEET_DENSE_CHART_SIZE = (166, 78)
SHEET_ONE_PAGE_MAX = 16  # more series than this print on several pages (the sheet says so)

UNKNOWN_SERIES = "No forecast for series {name!r} in this project."
BAD_NUMBER = "{field} must be a whole number, got {value!r}"

MODEL_LABELS = {
    "naive": "last week repeated (naive)",
    "mean": "weekly mean",
    "ses": "simple exponential smoothing",
    "poisson_trend": "Poisson regression on time",
    "goel_okumoto": "Goel–Okumoto growth curve",
    "delayed_s_shaped": "delayed S-shaped growth curve",
    "bottom_up": "sum of the component forecasts (bottom-up)",
}


def model_label(name: str | None) -> str:
    return MODEL_LABELS.get(name or "", name or "none")


def series_label(name: str) -> str:
    return TOTAL_LABEL if name == TOTAL else name


# --- reading the forecasts --------------------------------------------------------------------------------


def _report(project, horizon: int) -> dict[str, Any]:
    return forecast_report_cached(project=project, horizon_weeks=horizon)


def _horizon(request: HttpRequest) -> int:
    return int_param(request, "horizon", DEFAULT_HORIZON_WEEKS, low=1, high=MAX_HORIZON_WEEKS)


def _pick_series(report: dict[str, Any], name: str | None) -> dict[str, Any]:
    series = report["series"]
    if not name:
        return series[0]
    for payload in series:
        if payload["series_name"] == name:
            return payload
    raise Http404(UNKNOWN_SERIES.format(name=name))


def _source_text(report: dict[str, Any]) -> str:
    if report["source"] == "stored":
        return (
            f"Stored forecast (its first {report['horizon_weeks']} weeks), computed {report['computed_at']:%d %b %Y %H:%M} UTC from the defects "
            f"known on {report['as_of']}."
        )
    return (
        f"Computed on request ({report['computed_at']:%d %b %Y %H:%M} UTC) for {report['horizon_weeks']} weeks "
        f"from the defects known on {report['as_of']}, "
        "because the stored forecast does not reach that far (or none is stored yet); it is not stored, "
        "and the backtest behind it is scored over the same horizon."
    )


def _figure(
    payload: dict[str, Any],
    *,
    compact: bool = False,
    history_weeks: int | None = None,
    project=None,
    report: dict[str, Any] | None = None,
):
    history, forecast = series_frames(payload)
    subtitle = None
    if project is not None and report is not None:
        subtitle = f"{project.name} · from the defects known on {report['as_of']} · model: {model_label(payload['model'])}"
    return forecast_chart(
        history,
        forecast,
        series_label=series_label(payload["series_name"]),
        compact=compact,
        history_weeks=history_weeks,
        subtitle=subtitle,
    )


def _trend_text(trend: dict[str, Any] | None) -> str:
    if not trend or not trend.get("reading"):
        return "No trend test."
    reading = trend["reading"][0].upper() + trend["reading"][1:]
    p_value = trend.get("p_value")
    return reading + (f"; p = {p_value:.2f}" if isinstance(p_value, (int, float)) else "") + "."


def _slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-") or "series"


# --- pages --------------------------------------------------------------------------------------------------


@project_page
def forecasts_page(request: HttpRequest) -> HttpResponse:
    horizon = _horizon(request)
    report = _report(request.project, horizon)
    payload = _pick_series(report, request.GET.get("series"))
    name = payload["series_name"]
    query = {"series": name, "horizon": horizon}
    base = {"slug": request.project.slug}
    chart_url = reverse("forecasts-chart", kwargs=base)
    csv_url = reverse("forecasts-csv", kwargs=base)
    context = {
        "horizon": horizon,
        "horizon_choices": sorted({*HORIZON_CHOICES, horizon}),
        "stored_horizon": DEFAULT_HORIZON_WEEKS,
        "series_options": [(p["series_name"], series_label(p["series_name"])) for p in report["series"]],
        "series": payload,
        "label": series_label(name),
        "is_total": name == TOTAL,
        "model": model_label(payload["model"]),
        "model_code": payload["model"],
        "backtest": [{**row, "label": model_label(row.get("model"))} for row in payload["backtest"]],
        "forecast": payload["forecast"],
        "residual": payload["residual"],
        "residual_model": model_label((payload["residual"] or {}).get("model")),
        "trend_text": _trend_text(payload["trend"]),
        "trend": payload["trend"],
        "source_text": _source_text(report),
        "report": report,
        "chart": figure_div(_figure(payload), div_id="forecast-chart"),  # the page states project and date
        "png_url": f"{chart_url}?{urlencode({**query, 'format': 'png'})}",
        "svg_url": f"{chart_url}?{urlencode({**query, 'format': 'svg'})}",
        "csv_url": f"{csv_url}?{urlencode(query)}",
        "csv_all_url": f"{csv_url}?{urlencode({'horizon': horizon})}",
        "sheet_url": reverse("forecasts-sheet", kwargs=base),
        "export_size": (DEFAULT_WIDTH, DEFAULT_HEIGHT),
    }
    return render_page(request, "forecasts/page.html", context, page="forecasts")


def _whole_number(request: HttpRequest, field: str, default: int) -> int:
    raw = request.GET.get(field)
    if raw is None or raw == "":
        return default
    try:
        return int(raw)
    except ValueError:
        raise ValueError(BAD_NUMBER.format(field=field, value=raw)) from None


@project_page
def forecasts_chart(request: HttpRequest) -> HttpResponse:
    """``?format=png|svg&series=…&horizon=…[&width=&height=&scale=]``: the page's chart as a file."""
    horizon = _horizon(request)
    fmt = request.GET.get("format", "png")
    try:
        width = _whole_number(request, "width", DEFAULT_WIDTH)
        height = _whole_number(request, "height", DEFAULT_HEIGHT)
        scale = _whole_number(request, "scale", DEFAULT_SCALE)
    except ValueError as error:
        return HttpResponse(str(error), status=400, content_type="text/plain; charset=utf-8")
    report = _report(request.project, horizon)
    payload = _pick_series(report, request.GET.get("series"))
    figure = _figure(payload, project=request.project, report=report)
    try:
        data = chart_image_render(figure=figure, fmt=fmt, width=width, height=height, scale=scale)
    except ValueError as error:
        return HttpResponse(str(error), status=400, content_type="text/plain; charset=utf-8")
    except ChartExportUnavailable as error:
        return HttpResponse(str(error), status=503, content_type="text/plain; charset=utf-8")
    response = HttpResponse(data, content_type=CONTENT_TYPES[fmt])
    filename = f"{request.project.slug}-defect-outlook-{_slug(series_label(payload['series_name']))}-{horizon}w.{fmt}"
    response["Content-Disposition"] = f'attachment; filename="{filename}"'
    return response


@project_page
def forecasts_csv(request: HttpRequest) -> HttpResponse:
    """``?horizon=…[&series=…]``: the forecast numbers, every series or one; cells neutralised (OWASP)."""
    horizon = _horizon(request)
    report = _report(request.project, horizon)
    name = request.GET.get("series")
    payloads = [_pick_series(report, name)] if name else report["series"]
    rows = [row for payload in payloads for row in forecast_rows(payload)]
    buffer = io.StringIO()
    write_safe_csv(buffer, EXPORT_FIELDS, ([row[f] for f in EXPORT_FIELDS] for row in rows))
    response = HttpResponse(buffer.getvalue(), content_type="text/csv; charset=utf-8")
    which = _slug(series_label(name)) if name else "all"
    response["Content-Disposition"] = (
        f'attachment; filename="{request.project.slug}-defect-outlook-{which}-{horizon}w.csv"'
    )
    return response


def _static_div(fig, *, div_id: str, size: tuple[int, int]) -> str:
    """A fixed-size, non-interactive figure for the printed sheet (no resizing while printing)."""
    fig.update_layout(width=size[0], height=size[1])
    return fig.to_html(
        full_html=False,
        include_plotlyjs=False,
        div_id=div_id,
        config={"staticPlot": True, "displayModeBar": False, "responsive": False},
    )


def outlook_sum(forecast: list[dict[str, Any]], weeks: int) -> dict[str, Any] | None:
    """Expected defects over the next ``weeks`` weeks and an approximate 80 % range of that sum.

    The forecast models treat future weeks as independent counts whose variance is at least their mean, so
    the sum's variance is the sum of the weekly variances. A week's variance is read back from its stored
    80 % interval (normal approximation: width / (2 z)), never below its mean (the Poisson floor), and the
    range is sum ± z·sd rounded to whole defects, floored at 0. None when fewer weeks are forecast or a
    value is missing. (Adding the weekly bounds instead would give a range far wider than 80 %.)
    """
    part = forecast[:weeks]
    if len(part) < weeks or any(
        row.get(f) is None for row in part for f in ("expected", "lower_80", "upper_80")
    ):
        return None
    expected = sum(float(row["expected"]) for row in part)
    variance = sum(
        max(((row["upper_80"] - row["lower_80"]) / (2 * Z_80)) ** 2, float(row["expected"])) for row in part
    )
    spread = Z_80 * math.sqrt(variance)
    return {
        "weeks": weeks,
        "expected": expected,
        "lower": max(0, round(expected - spread)),
        "upper": round(expected + spread),
    }


@project_page
def forecasts_sheet(request: HttpRequest) -> HttpResponse:
    """One printable page: every series, the next 4 / 8 / 12 weeks, model, accuracy, residual, trend."""
    horizon = max(SHEET_WEEKS)
    report = _report(request.project, horizon)
    dense = len(report["series"]) >= SHEET_DENSE_FROM
    cards = []
    for number, payload in enumerate(report["series"]):
        chosen = next((row for row in payload["backtest"] if row.get("chosen")), None)
        cards.append(
            {
                "name": payload["series_name"],
                "label": series_label(payload["series_name"]),
                "model": model_label(payload["model"]),
                "chosen": chosen,
                "sums": [s for s in (outlook_sum(payload["forecast"], w) for w in SHEET_WEEKS) if s],
                "residual": payload["residual"],
                "residual_model": model_label((payload["residual"] or {}).get("model")),
                "trend_text": _trend_text(payload["trend"]),
                "chart": _static_div(
                    _figure(payload, compact=True, history_weeks=SHEET_HISTORY_WEEKS),
                    div_id=f"sheet-chart-{number}",
                    size=SHEET_DENSE_CHART_SIZE if dense else SHEET_CHART_SIZE,
                ),
            }
        )
    context = {
        "cards": cards,
        "dense": dense,
        "fits_one_page": len(cards) <= SHEET_ONE_PAGE_MAX,
        "report": report,
        "source_text": _source_text(report),
        "page_url": reverse("forecasts", kwargs={"slug": request.project.slug}),
    }
    return render_page(request, "forecasts/sheet.html", context, page="forecasts")


urlpatterns = [
    path("", forecasts_page, name="forecasts"),
    path("chart/", forecasts_chart, name="forecasts-chart"),
    path("csv/", forecasts_csv, name="forecasts-csv"),
    path("sheet/", forecasts_sheet, name="forecasts-sheet"),
]
