"""Dashboard pages "Flaky tests": the suspect list and one test's detail with its triage actions."""

from __future__ import annotations

import pandas as pd
from django.conf import settings
from django.contrib import messages
from django.core.paginator import Paginator
from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import redirect
from django.urls import path, reverse
from django.views.decorators.http import require_GET, require_POST

from analytics import selectors_pages as sel
from analytics.charts.flaky import duration_figure
from analytics.models import TriageState
from analytics.services.triage import TriageStateChanged, quarantine_release_candidates, triage_set
from analytics.views.common import (
    figure_div,
    float_param,
    paginate,
    project_page,
    query_string,
    render_page,
    sort_headers,
    sort_param,
    table_download,
    triage_required,
)

#: Shown next to every triage action and on the list: quarantining hides failures.
QUARANTINE_CAUTION = (
    "Quarantining hides failures: a quarantined test keeps being run and reported here, but builds no longer "
    "fail on it, so a real regression in it can go unnoticed. Release it as soon as it is fixed."
)

#: The triage buttons: action → (new state, button label). "release" leaves quarantine for "confirmed flaky":
#: the history still shows the flakiness, and the test stays visible and labelled for the classifier.
TRIAGE_ACTIONS = {
    "confirm": (TriageState.CONFIRMED, "Confirm flaky"),
    "quarantine": (TriageState.QUARANTINED, "Quarantine"),
    "not_flaky": (TriageState.NOT_FLAKY, "Not flaky"),
    "release": (TriageState.CONFIRMED, "Release from quarantine"),
}
ERR_UNKNOWN_ACTION = "Unknown triage action."
ERR_RELEASE_NOT_QUARANTINED = "Only a quarantined test can be released."
ERR_NOTE_TOO_LONG = "The note is longer than 2000 characters."
NOTE_MAX = 2000
#: Release suggestions listed on the list page (the count shows how many there are in all).
RELEASE_SHOWN = 10
#: Builds per page of a test's outcome history.
HISTORY_PAGE_SIZE = 40

#: Outcome letter (as in TestHealth.recent_outcomes) → (symbol, word, CSS class). Symbol and word, not colour.
OUTCOME_SYMBOLS = {
    "P": ("✓", "passed", "o-pass"),
    "F": ("✗", "failed", "o-fail"),
    "E": ("!", "error", "o-error"),
    "S": ("–", "skipped", "o-skip"),
}
OUTCOME_LETTER = {"passed": "P", "failed": "F", "error": "E", "skipped": "S"}


def outcome_strip(letters: str) -> list[tuple[str, str, str]]:
    """``"PFP"`` → [(symbol, word, css class), …]; unknown letters show as "?"."""
    return [OUTCOME_SYMBOLS.get(ch, ("?", "unknown", "o-skip")) for ch in letters or ""]


def strip_label(letters: str) -> str:
    words = [w for _, w, _ in outcome_strip(letters)]
    return f"last {len(words)} runs, oldest first: " + ", ".join(words) if words else "no runs"


def available_actions(state: str) -> list[tuple[str, str]]:
    """The buttons offered in ``state``: release (or not flaky) when quarantined, else the other states."""
    if state == TriageState.QUARANTINED:
        keys = ["release", "not_flaky"]
    else:
        keys = [k for k in ("confirm", "quarantine", "not_flaky") if TRIAGE_ACTIONS[k][0] != state]
    return [(k, TRIAGE_ACTIONS[k][1]) for k in keys]


def _filters(request: HttpRequest) -> dict:
    state = request.GET.get("triage") or None
    return {
        "component": request.GET.get("component") or None,
        "verdict": request.GET.get("verdict") or None,
        "triage_state": state if state in TriageState.values else None,
        "min_score": float_param(request, "min_score"),
        "search": (request.GET.get("q") or "").strip()[:200] or None,
    }


@require_GET
@project_page
def flaky_list(request: HttpRequest) -> HttpResponse:
    project = request.project
    sort, order = sort_param(request, sel.FLAKY_SORTS, sel.FLAKY_DEFAULT_SORT)
    filters = _filters(request)
    qs = sel.flaky_table_qs(project_id=project.pk, order=order, **filters)
    download = table_download(request, rows=(sel.flaky_table_row(h) for h in qs.iterator(chunk_size=2000)),
                              fields=sel.FLAKY_DOWNLOAD_FIELDS, filename=f"{project.slug}-flaky-tests")
    if download is not None:
        return download
    page = paginate(request, qs)
    rows = []
    for health in page.object_list:
        row = sel.flaky_table_row(health)
        row["strip"] = outcome_strip(health.recent_outcomes)
        row["strip_label"] = strip_label(health.recent_outcomes)
        row["triage_label"] = TriageState(row["triage_state"]).label
        rows.append(row)
    columns = [("name", "Test"), ("component", "Component"), ("score", "Score"), ("verdict", "Verdict"),
               (None, "Triage"), ("runs", "Runs"), ("failures", "Failures"), ("last_failure", "Last failure"),
               (None, "Latest runs")]
    release = quarantine_release_candidates(project_id=project.pk)
    context = {
        "rows": rows,
        "page": page,
        "headers": sort_headers(request, sort, columns),
        "release_candidates": release[:RELEASE_SHOWN],
        "release_count": len(release),
        "release_after": settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS,
        "filters": filters,
        "min_score_text": request.GET.get("min_score", ""),
        "components": sel.component_names(project_id=project.pk),
        "no_component": sel.NO_COMPONENT,
        "verdicts": sel.health_verdicts(project_id=project.pk),
        "triage_states": TriageState.choices,
        "caution": QUARANTINE_CAUTION,
        "page_query": query_string(request, page=None),
        "csv_query": query_string(request, page=None, download="csv"),
        "json_query": query_string(request, page=None, download="json"),
    }
    return render_page(request, "flaky/list.html", context, page="flaky-list")


