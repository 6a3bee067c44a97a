"""Dashboard pages: flaky."""

from __future__ import annotations

urlpatterns: list = []
