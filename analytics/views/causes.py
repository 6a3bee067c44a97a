"""Dashboard pages "Failure causes": the cluster list and one cluster with its merge / split / link actions."""

from __future__ import annotations

from datetime import timedelta

from django.contrib import messages
from django.core.exceptions import ValidationError
from django.http import Http404, HttpRequest, HttpResponse
from django.shortcuts import redirect
from django.urls import path, reverse
from django.utils import timezone
from django.views.decorators.http import require_GET, require_POST

from analytics import selectors_pages as sel
from analytics.charts.causes import (
    dense_weekly_counts,
    sparkline_points,
    trend_frame,
    trend_word,
    weekly_trend_figure,
)
from analytics.models import ClusterDefectLink, FailureCluster, FailureSignature
from analytics.views.common import (
    can_triage,
    figure_div,
    int_param,
    paginate,
    project_page,
    query_string,
    render_page,
    sort_headers,
    sort_param,
    table_download,
    triage_required,
)

#: ``?seen=`` choices: label and days back (last seen within).
SEEN_WINDOWS = {"7": "last 7 days", "28": "last 4 weeks", "91": "last 13 weeks"}
DEFECT_FILTERS = {"confirmed": "with a confirmed defect", "suggested": "with suggestions only",
                  "none": "without any defect"}
#: Weeks of trend shown in the list's sparkline.
SPARK_WEEKS = 12

ERR_NO_TARGET = "Choose the cause to merge into."
ERR_SAME_CLUSTER = "A cause cannot be merged into itself."
ERR_NO_SIGNATURES = "Tick at least one signature to split off."
ERR_SPLIT_ALL = "Splitting off every signature would leave this cause empty; tick fewer."
ERR_NO_LINK = "That defect is not suggested for this cause."
ERR_MERGED = "This cause was merged into another one; act on that one instead."


def _list_filters(request: HttpRequest) -> dict:
    seen = request.GET.get("seen")
    defects = request.GET.get("defects")
    return {
        "search": (request.GET.get("q") or "").strip()[:200] or None,
        "min_failures": int_param(request, "min_failures", 0, low=0, high=10**9) or None,
        "defects": defects if defects in DEFECT_FILTERS else None,
        "seen_since": timezone.now() - timedelta(days=int(seen)) if seen in SEEN_WINDOWS else None,
    }


@require_GET
@project_page
def causes_list(request: HttpRequest) -> HttpResponse:
    project = request.project
    sort, order = sort_param(request, sel.CAUSE_SORTS, sel.CAUSE_DEFAULT_SORT)
    filters = _list_filters(request)
    qs = sel.cluster_table_qs(project_id=project.pk, order=order, **filters)
    download = table_download(request, rows=(sel.cluster_table_row(c) for c in qs.iterator(chunk_size=500)),
                              fields=sel.CAUSE_DOWNLOAD_FIELDS, filename=f"{project.slug}-failure-causes")
    if download is not None:
        return download
    page = paginate(request, qs)
    end = sel.latest_build_week(project_id=project.pk)
    rows = []
    for cluster in page.object_list:
        row = sel.cluster_table_row(cluster)
        counts = [n for _, n in dense_weekly_counts(cluster.weekly_trend, end=end)][-SPARK_WEEKS:]
        row["spark"] = sparkline_points(counts)
        row["spark_text"] = ", ".join(str(n) for n in counts)
        row["trend"] = trend_word(counts)
        row["links"] = list(cluster.defect_links.all())[: sel.LIST_DEFECTS]
        rows.append(row)
    columns = [("label", "Cause"), ("failures", "Failures"), ("tests", "Tests"), ("builds", "Builds"),
               ("first_seen", "First seen"), ("last_seen", "Last seen"), (None, "Trend"),
               (None, "Defects")]
    context = {
        "rows": rows,
        "page": page,
        "headers": sort_headers(request, sort, columns),
        "q": filters["search"] or "",
        "min_failures": filters["min_failures"] or "",
        "defects": request.GET.get("defects", ""),
        "seen": request.GET.get("seen", ""),
        "seen_windows": SEEN_WINDOWS,
        "defect_filters": DEFECT_FILTERS,
        "spark_weeks": SPARK_WEEKS,
        "page_query": query_string(request, page=None),
        "csv_query": query_string(request, page=None, download="csv"),
        "json_query": query_string(request, page=None, download="json"),
    }
    return render_page(request, "causes/list.html", context, page="causes-list")


def _cluster_or_404(project, cluster_id: int) -> FailureCluster:
    cluster = sel.cluster_get(project_id=project.pk, cluster_id=cluster_id)
    if cluster is None:
        raise Http404("No such failure cause in this project.")
    return cluster


