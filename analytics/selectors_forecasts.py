"""Reads for defect-inflow forecasts: Defect rows → the frame the pure core wants, and stored snapshots."""

from __future__ import annotations

from collections import defaultdict
from datetime import UTC, date, datetime, time

import pandas as pd
from django.db.models import Max

from analytics.models import ForecastSnapshot
from ingest.models import Component, Defect, Project

DEFECT_COLUMNS = ("key", "created", "resolved", "components", "severity", "type")


def as_of_moment(value: date | datetime) -> datetime:
    """A date means its 00:00 UTC; a naive datetime is read as UTC."""
    if not isinstance(value, datetime):
        return datetime.combine(value, time.min, tzinfo=UTC)
    return value if value.tzinfo is not None else value.replace(tzinfo=UTC)


def defects_frame(*, project_id: int, before: date | datetime | None = None) -> pd.DataFrame:
    """One row per defect of the project, in the shape of ``analytics.core.forecast.weekly_counts``.

    Columns ``key``, ``created``, ``resolved`` (UTC timestamps; ``NaT`` while open), ``components``
    (tuple of component names, sorted), ``severity``, ``type``. With ``before``, only defects created
    strictly before that moment are kept, and a resolution at or after it counts as still open (the
    frame then shows what was known at that moment). Two queries, whatever the number of defects.
    """
    qs = Defect.objects.filter(project_id=project_id)
    cutoff = as_of_moment(before) if before is not None else None
    if cutoff is not None:
        qs = qs.filter(created_at__lt=cutoff)
    rows = list(
        qs.order_by("created_at", "key").values_list(
            "id", "key", "created_at", "resolved_at", "severity", "type"
        )
    )
    names: dict[int, list[str]] = defaultdict(list)
    links = Defect.components.through.objects.filter(defect__in=qs).values_list(
        "defect_id", "component__name"
    )
    for defect_id, name in links:
        names[defect_id].append(name)
    frame = pd.DataFrame(
        {
            "key": pd.Series([r[1] for r in rows], dtype=object),
            "created": pd.to_datetime(pd.Series([r[2] for r in rows], dtype=object), utc=True),
            "resolved": pd.to_datetime(
                pd.Series(
                    [r[3] if cutoff is None or (r[3] is not None and r[3] < cutoff) else None for r in rows],
                    dtype=object,
                ),
                utc=True,
            ),
            "components": pd.Series([tuple(sorted(names.get(r[0], ()))) for r in rows], dtype=object),
            "severity": pd.Series([r[4] for r in rows], dtype=object),
            "type": pd.Series([r[5] for r in rows], dtype=object),
        },
        columns=list(DEFECT_COLUMNS),
    )
    return frame


def component_names(*, project_id: int) -> list[str]:
    """Every component of the project, sorted: each gets a forecast, zeros when it has no defect."""
    return sorted(Component.objects.filter(project_id=project_id).values_list("name", flat=True))


def defects_data_cutoff(*, project_id: int) -> datetime | None:
    """The moment up to which the project's defects are known: the latest defect import.

    Weeks between the latest defect and the latest import are real quiet weeks (zeros); after the latest
    import nothing is known yet, and a defect dated after it (the import refuses dates in the future;
    only a direct database write can store one) is left out. None when the project has no defects.
    """
    return Defect.objects.filter(project_id=project_id).aggregate(latest=Max("last_imported"))["latest"]


def forecast_snapshots(*, project: Project) -> list[ForecastSnapshot]:
    """The project's stored forecasts: the total first, then components by name."""
    snapshots = list(ForecastSnapshot.objects.filter(project=project).select_related("component"))
    return sorted(snapshots, key=lambda s: (s.series_name != ForecastSnapshot.TOTAL, s.series_name))
