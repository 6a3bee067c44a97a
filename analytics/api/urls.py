"""/api/v1/ routes of the analytics app; each area keeps its own ``urlpatterns``."""

from __future__ import annotations

from analytics.api import clusters, flaky, forecasts

urlpatterns = [*flaky.urlpatterns, *clusters.urlpatterns, *forecasts.urlpatterns]
