"""Server-side static export of plotly figures (PNG, SVG) through kaleido and the system Chromium.

One headless browser per process (kaleido's renderer on its own event loop), started on first use and reused (a fresh browser per export costs
seconds, a reused one a fraction of a second); exports are serialised with a lock, because the server
answers one request at a time through a shared queue. Width, height and scale are always given
explicitly, so the same figure gives the same file every time: PNG bytes come out identical, and the random
parts of plotly's SVG are fixed: every trace gets a ``uid`` by position, and the per-plot id that names
the clip paths is replaced by a constant.

Chromium is looked up in ``BROWSER_PATH`` (kaleido's own setting) and then on ``PATH``; without it
:func:`chart_image_render` raises :class:`ChartExportUnavailable` with :data:`CHROMIUM_MISSING`.
"""

from __future__ import annotations

import asyncio
import atexit
import gc
import logging
import os
import re
import shutil
import threading

import plotly.graph_objects as go

FORMATS = ("png", "svg")
CONTENT_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
DEFAULT_WIDTH, DEFAULT_HEIGHT, DEFAULT_SCALE = 1200, 600, 1
MIN_SIDE, MAX_SIDE = 200, 3000
SCALES = (1, 2)
CHROMIUM_NAMES = ("chromium", "chromium-browser")
QUIET_LOGGERS = ("choreographer", "kaleido", "logistro")

CHROMIUM_MISSING = (
    "Chart export needs Chromium on the server, and none was found (looked at BROWSER_PATH and for "
    "'chromium' on PATH). Install it (Debian: apt-get install chromium) or set BROWSER_PATH; the CSV export "
    "works without it."
)
EXPORT_FAILED = "Chart export failed in the headless browser: {error}"
BAD_FORMAT = "format must be one of {choices}, got {value!r}"
BAD_SIZE = "width and height must be whole numbers from {low} to {high} pixels, got {width!r} x {height!r}"
BAD_SCALE = "scale must be one of {choices}, got {value!r}"

START_TIMEOUT = 60
RENDER_TIMEOUT = 30
_FIXED_PLOT_ID = "b0a0e0"
_PLOT_ID = re.compile(rb'<defs id="defs-([0-9a-z]+)"')
_lock = threading.Lock()


class ChartExportUnavailable(RuntimeError):
    """No browser to render with, or the browser failed: the caller answers 503 with ``str(error)``."""


def chromium_path() -> str | None:
    """The Chromium binary kaleido will use, or None when there is none."""
    configured = os.environ.get("BROWSER_PATH")
    if configured:
        return configured if os.access(configured, os.X_OK) else None
    for name in CHROMIUM_NAMES:
        found = shutil.which(name)
        if found:
            return found
    return None


def _check(fmt: str, width: int, height: int, scale: int) -> None:
    if fmt not in FORMATS:
        raise ValueError(BAD_FORMAT.format(choices=", ".join(FORMATS), value=fmt))
    sizes = (width, height)
    if any(isinstance(v, bool) or not isinstance(v, int) or not MIN_SIDE <= v <= MAX_SIDE for v in sizes):
        raise ValueError(BAD_SIZE.format(low=MIN_SIDE, high=MAX_SIDE, width=width, height=height))
    if isinstance(scale, bool) or scale not in SCALES:
        raise ValueError(BAD_SCALE.format(choices=", ".join(map(str, SCALES)), value=scale))


def _stable_svg(data: bytes) -> bytes:
    match = _PLOT_ID.search(data)
    if not match:
        return data
    return data.replace(match.group(1), _FIXED_PLOT_ID.encode())


class _ExportServer:
    """One Kaleido (one headless Chromium) on a private event loop in a daemon thread, reused by every export.

    Unlike kaleido's own sync server, a call here has a timeout and a browser that failed to start is
    reported instead of blocking the caller.
    """

    def __init__(self) -> None:
        self._loop: asyncio.AbstractEventLoop | None = None
        self._kaleido = None

    def _run(self, coroutine, timeout: float):
        assert self._loop is not None
        return asyncio.run_coroutine_threadsafe(coroutine, self._loop).result(timeout=timeout)

    def start(self, browser: str) -> None:
        if self._kaleido is not None:
            return
        import kaleido  # imported late: processes that never export do not load it

        for name in QUIET_LOGGERS:  # their INFO lines (temporary folders, tabs) are noise in our logs
            logging.getLogger(name).setLevel(logging.WARNING)

        if self._loop is None:
            self._loop = asyncio.new_event_loop()
            threading.Thread(target=self._loop.run_forever, name="chart-export", daemon=True).start()

        async def open_browser():
            instance = kaleido.Kaleido(n=1, mathjax=False, path=browser, timeout=RENDER_TIMEOUT)
            await instance.open()
            return instance

        self._kaleido = self._run(open_browser(), START_TIMEOUT)
        atexit.register(self.stop)

    def render(self, figure: go.Figure, opts: dict) -> bytes:
        return self._run(self._kaleido.calc_fig(figure, opts=opts), RENDER_TIMEOUT + 5)

    def stop(self) -> None:
        instance, self._kaleido = self._kaleido, None
        if instance is not None and self._loop is not None:
            try:
                self._run(instance.close(), 10)
            except Exception:  # noqa: BLE001 - closing a browser that is already gone
                pass


_server = _ExportServer()


def chart_exporter_stop() -> None:
    """Close the export browser now (it also closes at exit). For test teardown and worker shutdown."""
    with _lock:
        _server.stop()
    gc.collect()  # the closed browser object cleans its temporary folder (and logs about it) now


def chart_image_render(
    *,
    figure: go.Figure,
    fmt: str,
    width: int = DEFAULT_WIDTH,
    height: int = DEFAULT_HEIGHT,
    scale: int = DEFAULT_SCALE,
) -> bytes:
    """The figure as PNG or SVG bytes, ``width`` x ``height`` CSS pixels times ``scale``.

    Raises ValueError for a bad format or size (message constants above), ChartExportUnavailable when
    Chromium is missing, fails to start or does not answer in time.
    """
    _check(fmt, width, height, scale)
    browser = chromium_path()
    if browser is None:
        raise ChartExportUnavailable(CHROMIUM_MISSING)
    opts = {"format": fmt, "width": width, "height": height, "scale": scale}
    figure = go.Figure(figure)  # a copy: the caller's figure keeps its own trace ids
    for number, trace in enumerate(figure.data):
        if trace.uid is None:  # plotly.js would draw a random one into the SVG
            trace.uid = f"trace-{number}"
    with _lock:
        try:
            _server.start(browser)
            data = _server.render(figure, opts)
        except Exception as error:  # the browser crashed, could not start, or timed out
            _server.stop()
            raise ChartExportUnavailable(
                EXPORT_FAILED.format(error=str(error) or type(error).__name__)
            ) from error
    if isinstance(data, str):
        data = data.encode()
    return _stable_svg(data) if fmt == "svg" else data
