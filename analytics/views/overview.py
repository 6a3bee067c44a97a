"""Dashboard pages: overview."""

from __future__ import annotations

urlpatterns: list = []
