"""Dashboard pages of the ingest app: builds, import jobs, defect upload."""

from __future__ import annotations

urlpatterns: list = []
