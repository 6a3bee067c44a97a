"""Regression tests for the shared dashboard helpers: finite float parameters and header-safe download names.

Outside sources: IEEE 754 (NaN compares unequal to everything, so a ``score >= nan`` filter keeps nothing;
common practice); RFC 9110 §5.5 (no CR/LF in a field value) and RFC 6266 (``filename`` parameter of
Content-Disposition) for the download header.
"""

from __future__ import annotations

import pytest
from django.test import RequestFactory

from analytics.views.common import float_param, table_download

ROWS = [{"name": "berthwise.Gate.opens", "score": 0.9}]


@pytest.mark.parametrize("raw", ["nan", "NaN", "inf", "-inf", "Infinity", "1e400"])
def test_float_param_refuses_values_that_are_not_finite(raw):
    request = RequestFactory().get("/", {"min_score": raw})
    assert float_param(request, "min_score") is None


@pytest.mark.parametrize(("raw", "expected"), [("0.25", 0.25), ("-3", -3.0), ("1e-3", 0.001)])
def test_float_param_keeps_finite_values(raw, expected):
    assert float_param(RequestFactory().get("/", {"min_score": raw}), "min_score") == expected


def test_float_param_without_the_parameter_is_none():
    assert float_param(RequestFactory().get("/"), "min_score") is None


@pytest.mark.parametrize(
    ("filename", "expected"),
    [('berthwise-build-x\ny"z', "berthwise-build-x-y-z"), ("berthwise-build-pr 7/é", "berthwise-build-pr-7"),
     ("\r\n\"", "download"), ("berthwise-builds", "berthwise-builds")],
)
@pytest.mark.parametrize("kind", ["csv", "json"])
def test_download_name_keeps_only_header_safe_characters(filename, expected, kind):
    request = RequestFactory().get("/", {"download": kind})
    response = table_download(request, rows=ROWS, fields=["name", "score"], filename=filename)
    assert response["Content-Disposition"] == f'attachment; filename="{expected}.{kind}"'


def test_no_download_asked_gives_none():
    assert table_download(RequestFactory().get("/", {"download": "xlsx"}), rows=ROWS, fields=["name"],
                          filename="x") is None
