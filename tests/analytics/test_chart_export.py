"""Server-side chart export: valid PNG and SVG files of the requested size, the same bytes every time,
503 with a clear message when no Chromium is installed."""

from __future__ import annotations

import struct

import defusedxml.ElementTree as SafeET
import plotly.graph_objects as go
import pytest
from django.urls import reverse

from analytics.services.chart_export import (
    BAD_FORMAT,
    CHROMIUM_MISSING,
    ChartExportUnavailable,
    chart_exporter_stop,
    chart_image_render,
    chromium_path,
)
from tests.analytics.views.test_forecast_pages_support import (  # noqa: F401 (fixtures)
    XSS,
    _fresh_cache,
    outlook_fixture,
    viewer_client_fixture,
)

# PNG file signature and IHDR layout: W3C "Portable Network Graphics (PNG) Specification (Second Edition)"
# (ISO/IEC 15948:2003), sections 5.2 and 11.2.2: 8 signature bytes, then the IHDR chunk (4-byte length,
# "IHDR", 4-byte big-endian width, 4-byte big-endian height).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
SVG_ROOT = "{http://www.w3.org/2000/svg}svg"  # SVG 1.1 namespace (W3C)

needs_chromium = pytest.mark.skipif(
    chromium_path() is None,
    reason="No Chromium found (BROWSER_PATH or 'chromium' on PATH): server-side chart export cannot run here. "
    "Install it with `apt-get install chromium` (.ci/run does).",
)


@pytest.fixture(autouse=True, scope="module")
def _close_the_export_browser():
    """Close the shared browser while pytest still captures its log lines (not at interpreter exit)."""
    yield
    chart_exporter_stop()


def png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def small_figure() -> go.Figure:
    return go.Figure(go.Scatter(x=[1, 2, 3], y=[2, 5, 3], name=XSS), layout={"title": "three points"})


@needs_chromium
@pytest.mark.parametrize("width, height, scale", [(640, 360, 1), (300, 200, 2)])
def test_png_has_the_signature_and_the_requested_size(width, height, scale):
    data = chart_image_render(figure=small_figure(), fmt="png", width=width, height=height, scale=scale)
    assert png_size(data) == (width * scale, height * scale)


@needs_chromium
def test_svg_parses_with_an_svg_root_of_the_requested_size():
    data = chart_image_render(figure=small_figure(), fmt="svg", width=640, height=360)
    root = SafeET.fromstring(data)
    assert root.tag == SVG_ROOT
    assert (root.get("width"), root.get("height")) == ("640", "360")


@needs_chromium
@pytest.mark.parametrize("fmt", ["png", "svg"])
def test_the_same_figure_gives_the_same_file(fmt):
    first = chart_image_render(figure=small_figure(), fmt=fmt, width=500, height=300)
    second = chart_image_render(figure=small_figure(), fmt=fmt, width=500, height=300)
    assert first == second


def test_bad_format_and_size_are_refused_before_any_browser_starts():
    with pytest.raises(ValueError, match="format must be one of png, svg"):
        chart_image_render(figure=small_figure(), fmt="gif")
    with pytest.raises(ValueError, match="width and height must be whole numbers"):
        chart_image_render(figure=small_figure(), fmt="png", width=10, height=300)
    with pytest.raises(ValueError, match="scale must be one of"):
        chart_image_render(figure=small_figure(), fmt="png", scale=3)


def test_missing_chromium_raises_the_clear_message(monkeypatch):
    monkeypatch.setenv("BROWSER_PATH", "/nonexistent/chromium")
    assert chromium_path() is None
    with pytest.raises(ChartExportUnavailable, match="Chart export needs Chromium"):
        chart_image_render(figure=small_figure(), fmt="png")


# --- through the page's export URL -----------------------------------------------------------------------


def chart_url(project) -> str:
    return reverse("forecasts-chart", kwargs={"slug": project.slug})


@pytest.mark.django_db
def test_export_answers_503_when_chromium_is_missing(viewer_client, outlook, monkeypatch):
    project, _ = outlook
    monkeypatch.setenv("BROWSER_PATH", "/nonexistent/chromium")
    response = viewer_client.get(chart_url(project), {"format": "png", "series": "Payments"})
    assert response.status_code == 503
    assert response.content.decode() == CHROMIUM_MISSING


@pytest.mark.django_db
def test_export_refuses_an_unknown_format_and_series(viewer_client, outlook):
    project, _ = outlook
    response = viewer_client.get(chart_url(project), {"format": "bmp"})
    assert response.status_code == 400
    assert response.content.decode() == BAD_FORMAT.format(choices="png, svg", value="bmp")
    assert viewer_client.get(chart_url(project), {"format": "png", "series": "nope"}).status_code == 404
    assert viewer_client.get(chart_url(project), {"format": "png", "width": "wide"}).status_code == 400


@needs_chromium
@pytest.mark.django_db
def test_export_url_gives_png_and_svg_files(viewer_client, outlook):
    project, _ = outlook
    png = viewer_client.get(chart_url(project), {"format": "png", "series": XSS, "width": 800, "height": 400})
    assert png.status_code == 200 and png["Content-Type"] == "image/png"
    assert png_size(png.content) == (800, 400)
    assert (
        'filename="berthwise-defect-outlook-img-src-x-onerror-alert-1-12w.png"' in png["Content-Disposition"]
    )
    svg = viewer_client.get(chart_url(project), {"format": "svg", "series": XSS, "horizon": 8})
    assert svg.status_code == 200 and svg["Content-Type"] == "image/svg+xml"
    root = SafeET.fromstring(svg.content)
    assert root.tag == SVG_ROOT
    # the component name is drawn as text, never as markup
    assert b"<img" not in svg.content
    texts = "".join(root.itertext())
    assert "<img src=x onerror=alert(1)>" in texts
