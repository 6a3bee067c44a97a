"""Serve the plotly.js bundled inside the plotly package as ``vendor/plotly.min.js``.

Only that one file is exposed (the package's data folder holds tens of MB of extras). Works with
runserver, ``collectstatic`` and whitenoise, offline: no CDN.
"""

from __future__ import annotations

from pathlib import Path

import plotly
from django.contrib.staticfiles.finders import BaseFinder
from django.core.files.storage import FileSystemStorage

PLOTLY_STATIC_PATH = "vendor/plotly.min.js"
PLOTLY_FILE = Path(plotly.__file__).parent / "package_data" / "plotly.min.js"


class PlotlyFinder(BaseFinder):
    def check(self, **kwargs):
        return []

    def find(self, path, find_all=False, **kwargs):
        if path == PLOTLY_STATIC_PATH and PLOTLY_FILE.exists():
            return [str(PLOTLY_FILE)] if (find_all or kwargs.get("all")) else str(PLOTLY_FILE)
        return [] if (find_all or kwargs.get("all")) else None

    def list(self, ignore_patterns):
        yield PLOTLY_STATIC_PATH, _SingleFileStorage(location=str(PLOTLY_FILE.parent))


class _SingleFileStorage(FileSystemStorage):
    """Presents package_data/plotly.min.js as vendor/plotly.min.js to collectstatic."""

    def path(self, name):
        return str(PLOTLY_FILE)

    def open(self, name, mode="rb"):
        return open(PLOTLY_FILE, mode)  # noqa: SIM115 - the caller closes it