@require_GET
@project_page
def causes_detail(request: HttpRequest, cluster_id: int) -> HttpResponse:
    project = request.project
    cluster = _cluster_or_404(project, cluster_id)
    signatures = paginate(request, sel.cluster_signatures_qs(cluster_id=cluster.pk), per_page=25)
    keys = list(sel.cluster_signatures_qs(cluster_id=cluster.pk).values_list("key", flat=True))
    failures = paginate(_FailurePageRequest(request), sel.cluster_failures_qs(project_id=project.pk, keys=keys),
                        per_page=25)
    trend = trend_frame(cluster.weekly_trend, end=sel.latest_build_week(project_id=project.pk))
    context = {
        "cluster": cluster,
        "signatures": signatures,
        "signature_count": len(keys),
        "can_split": can_triage(request.user) and cluster.merged_into_id is None and len(keys) > 1,
        "failures": failures,
        "trend_chart": figure_div(weekly_trend_figure(trend, label=cluster.label), div_id="trend-chart"),
        "trend_word": trend_word(trend["failures"].tolist()),
        "links": sel.cluster_defect_links(cluster_id=cluster.pk),
        "merge_targets": sel.cluster_merge_targets(project_id=project.pk, exclude_id=cluster.pk)
        if cluster.merged_into_id is None else [],
        "sig_query": query_string(request, page=None),
        "fail_query": query_string(request, fpage=None),
    }
    return render_page(request, "causes/detail.html", context, page="causes-list")


class _FailurePageRequest:
    """Lets :func:`paginate` read the failures' page from ``?fpage=`` (signatures use ``?page=``)."""

    def __init__(self, request: HttpRequest):
        self.GET = request.GET.copy()
        self.GET["page"] = request.GET.get("fpage", "1")


def _detail(project, cluster) -> str:
    return reverse("causes-detail", kwargs={"slug": project.slug, "cluster_id": cluster.pk})


@require_POST
@project_page
@triage_required
def causes_merge(request: HttpRequest, cluster_id: int) -> HttpResponse:
    """Merge this cause into another one (POST ``into``); triagers only."""
    from analytics.services.clusters import cluster_merge

    project = request.project
    cluster = _cluster_or_404(project, cluster_id)
    if cluster.merged_into_id is not None:
        messages.error(request, ERR_MERGED)
        return redirect(_detail(project, cluster))
    try:
        into_id = int(request.POST.get("into", ""))
    except ValueError:
        messages.error(request, ERR_NO_TARGET)
        return redirect(_detail(project, cluster))
    if into_id == cluster.pk:
        messages.error(request, ERR_SAME_CLUSTER)
        return redirect(_detail(project, cluster))
    into = _cluster_or_404(project, into_id)
    try:
        target = cluster_merge(cluster=cluster, into=into, user=request.user)
    except ValidationError as exc:
        messages.error(request, " ".join(exc.messages))
        return redirect(_detail(project, cluster))
    messages.success(request, f"Merged cause #{cluster.pk} into #{target.pk}.")
    return redirect(_detail(project, target))


@require_POST
@project_page
@triage_required
def causes_split(request: HttpRequest, cluster_id: int) -> HttpResponse:
    """Split the ticked signatures (POST ``signature`` keys) off into a new cause; triagers only."""
    from analytics.services.clusters import cluster_split

    project = request.project
    cluster = _cluster_or_404(project, cluster_id)
    if cluster.merged_into_id is not None:
        messages.error(request, ERR_MERGED)
        return redirect(_detail(project, cluster))
    wanted = set(request.POST.getlist("signature"))
    members = set(FailureSignature.objects.filter(cluster=cluster).values_list("key", flat=True))
    keys = sorted(wanted & members)
    if not keys:
        messages.error(request, ERR_NO_SIGNATURES)
        return redirect(_detail(project, cluster))
    if len(keys) == len(members):
        messages.error(request, ERR_SPLIT_ALL)
        return redirect(_detail(project, cluster))
    try:
        new = cluster_split(cluster=cluster, signature_keys=keys, user=request.user)
    except ValidationError as exc:
        messages.error(request, " ".join(exc.messages))
        return redirect(_detail(project, cluster))
    messages.success(request, f"Split {len(keys)} signature(s) off cause #{cluster.pk} into the new cause #{new.pk}.")
    return redirect(_detail(project, new))


@require_POST
@project_page
@triage_required
def causes_link(request: HttpRequest, cluster_id: int) -> HttpResponse:
    """Confirm a suggested defect for this cause (POST ``defect`` id); triagers only."""
    from analytics.services.clusters import cluster_defect_link_confirm

    project = request.project
    cluster = _cluster_or_404(project, cluster_id)
    link = None
    if request.POST.get("defect", "").isdigit():
        link = ClusterDefectLink.objects.filter(cluster=cluster, defect_id=int(request.POST["defect"])).select_related(
            "defect").first()
    if link is None:
        messages.error(request, ERR_NO_LINK)
        return redirect(_detail(project, cluster))
    try:
        cluster_defect_link_confirm(cluster=cluster, defect=link.defect, user=request.user)
    except ValidationError as exc:
        messages.error(request, " ".join(exc.messages))
        return redirect(_detail(project, cluster))
    messages.success(request, f"Confirmed defect {link.defect.key} as the cause of #{cluster.pk}.")
    return redirect(_detail(project, cluster))


urlpatterns = [
    path("", causes_list, name="causes-list"),
    path("<int:cluster_id>/", causes_detail, name="causes-detail"),
    path("<int:cluster_id>/merge/", causes_merge, name="causes-merge"),
    path("<int:cluster_id>/split/", causes_split, name="causes-split"),
    path("<int:cluster_id>/link/", causes_link, name="causes-link"),
]
