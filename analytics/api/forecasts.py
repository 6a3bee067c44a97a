"""API endpoints: forecasts (see analytics/api/urls.py for the prefix).

``GET /api/v1/projects/<slug>/forecasts/?horizon_weeks=12&as_of=YYYY-MM-DD``: per series (the total
``__total__`` first, then components by name) the weekly forecast rows (the same fields as
``export_analytics --what forecast``), the chosen model, the plain-words note, every model's backtest
scores, the expected defects not yet found, and the Laplace trend test. ``as_of`` recomputes from the
defects created before that date (nothing stored).
"""

from __future__ import annotations

from django.shortcuts import get_object_or_404
from django.urls import path
from drf_spectacular.utils import extend_schema
from rest_framework import serializers, status
from rest_framework.response import Response
from rest_framework.views import APIView

from analytics.services.forecasts import (
    DEFAULT_HORIZON_WEEKS,
    MAX_HORIZON_WEEKS,
    forecast_report_cached,
    forecast_rows,
)
from ingest.api.auth import ProjectAccess
from ingest.models import Project

RECONCILIATION = (
    "bottom-up: the total's expected count is the sum of the component forecasts, scaled by the history's "
    "ratio of distinct defects to component memberships; its backtest rows score models fitted to the total "
    "directly, so none of them is marked chosen"
)

class ForecastQueryInput(serializers.Serializer):
    horizon_weeks = serializers.IntegerField(
        min_value=1, max_value=MAX_HORIZON_WEEKS, default=DEFAULT_HORIZON_WEEKS
    )
    as_of = serializers.DateField(required=False, help_text="Use only defects created before this date.")


class ForecastWeekOutput(serializers.Serializer):
    component = serializers.CharField()
    week_start = serializers.DateField()
    expected = serializers.FloatField()
    lower_80 = serializers.IntegerField()
    upper_80 = serializers.IntegerField()
    lower_95 = serializers.IntegerField()
    upper_95 = serializers.IntegerField()
    model = serializers.CharField()


class BacktestScoreOutput(serializers.Serializer):
    model = serializers.CharField()
    mase = serializers.FloatField(allow_null=True)
    coverage_80 = serializers.FloatField(allow_null=True)
    n_origins = serializers.IntegerField()
    n_forecasts = serializers.IntegerField()
    chosen = serializers.BooleanField()


class SeriesOutput(serializers.Serializer):
    component = serializers.CharField()
    model = serializers.CharField()
    note = serializers.CharField()
    forecast = ForecastWeekOutput(many=True)
    backtest = BacktestScoreOutput(many=True)
    residual = serializers.DictField(allow_null=True)
    trend = serializers.DictField()


class ForecastsOutput(serializers.Serializer):
    project = serializers.CharField()
    as_of = serializers.DateField()
    horizon_weeks = serializers.IntegerField()
    source = serializers.ChoiceField(choices=["stored", "computed"])
    computed_at = serializers.DateTimeField()
    reconciliation = serializers.CharField()
    series = SeriesOutput(many=True)


class ForecastsView(APIView):
    """Defect-inflow forecast per component and in total for the next weeks, with 80 % and 95 % intervals.

    Each series carries the chosen model, a plain-words note (why this model, how accurate it has been),
    every model's backtest scores (MASE, 80 % interval coverage; ``chosen`` marks the model used), the
    expected defects not yet found (or null) and the Laplace trend test. The stored forecast is returned
    when it reaches ``horizon_weeks``; a longer horizon or ``as_of`` is computed on the fly (seconds) and
    not stored (kept in the cache until the data change); the backtest then scores models over that
    horizon, so the chosen model can differ.
    """

    permission_classes = [ProjectAccess]

    @extend_schema(parameters=[ForecastQueryInput], responses=ForecastsOutput)
    def get(self, request, slug: str):
        project = get_object_or_404(Project, slug=slug)
        query = ForecastQueryInput(data=request.query_params)
        query.is_valid(raise_exception=True)
        try:
            report = forecast_report_cached(project=project, **query.validated_data)
        except ValueError as exc:
            return Response({"detail": str(exc)}, status=status.HTTP_400_BAD_REQUEST)
        series = [
            {
                "component": payload["series_name"],
                "model": payload["model"],
                "note": payload["note"],
                "forecast": forecast_rows(payload),
                "backtest": payload["backtest"],
                "residual": payload["residual"],
                "trend": payload["trend"],
            }
            for payload in report["series"]
        ]
        body = {
            "project": project.slug,
            "as_of": report["as_of"],
            "horizon_weeks": report["horizon_weeks"],
            "source": report["source"],
            "computed_at": report["computed_at"],
            "reconciliation": RECONCILIATION,
            "series": series,
        }
        return Response(ForecastsOutput(body).data)


urlpatterns = [
    path("projects/<slug:slug>/forecasts/", ForecastsView.as_view(), name="api-forecasts"),
]
