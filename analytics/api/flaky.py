"""API endpoints: flaky (see analytics/api/urls.py for the prefix)."""

from __future__ import annotations

urlpatterns: list = []