@require_GET
@project_page
def flaky_detail(request: HttpRequest, test_id: int) -> HttpResponse:
    project = request.project
    test = sel.flaky_test_get(project_id=project.pk, test_id=test_id)
    if test is None:
        raise Http404("No such test in this project.")
    health = getattr(test, "health", None)
    history = sel.test_history(test_id=test.pk)
    points = pd.DataFrame(sel.history_points(history),
                          columns=["started_at", "build", "commit", "attempt", "outcome", "duration"])
    for entry in history:
        for attempt in entry.attempts:
            attempt["symbol"], attempt["word"], attempt["css"] = OUTCOME_SYMBOLS[OUTCOME_LETTER.get(
                attempt["outcome"], "S")]
    history_page = Paginator(history, HISTORY_PAGE_SIZE).get_page(request.GET.get("hpage"))
    triage = getattr(test, "triage", None)
    state = triage.state if triage is not None else TriageState.UNREVIEWED.value
    release_after = settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS
    green = triage.green_runs_since_quarantine if triage is not None else 0
    actions = available_actions(state)
    context = {
        "test": test,
        "health": health,
        "strip": outcome_strip(health.recent_outcomes) if health else [],
        "strip_label": strip_label(health.recent_outcomes) if health else "",
        "evidence": sorted((health.evidence or {}).items()) if health else [],
        "history": history_page,
        "history_builds": len(history),
        "history_query": query_string(request, hpage=None),
        "history_limit": sel.HISTORY_LIMIT,
        "reruns": sum(1 for h in history if h.reran),
        "duration_chart": figure_div(duration_figure(points), div_id="duration-chart"),
        "causes": sel.test_failure_causes(project_id=project.pk, test_id=test.pk),
        "events": sel.triage_history(test_id=test.pk),
        "triage": triage,
        "triage_state": state,
        "triage_state_label": TriageState(state).label,
        "actions": actions,
        "caution": QUARANTINE_CAUTION,
        "release_after": release_after,
        "green_runs": green,
        "release_suggested": state == TriageState.QUARANTINED and green >= release_after,
        "note_max": NOTE_MAX,
    }
    return render_page(request, "flaky/detail.html", context, page="flaky-list")


@require_POST
@project_page
@triage_required
def flaky_triage(request: HttpRequest, test_id: int) -> HttpResponse:
    """Apply one triage action (POST ``action`` and ``note``); triagers only; back to the detail page."""
    project = request.project
    test = sel.flaky_test_get(project_id=project.pk, test_id=test_id)
    if test is None:
        raise Http404("No such test in this project.")
    detail = reverse("flaky-detail", kwargs={"slug": project.slug, "test_id": test.pk})
    action = request.POST.get("action", "")
    note = request.POST.get("note", "").strip()
    if action not in TRIAGE_ACTIONS:
        messages.error(request, ERR_UNKNOWN_ACTION)
        return redirect(detail)
    if len(note) > NOTE_MAX:
        messages.error(request, ERR_NOTE_TOO_LONG)
        return redirect(detail)
    state, label = TRIAGE_ACTIONS[action]
    # "release" is checked on the locked triage row, so a release someone committed meanwhile is seen.
    only_from = TriageState.QUARANTINED if action == "release" else None
    try:
        event = triage_set(test_case=test, state=state, note=note, user=request.user, only_from=only_from)
    except TriageStateChanged:
        messages.error(request, ERR_RELEASE_NOT_QUARANTINED)
        return redirect(detail)
    messages.success(request, f"{label}: the test is now “{TriageState(event.to_state).label}”.")
    return redirect(detail)


urlpatterns = [
    path("", flaky_list, name="flaky-list"),
    path("<int:test_id>/", flaky_detail, name="flaky-detail"),
    path("<int:test_id>/triage/", flaky_triage, name="flaky-triage"),
]
