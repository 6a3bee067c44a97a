"""The "This week" page (QA managers): headline figures against the previous week, weekly trends, and the
rows behind each figure. Also the site root, which sends a signed-in person to a project's page.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, timedelta

from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import redirect, render
from django.urls import NoReverseMatch, path, reverse
from django.utils import timezone

from analytics.charts.overview import (
    component_failures_chart,
    defect_flow_chart,
    duration_growth_chart,
    pass_rate_chart,
)
from analytics.selectors_overview import (
    GROWTH_WINDOW,
    ROW_KINDS,
    ROW_SORTS,
    Scope,
    component_failures_frame,
    default_week,
    defect_counts,
    defect_flow_frame,
    duration_growth_frame,
    flaky_share,
    rows_queryset,
    transitions,
    weekly_runs_frame,
    weeks_with_builds,
)
from analytics.views.common import (
    figure_div,
    paginate,
    project_page,
    query_string,
    render_page,
    sort_param,
    table_download,
)
from ingest.models import Component, Project

ROW_TITLES = {
    "failed": "Tests that failed",
    "newly-failing": "Newly failing tests (failed this week, not in the week before)",
    "fixed": "Fixed tests (failed the week before, passed this week without failing)",
    "tests": "Tests that ran",
    "defects-opened": "Defects opened",
    "defects-closed": "Defects closed",
    "backlog": "Open defects at the end of the week",
    "flaky": "Tests the detector currently calls flaky",
}
#: Weeks the pages accept in ``?week=``: from the first Monday of 2000 to a year ahead (dates outside cannot
#: hold builds, and the trend windows before them would run off the calendar).
FIRST_WEEK = date(2000, 1, 3)
WEEKS_AHEAD = timedelta(days=366)
WEEK_OUT_OF_RANGE = "The week {week} is outside {first} to {last}; showing the default week instead."
NO_PROJECT_TEXT = "No project exists yet. An admin can create one in the admin site, or run `manage.py load_demo`."


# --------------------------------------------------------------------------------------------------- root
@login_required
def home(request: HttpRequest) -> HttpResponse:
    """``/``: the chosen project's (``?project=<slug>``, the switcher) or the first project's overview."""
    projects = Project.objects.order_by("name")
    wanted = request.GET.get("project")
    project = projects.filter(slug=wanted).first() if wanted else None
    project = project or projects.first()
    if project is None:
        return render(request, "overview/no_project.html", {"message": NO_PROJECT_TEXT})
    return redirect("overview", slug=project.slug)


# --------------------------------------------------------------------------------------------------- filters
def _scope(request: HttpRequest) -> tuple[Scope | None, list[date], list[Component], Component | None]:
    project = request.project
    weeks = weeks_with_builds(project_id=project.pk)
    week = None
    raw = request.GET.get("week")
    if raw:
        try:
            week = date.fromisoformat(raw)
        except ValueError:
            week = None
        if week is not None:
            last = timezone.now().date() + WEEKS_AHEAD
            if not FIRST_WEEK <= week <= last:
                messages.warning(
                    request, WEEK_OUT_OF_RANGE.format(week=week.isoformat(), first=FIRST_WEEK, last=last)
                )
                week = None
        if week is not None:
            week -= timedelta(days=week.weekday())
    if week is None:
        week = default_week(weeks, today=timezone.now().date())
    components = list(Component.objects.filter(project=project).order_by("name"))
    component = None
    raw_component = request.GET.get("component")
    if raw_component:
        component = next((c for c in components if str(c.pk) == raw_component), None)
    if week is None:
        return None, weeks, components, component
    return Scope(project.pk, week, component.pk if component else None), weeks, components, component


@dataclass(frozen=True)
class Figure:
    """One headline number, its change against the previous week, and where its rows are."""

    key: str
    label: str
    value: str
    change: str  # in words, never by colour alone
    tone: str  # "better", "worse" or "same" (CSS class; the words say it too)
    href: str
    note: str = ""


def _change(now: float | None, before: float | None, *, higher_is_better: bool | None, unit: str = "",
            digits: int = 0, scale: float = 1.0, fmt=None) -> tuple[str, str]:
    """The change against the previous week in words ("▲ up 3 on the previous week (worse)") and its tone."""
    if now is None or before is None:
        return "no comparison", "same"
    delta = (now - before) * scale
    if abs(delta) < 0.5 * 10 ** -digits:
        return "no change on the previous week", "same"
    arrow = "▲ up" if delta > 0 else "▼ down"
    amount = fmt(abs(delta)) if fmt else f"{abs(delta):,.{digits}f}{unit}"
    text = f"{arrow} {amount} on the previous week"
    if higher_is_better is None:
        return text, "same"
    good = (delta > 0) == higher_is_better
    return text + (" (better)" if good else " (worse)"), "better" if good else "worse"


def _hours(seconds: float) -> str:
    if seconds >= 3600:
        return f"{seconds / 3600:,.1f} h"
    return f"{seconds / 60:,.1f} min" if seconds >= 60 else f"{seconds:,.0f} s"


def _url_or_none(name: str, slug: str, query: dict) -> str | None:
    try:
        base = reverse(name, kwargs={"slug": slug})
    except NoReverseMatch:
        return None
    from urllib.parse import urlencode

    return base + ("?" + urlencode(query) if query else "")


def _figures(request: HttpRequest, scope: Scope, weekly, component: Component | None) -> list[Figure]:
    slug = request.project.slug
    this = weekly.iloc[-1]
    prev = weekly.iloc[-2] if len(weekly) > 1 else None
    moves = transitions(scope)
    moves_before = transitions(scope.previous)
    defects = defect_counts(scope)
    share = flaky_share(scope)
    base_query = {"week": scope.week.isoformat()}
    if component is not None:
        base_query["component"] = str(component.pk)

    def rows(kind: str, **extra) -> str:
        return reverse("overview-rows", kwargs={"slug": slug, "kind": kind}) + "?" + \
            query_string_from({**base_query, **extra})

    def rate(row) -> float | None:
        return None if row is None or row["pass_rate"] != row["pass_rate"] else float(row["pass_rate"])

    figures = []
    now_rate, prev_rate = rate(this), rate(prev)
    text, tone = _change(now_rate, prev_rate, higher_is_better=True, unit=" points", digits=1, scale=100)
    figures.append(Figure("pass-rate", "Pass rate", "—" if now_rate is None else f"{now_rate * 100:.1f} %",
                          text, tone, rows("tests", sort="-failures"),
                          "passed ÷ runs that were not skipped"))
    text, tone = _change(this["failed_runs"], None if prev is None else prev["failed_runs"],
                         higher_is_better=False)
    figures.append(Figure("failed-runs", "Failed runs", f"{int(this['failed_runs']):,}", text, tone,
                          rows("failed", sort="-failures"), "failures + errors, reruns included"))
    text, tone = _change(moves["newly_failing"], moves_before["newly_failing"], higher_is_better=False)
    figures.append(Figure("newly-failing", "Newly failing tests", f"{moves['newly_failing']:,}", text, tone,
                          rows("newly-failing")))
    text, tone = _change(moves["fixed"], moves_before["fixed"], higher_is_better=True)
    figures.append(Figure("fixed", "Fixed tests", f"{moves['fixed']:,}", text, tone, rows("fixed")))
    flaky_value = "—" if not share["scored"] else f"{share['flaky'] / share['scored'] * 100:.1f} %"
    flaky_href = _url_or_none("flaky-list", slug, {"verdict": "flaky", **(
        {"component": component.name} if component else {})}) or rows("flaky")
    figures.append(Figure("flaky-share", "Suspected flaky", flaky_value,
                          "latest scores: no weekly history to compare", "same", flaky_href,
                          f"{share['flaky']:,} of {share['scored']:,} scored tests"))
    text, tone = _change(this["tests"], None if prev is None else prev["tests"], higher_is_better=None)
    figures.append(Figure("tests", "Tests run", f"{int(this['tests']):,}", text, tone, rows("tests")))
    text, tone = _change(float(this["duration"]), None if prev is None else float(prev["duration"]),
                         higher_is_better=False, fmt=_hours)
    figures.append(Figure("test-time", "Total test time", _hours(float(this["duration"])), text, tone,
                          rows("tests", sort="-seconds"), "sum of all run durations"))
    text, tone = _change(defects["opened"], defects["prev_opened"], higher_is_better=False)
    figures.append(Figure("defects-opened", "Defects opened", f"{defects['opened']:,}", text, tone,
                          rows("defects-opened")))
    text, tone = _change(defects["closed"], defects["prev_closed"], higher_is_better=True)
    figures.append(Figure("defects-closed", "Defects closed", f"{defects['closed']:,}", text, tone,
                          rows("defects-closed")))
    text, tone = _change(defects["backlog"], defects["prev_backlog"], higher_is_better=False)
    figures.append(Figure("backlog", "Open backlog", f"{defects['backlog']:,}", text, tone, rows("backlog"),
                          "open at the end of the week"))
    return figures


def query_string_from(params: dict) -> str:
    from urllib.parse import urlencode

    return urlencode(sorted(params.items()))


# --------------------------------------------------------------------------------------------------- pages
@project_page
def overview(request: HttpRequest) -> HttpResponse:
    scope, weeks, components, component = _scope(request)
    context: dict = {"weeks": weeks, "components": components, "component": component, "scope": scope}
    if scope is None:
        return render_page(request, "overview/overview.html", context, page="overview")
    if scope.week not in weeks:
        weeks = sorted({*weeks, scope.week}, reverse=True)
    weekly = weekly_runs_frame(scope)
    growth = duration_growth_frame(scope)
    slug = request.project.slug
    builds_href = _url_or_none("imports", slug, {"week": scope.week.isoformat()})
    charts = [
        ("pass-rate-chart", pass_rate_chart(weekly, selected=scope.week),
         reverse("overview-rows", kwargs={"slug": slug, "kind": "tests"}) + "?" + query_string(
             request, sort="-failures", page=None), "Tests of the selected week, most failures first"),
        ("component-failures-chart", component_failures_chart(component_failures_frame(scope)),
         builds_href or "", "Builds of the selected week"),
        ("defect-flow-chart", defect_flow_chart(defect_flow_frame(scope)),
         reverse("overview-rows", kwargs={"slug": slug, "kind": "defects-opened"}) + "?" + query_string(
             request, page=None), "Defects opened in the selected week"),
        ("duration-growth-chart", duration_growth_chart(growth, window=GROWTH_WINDOW),
         reverse("overview-rows", kwargs={"slug": slug, "kind": "tests"}) + "?" + query_string(
             request, sort="-seconds", page=None), "Tests of the selected week, slowest first"),
    ]
    context.update(
        weeks=weeks,
        week_end=scope.week + timedelta(days=6),
        figures=_figures(request, scope, weekly, component),
        charts=[{"id": cid, "html": figure_div(fig, div_id=cid), "href": href, "link_text": text}
                for cid, fig, href, text in charts],
        growth=growth,
        builds_href=builds_href,
    )
    return render_page(request, "overview/overview.html", context, page="overview")


_ROW_FIELDS = {
    "tests": ["test_id", "classname", "name", "component", "runs", "passed", "failures", "skipped", "reruns",
              "seconds"],
    "flaky": ["test_id", "classname", "name", "component", "score", "verdict", "runs", "failures",
              "last_failure_at"],
    "defects": ["key", "title", "status", "severity", "created_at", "resolved_at"],
}


def _family(kind: str) -> str:
    if kind.startswith("defects") or kind == "backlog":
        return "defects"
    return "flaky" if kind == "flaky" else "tests"


@project_page
def overview_rows(request: HttpRequest, kind: str) -> HttpResponse:
    """The rows behind one headline figure for the selected week and component; CSV/JSON download."""
    if kind not in ROW_KINDS:
        raise Http404("unknown figure")
    scope, weeks, components, component = _scope(request)
    family = _family(kind)
    default_sort = {"tests": "-failures", "flaky": "-score", "defects": "-created"}[family]
    sort, order = sort_param(request, ROW_SORTS[family], default_sort)
    rows = rows_queryset(scope, kind).order_by(order, *(["key"] if family == "defects" else ["test_id"])) \
        if scope else []
    filename = f"{request.project.slug}-{kind}-{scope.week.isoformat() if scope else 'none'}"
    download = table_download(request, rows=rows, fields=_ROW_FIELDS[family], filename=filename)
    if download is not None:
        return download
    page = paginate(request, rows)
    context = {
        "kind": kind, "family": family, "title": ROW_TITLES[kind], "scope": scope, "weeks": weeks,
        "components": components, "component": component, "page_obj": page, "sort": sort,
        "week_end": scope.week + timedelta(days=6) if scope else None,
        "qs_csv": query_string(request, download="csv", page=None),
        "qs_json": query_string(request, download="json", page=None),
        "sort_links": {key: query_string(request, sort=(key if sort == "-" + key else "-" + key), page=None)
                       for key in ROW_SORTS[family]},
        "prev_qs": query_string(request, page=page.previous_page_number()) if page.has_previous() else "",
        "next_qs": query_string(request, page=page.next_page_number()) if page.has_next() else "",
    }
    if family != "defects":
        context["rows"] = [{**row, "href": _detail_href(request.project.slug, row["test_id"])} for row in page]
    else:
        context["rows"] = list(page)
    return render_page(request, "overview/rows.html", context, page="overview")


def _detail_href(slug: str, test_id: int) -> str | None:
    """The test's page on the flaky-tests family, when that family is mounted (its argument name varies)."""
    for key in ("pk", "test_id", "id"):
        try:
            return reverse("flaky-detail", kwargs={"slug": slug, key: test_id})
        except NoReverseMatch:
            continue
    return None


urlpatterns = [
    path("", overview, name="overview"),
    path("rows/<slug:kind>/", overview_rows, name="overview-rows"),
]
