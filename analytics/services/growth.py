"""Run-time growth per week, precomputed for the overview: rank every test once, store the top per scope."""

from __future__ import annotations

from collections.abc import Iterable
from datetime import date, timedelta

from django.db import transaction
from django.utils import timezone

from analytics.models import RuntimeGrowth
from analytics.selectors_overview import (
    GROWTH_COLUMNS,
    GROWTH_TOP,
    GROWTH_WINDOW,
    growth_by_test,
    weeks_with_builds,
)


def _top(frame, n: int) -> list[dict]:
    return [{k: (int(v) if k == "test_id" else v) for k, v in row.items()}
            for row in frame.head(n)[GROWTH_COLUMNS].to_dict("records")]


def runtime_growth_refresh(*, project_id: int, weeks: Iterable[date] | None = None) -> int:
    """Store the fastest-growing tests of each of ``weeks`` (default: every week the week picker offers).

    Per week: the top :data:`GROWTH_TOP` of the project (``"all"``) and of each component (its id as a string,
    ``"0"`` for tests without one). Returns how many weeks were stored.
    """
    chosen = weeks_with_builds(project_id=project_id) if weeks is None else sorted(set(weeks))
    now = timezone.now()
    for week in chosen:
        frame = growth_by_test(project_id=project_id, week=week, window=GROWTH_WINDOW)
        top = {"all": _top(frame, GROWTH_TOP)}
        for key, group in frame.groupby("component_key", sort=True):
            top[str(int(key))] = _top(group, GROWTH_TOP)
        with transaction.atomic():
            RuntimeGrowth.objects.update_or_create(
                project_id=project_id, week=week,
                defaults={"window_weeks": GROWTH_WINDOW, "top": top, "computed_at": now},
            )
    return len(chosen)


def weeks_after_build(*, project_id: int, week: date) -> list[date]:
    """The weeks whose growth a build of ``week`` changes and that have builds: ``week`` and the
    2 × window − 1 weeks after it (usually just ``week`` itself: new builds land in the latest week)."""
    last = week + timedelta(weeks=2 * GROWTH_WINDOW - 1)
    return [w for w in weeks_with_builds(project_id=project_id) if week <= w <= last]
