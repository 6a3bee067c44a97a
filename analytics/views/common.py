"""What every dashboard page shares: the project from the URL, roles, tables, downloads, figures.

Roles: a *viewer* is any logged-in user; a *triager* holds ``analytics.triage`` (group "triagers") and may
change triage states and failure causes; an *admin* is staff and manages tokens, mappings and components in
the admin site. All logged-in users see all projects of this installation.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Callable, Iterable, Mapping
from functools import wraps
from typing import Any
from urllib.parse import urlencode

from django.contrib.auth.decorators import login_required
from django.core.exceptions import PermissionDenied
from django.core.paginator import Paginator
from django.core.serializers.json import DjangoJSONEncoder
from django.http import HttpRequest, HttpResponse, StreamingHttpResponse
from django.shortcuts import get_object_or_404, render
from django.urls import NoReverseMatch, reverse

from barometer_common.csvsafe import neutralise_cell
from ingest.models import Project

TRIAGE_PERMISSION = "analytics.triage"
PAGE_SIZE = 50
MAX_PAGE_SIZE = 200

# (url name, label) of the navigation, in order. The url names are the pages' own.
NAVIGATION = [
    ("overview", "This week"),
    ("flaky-list", "Flaky tests"),
    ("causes-list", "Failure causes"),
    ("forecasts", "Defect outlook"),
    ("imports", "Builds & imports"),
]


def can_triage(user) -> bool:
    return bool(user.is_authenticated and user.has_perm(TRIAGE_PERMISSION))


def project_page(view: Callable) -> Callable:
    """Login required; loads ``request.project`` from the ``slug`` URL argument (404 when unknown)."""

    @login_required
    @wraps(view)
    def wrapper(request: HttpRequest, slug: str, *args, **kwargs):
        request.project = get_object_or_404(Project, slug=slug)
        return view(request, *args, **kwargs)

    return wrapper


def triage_required(view: Callable) -> Callable:
    """For POST actions that change triage states or failure causes: 403 for viewers."""

    @wraps(view)
    def wrapper(request: HttpRequest, *args, **kwargs):
        if not can_triage(request.user):
            raise PermissionDenied("Only triagers may change this.")
        return view(request, *args, **kwargs)

    return wrapper


def _navigation(slug: str) -> list[tuple[str, str, str]]:
    links = []
    for name, label in NAVIGATION:
        try:
            links.append((name, label, reverse(name, kwargs={"slug": slug})))
        except NoReverseMatch:  # a page family not mounted in this build
            continue
    return links


def render_page(request: HttpRequest, template: str, context: Mapping[str, Any], *, page: str) -> HttpResponse:
    """Render a dashboard page with the shared frame: project switcher, navigation, role flags."""
    frame = {
        "project": request.project,
        "projects": Project.objects.order_by("name").only("slug", "name"),
        "navigation": _navigation(request.project.slug),
        "active_page": page,
        "can_triage": can_triage(request.user),
    }
    return render(request, template, {**frame, **context})


def int_param(request: HttpRequest, name: str, default: int, *, low: int, high: int) -> int:
    try:
        value = int(request.GET.get(name, default))
    except (TypeError, ValueError):
        return default
    return max(low, min(high, value))


def float_param(request: HttpRequest, name: str) -> float | None:
    """A finite float from ``?name=``, else None (``nan`` and ``inf`` would silently empty or fill a filter)."""
    try:
        value = float(request.GET[name])
    except (KeyError, TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def sort_param(request: HttpRequest, allowed: Mapping[str, str], default: str) -> tuple[str, str]:
    """``?sort=key`` or ``?sort=-key`` among *allowed* (public key → ORM field). Returns (public, ORM order)."""
    raw = request.GET.get("sort", default)
    key = raw.lstrip("-")
    if key not in allowed:
        raw, key = default, default.lstrip("-")
    descending = raw.startswith("-")
    return raw, ("-" if descending else "") + allowed[key]


def sort_headers(request: HttpRequest, sort: str, columns) -> list[dict]:
    """Table headers for ``columns`` ((public sort key or None, label), …): a link that sorts by the column
    (descending first, then ascending) and the ``aria-sort`` state of the current one."""
    headers = []
    for key, label in columns:
        if key is None:
            headers.append({"label": label})
            continue
        current = sort.lstrip("-") == key
        descending = current and sort.startswith("-")
        headers.append({
            "label": label,
            "href": "?" + query_string(request, sort=key if descending else f"-{key}", page=None),
            "aria_sort": ("descending" if descending else "ascending") if current else None,
        })
    return headers


def paginate(request: HttpRequest, items, *, per_page: int = PAGE_SIZE):
    """A Django Page of *items* (queryset or list) for ``?page=``; out-of-range pages clamp."""
    size = int_param(request, "per_page", per_page, low=10, high=MAX_PAGE_SIZE)
    return Paginator(items, size).get_page(request.GET.get("page"))


def query_string(request: HttpRequest, **changes) -> str:
    """The current query string with *changes* applied (None removes a key): for sort and page links."""
    params = request.GET.copy()
    for key, value in changes.items():
        if value is None:
            params.pop(key, None)
        else:
            params[key] = value
    return urlencode(sorted((k, v) for k, vs in params.lists() for v in vs))


class _Echo:
    def write(self, value: str) -> str:
        return value


def table_download(request: HttpRequest, *, rows: Iterable[Mapping[str, Any]], fields: list[str],
                   filename: str) -> HttpResponse | None:
    """``?download=csv|json``: exactly the filtered rows, streamed; CSV cells neutralised (OWASP CSV injection).

    Returns None when no download was asked for, so the view renders the page instead.
    """
    kind = request.GET.get("download")
    if kind == "json":
        payload = json.dumps([{f: row.get(f) for f in fields} for row in rows], cls=DjangoJSONEncoder, indent=1)
        response = HttpResponse(payload, content_type="application/json")
    elif kind == "csv":
        import csv

        writer = csv.writer(_Echo(), quoting=csv.QUOTE_ALL, lineterminator="\r\n")

        def lines():
            yield writer.writerow([neutralise_cell(f) for f in fields])
            for row in rows:
                yield writer.writerow([neutralise_cell(row.get(f)) for f in fields])

        response = StreamingHttpResponse(lines(), content_type="text/csv; charset=utf-8")
    else:
        return None
    # The name often holds uploaded text (a build id): keep only characters that are safe in a header.
    safe = re.sub(r"[^A-Za-z0-9._-]+", "-", filename).strip("-") or "download"
    response["Content-Disposition"] = f'attachment; filename="{safe}.{kind}"'
    return response


def figure_div(fig, *, div_id: str) -> str:
    """A plotly figure as an HTML fragment that uses the locally served plotly.js (no CDN).

    Every uploaded string put into a figure (names, hover text) must already be escaped by the chart
    builder (see analytics/charts/__init__.py: ``safe_text``); plotly renders a subset of HTML in labels.
    """
    return fig.to_html(full_html=False, include_plotlyjs=False, div_id=div_id,
                       config={"displaylogo": False, "responsive": True})
