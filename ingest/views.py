"""Dashboard pages of the ingest app: builds and their results, import jobs with live progress and retry, and
the defect upload (file → preview of the first rows → column mapping → import).

Roles: every signed-in person sees these pages; retrying a job and uploading defects is for triagers and
admins (``can_import``), because both change the data everyone's figures are computed from. Triagers may save
a mapping under a new name; overwriting a saved one is for admins, as in the API.
"""

from __future__ import annotations

from collections import defaultdict

from django.conf import settings
from django.contrib import messages
from django.core.exceptions import PermissionDenied
from django.db import transaction
from django.db.models import F, Q
from django.http import Http404, HttpRequest, HttpResponse, JsonResponse
from django.shortcuts import get_object_or_404, redirect
from django.urls import path, reverse
from django.utils import timezone
from django.views.decorators.http import require_POST

from analytics.views.common import (
    int_param,
    paginate,
    project_page,
    query_string,
    render_page,
    sort_param,
    table_download,
)
from barometer_common.uploads import upload_refused
from ingest.api.auth import can_import
from ingest.models import Build, DefectColumnMap, ImportJob, Outcome, TestResult
from ingest.parsers.defects import DEFECT_FIELDS, REQUIRED_FIELDS, ColumnMap, ColumnMapError
from ingest.services.defects import column_map_get, column_map_save, defect_export_preview, defects_job_create
from ingest.storage import raw_file_path, raw_file_store
from ingest.tasks import job_enqueue

ERR_NOT_ALLOWED = "Only triagers and admins may retry imports or upload defects."
ERR_NOT_RETRYABLE = "Only a failed import, or one that never reached a worker, can be retried (this one is {status})."
ERR_NO_FILE = "Choose a defect export file (CSV or JSON) to upload."
ERR_TOO_LARGE = "{name} is {size} bytes; the limit is {limit} bytes (BAROMETER_MAX_UPLOAD_BYTES)."
ERR_MAP_EXISTS = ("A column map named “{name}” is already saved and only admins may change it. Choose another "
                  "name, or untick “save it” to import with this mapping without saving it.")
ERR_REQUEST_TOO_LARGE = ("{name} was not stored: the upload is {size} bytes; the limit is {limit} bytes "
                         "(BAROMETER_MAX_UPLOAD_BYTES).")
ERR_UPLOAD_GONE = "This upload is no longer in your session; upload the file again."
MSG_RETRIED = "Import #{pk} was queued again."
MSG_ALREADY_QUEUED = "Import #{pk} is already queued again (another retry came first)."
MSG_QUEUED = "The defect export was stored and its import #{pk} is queued."
SESSION_UPLOADS = "defect_uploads"
PREVIEW_ROWS = 20
JOB_ROW_ERRORS_SHOWN = 200
DATE_FORMATS = [("", "work it out per column"), ("iso", "ISO 8601"), ("dayfirst", "day first (31/12/2026)"),
                ("monthfirst", "month first (12/31/2026)"), ("epoch_s", "Unix seconds"),
                ("epoch_ms", "Unix milliseconds")]
BUILD_SORTS = {"started": "started_at", "build": "external_id", "branch": "branch", "commit": "commit"}
RESULT_SORTS = {"test": "test_case__name", "outcome": "outcome", "duration": "duration", "attempt": "attempt"}


def _import_required(request: HttpRequest) -> None:
    if not can_import(request.user):
        raise PermissionDenied(ERR_NOT_ALLOWED)


# --------------------------------------------------------------------------------------------------- builds
def _build_outcomes(builds: list[Build]) -> dict[int, dict]:
    """Per build: the outcome counts of its finished result imports (read from the jobs, not the results)."""
    totals: dict[int, dict] = defaultdict(lambda: defaultdict(int))
    jobs = ImportJob.objects.filter(build__in=builds, kind=ImportJob.Kind.RESULTS, status=ImportJob.Status.DONE)
    for build_id, counts in jobs.values_list("build_id", "counts"):
        for key in ("tests", "passed", "failed", "errors", "skipped", "reruns"):
            totals[build_id][key] += int((counts or {}).get(key, 0))
    return totals


def _job_row(job: ImportJob) -> dict:
    return {
        "id": job.pk, "kind": job.get_kind_display(), "status": job.status, "progress": _progress(job),
        "name": job.original_name, "created_at": job.created_at, "finished_at": job.finished_at,
        "build": job.build.external_id if job.build_id else "", "build_id": job.build_id,
        "warnings": len(job.warnings or []), "rejected": len(job.row_errors or []), "error": job.error,
    }


def _progress(job: ImportJob) -> float:
    from ingest.api.views import job_progress

    return round(float(job_progress(job)), 3)


@project_page
def imports(request: HttpRequest) -> HttpResponse:
    """Builds with their results (filter, sort, page, download) and the latest import jobs."""
    project = request.project
    builds = Build.objects.filter(project=project)
    week = request.GET.get("week") or ""
    if week:
        builds = builds.filter(week=week) if _is_date(week) else builds.none()
    branch = (request.GET.get("branch") or "").strip()[:250]
    if branch:
        builds = builds.filter(branch=branch)
    search = (request.GET.get("q") or "").strip()[:200]
    if search:
        builds = builds.filter(Q(external_id__icontains=search) | Q(commit__istartswith=search))
    sort, order = sort_param(request, BUILD_SORTS, "-started")
    builds = builds.order_by(order, "-id")
    fields = ["external_id", "commit", "branch", "ci_job", "started_at"]
    download = table_download(request, rows=builds.values(*fields), fields=fields,
                              filename=f"{project.slug}-builds")
    if download is not None:
        return download
    page = paginate(request, builds)
    outcomes = _build_outcomes(list(page))
    rows = [{"build": b, **outcomes.get(b.pk, {})} for b in page]
    jobs = list(ImportJob.objects.filter(project=project).select_related("build").order_by("-created_at", "-id")[:8])
    context = {
        "rows": rows, "page_obj": page, "sort": sort, "week": week, "branch": branch, "q": search,
        "jobs": [_job_row(j) for j in jobs], "can_import": can_import(request.user),
        "branches": list(Build.objects.filter(project=project).exclude(branch="").order_by("branch")
                         .values_list("branch", flat=True).distinct()[:100]),
        "sort_links": {k: query_string(request, sort=(k if sort == "-" + k else "-" + k), page=None)
                       for k in BUILD_SORTS},
        "qs_csv": query_string(request, download="csv", page=None),
        "qs_json": query_string(request, download="json", page=None),
        "prev_qs": query_string(request, page=page.previous_page_number()) if page.has_previous() else "",
        "next_qs": query_string(request, page=page.next_page_number()) if page.has_next() else "",
    }
    return render_page(request, "imports/imports.html", context, page="imports")


def _is_date(text: str) -> bool:
    from datetime import date

    try:
        date.fromisoformat(text)
    except ValueError:
        return False
    return True


@project_page
def build_detail(request: HttpRequest, pk: int) -> HttpResponse:
    """One build: its metadata, the imports that fed it, and its results (filter by outcome or name)."""
    build = get_object_or_404(Build, project=request.project, pk=pk)
    results = TestResult.objects.filter(build=build).select_related("test_case", "test_case__component")
    outcome = request.GET.get("outcome") or ""
    if outcome in Outcome.values:
        results = results.filter(outcome=outcome)
    elif outcome == "failing":
        results = results.filter(outcome__in=[Outcome.FAILED, Outcome.ERROR])
    search = (request.GET.get("q") or "").strip()[:200]
    if search:
        results = results.filter(Q(test_case__name__icontains=search) | Q(test_case__classname__icontains=search))
    sort, order = sort_param(request, RESULT_SORTS, "test")
    results = results.order_by(order, "test_case__classname", "attempt", "id")
    fields = ["classname", "name", "component", "outcome", "attempt", "duration", "failure_type", "message"]
    rows = results.values("outcome", "attempt", "duration", "failure_type", "message",
                          classname=F("test_case__classname"), name=F("test_case__name"),
                          component=F("test_case__component__name"))
    download = table_download(request, rows=rows, fields=fields,
                              filename=f"{request.project.slug}-build-{build.external_id}")
    if download is not None:
        return download
    page = paginate(request, results)
    jobs = list(ImportJob.objects.filter(build=build).order_by("created_at", "id"))
    context = {
        "build": build, "page_obj": page, "outcome": outcome, "q": search, "sort": sort, "jobs": jobs,
        "totals": _build_outcomes([build]).get(build.pk, {}), "outcomes": Outcome.values,
        "sort_links": {k: query_string(request, sort=(k if sort == "-" + k else "-" + k), page=None)
                       for k in RESULT_SORTS},
        "qs_csv": query_string(request, download="csv", page=None),
        "qs_json": query_string(request, download="json", page=None),
        "prev_qs": query_string(request, page=page.previous_page_number()) if page.has_previous() else "",
        "next_qs": query_string(request, page=page.next_page_number()) if page.has_next() else "",
    }
    return render_page(request, "imports/build_detail.html", context, page="imports")


# --------------------------------------------------------------------------------------------------- jobs
@project_page
def job_list(request: HttpRequest) -> HttpResponse:
    jobs = ImportJob.objects.filter(project=request.project).select_related("build")
    status = request.GET.get("status") or ""
    if status in ImportJob.Status.values:
        jobs = jobs.filter(status=status)
    kind = request.GET.get("kind") or ""
    if kind in ImportJob.Kind.values:
        jobs = jobs.filter(kind=kind)
    jobs = jobs.order_by("-created_at", "-id")
    fields = ["id", "kind", "status", "original_name", "size", "created_at", "finished_at", "error"]
    download = table_download(request, rows=jobs.values(*fields), fields=fields,
                              filename=f"{request.project.slug}-imports")
    if download is not None:
        return download
    page = paginate(request, jobs)
    context = {
        "jobs": [_job_row(j) for j in page], "page_obj": page, "status": status, "kind": kind,
        "statuses": ImportJob.Status.values, "kinds": ImportJob.Kind.choices, "can_import": can_import(request.user),
        "qs_csv": query_string(request, download="csv", page=None),
        "qs_json": query_string(request, download="json", page=None),
        "prev_qs": query_string(request, page=page.previous_page_number()) if page.has_previous() else "",
        "next_qs": query_string(request, page=page.next_page_number()) if page.has_next() else "",
    }
    return render_page(request, "imports/job_list.html", context, page="imports")


@project_page
def job_detail(request: HttpRequest, pk: int) -> HttpResponse:
    job = get_object_or_404(ImportJob.objects.select_related("build", "created_by"), project=request.project, pk=pk)
    shown = int_param(request, "errors", JOB_ROW_ERRORS_SHOWN, low=10, high=5000)
    context = {
        "job": job, "row": _job_row(job), "row_errors": (job.row_errors or [])[:shown],
        "more_errors": max(0, len(job.row_errors or []) - shown), "can_import": can_import(request.user),
        "retryable": _retryable(job), "files": list(job.files.all()),
    }
    return render_page(request, "imports/job_detail.html", context, page="imports")


@project_page
def job_status(request: HttpRequest, pk: int) -> JsonResponse:
    """The job's state for the progress bars (polled by the page's script with the session cookie)."""
    job = get_object_or_404(ImportJob.objects.select_related("build"), project=request.project, pk=pk)
    row = _job_row(job)
    row["created_at"] = job.created_at.isoformat()
    row["finished_at"] = job.finished_at.isoformat() if job.finished_at else None
    row["counts"] = job.counts
    row["detail_url"] = reverse("import-job", kwargs={"slug": request.project.slug, "pk": job.pk})
    return JsonResponse(row)


def _retryable(job: ImportJob) -> bool:
    return job.status == ImportJob.Status.FAILED or (
        job.status == ImportJob.Status.QUEUED and job.enqueued_at is None
    )


@require_POST
@project_page
def job_retry(request: HttpRequest, pk: int) -> HttpResponse:
    """Queue a failed (or never queued) import again; the stored raw files are parsed anew."""
    _import_required(request)
    job = get_object_or_404(ImportJob, project=request.project, pk=pk)
    if not _retryable(job):
        messages.error(request, ERR_NOT_RETRYABLE.format(status=job.status))
        return redirect("import-job", slug=request.project.slug, pk=job.pk)
    if not _retry_claim(job):
        messages.info(request, MSG_ALREADY_QUEUED.format(pk=job.pk))
        return redirect("import-job", slug=request.project.slug, pk=job.pk)
    job.refresh_from_db()
    transaction.on_commit(lambda: _retry_enqueue(job))
    messages.success(request, MSG_RETRIED.format(pk=job.pk))
    return redirect("import-job", slug=request.project.slug, pk=job.pk)


def _retry_claim(job: ImportJob) -> bool:
    """Queue the job again only if it is still in the state this request saw: one conditional UPDATE.

    Of two quick retries only the first matches; the second updates no row. ``enqueued_at`` is set in the
    same UPDATE (so a never-queued job also leaves its retryable state) and cleared again if the broker
    refuses the task, which leaves the job to ``sweep_unqueued_imports``.
    """
    seen = ImportJob.objects.filter(pk=job.pk, status=job.status)
    if job.status == ImportJob.Status.QUEUED:
        seen = seen.filter(enqueued_at__isnull=True)
    changed = seen.update(status=ImportJob.Status.QUEUED, enqueued_at=timezone.now(), progress=0.0)
    return changed == 1


def _retry_enqueue(job: ImportJob) -> None:
    if not job_enqueue(job):
        ImportJob.objects.filter(pk=job.pk, status=ImportJob.Status.QUEUED).update(enqueued_at=None)


# --------------------------------------------------------------------------------------------------- defects
def _uploads(request: HttpRequest) -> dict:
    return request.session.get(SESSION_UPLOADS, {})


@project_page
def defects_upload(request: HttpRequest) -> HttpResponse:
    """Step 1: choose a file (and optionally a saved mapping). The raw file is kept; nothing is parsed yet."""
    _import_required(request)
    maps = list(DefectColumnMap.objects.filter(project=request.project).order_by("name"))
    error = ""
    if request.method == "POST":
        upload = request.FILES.get("file")
        limit = settings.BAROMETER_MAX_UPLOAD_BYTES
        refused = upload_refused(request)  # stopped by the upload handler before the file was read
        if refused is not None:
            error = ERR_REQUEST_TOO_LARGE.format(name=refused.name, size=refused.size, limit=refused.limit)
        elif upload is None:
            error = ERR_NO_FILE
        elif upload.size > limit:
            error = ERR_TOO_LARGE.format(name=upload.name, size=upload.size, limit=limit)
        else:
            sha, size, rel = raw_file_store(upload)
            uploads = _uploads(request)
            uploads[sha] = {"name": upload.name[:500], "path": rel, "size": size, "project": request.project.slug}
            request.session[SESSION_UPLOADS] = dict(list(uploads.items())[-10:])
            url = reverse("defects-map", kwargs={"slug": request.project.slug, "sha": sha})
            chosen = request.POST.get("map") or ""
            return redirect(url + (f"?map={_quote(chosen)}" if chosen else ""))
    return render_page(request, "imports/defects_upload.html", {"maps": maps, "error": error}, page="imports")


def _quote(text: str) -> str:
    from urllib.parse import quote

    return quote(text, safe="")


def _split_list(text: str) -> list[str]:
    """Values typed one per line or separated by commas."""
    parts = [p.strip() for line in (text or "").splitlines() for p in line.split(",")]
    return [p for p in parts if p]


def _guess_fields(columns: list[str], fields: tuple[str, ...]) -> dict[str, str]:
    """A first mapping: a column whose name equals the field name (ignoring case, spaces and underscores)."""
    def norm(text: str) -> str:
        return "".join(ch for ch in text.casefold() if ch.isalnum())

    by_norm = {norm(c): c for c in columns}
    synonyms = {"created": ["created", "createdat", "opened", "openedon"], "resolved": ["resolved", "closed"],
                "key": ["key", "id", "ticket", "ticketno"], "title": ["title", "summary", "headline"]}
    out = {}
    for field in fields:
        for candidate in synonyms.get(field, [norm(field)]):
            if candidate in by_norm:
                out[field] = by_norm[candidate]
                break
    return out


def _map_from_post(request: HttpRequest, fields: tuple[str, ...]) -> dict:
    chosen = {f: request.POST.get(f"field_{f}", "").strip() for f in fields}
    definition = {
        "name": (request.POST.get("map_name") or "").strip()[:200] or "uploaded from the dashboard",
        "fields": {f: c for f, c in chosen.items() if c},
        "closed_statuses": _split_list(request.POST.get("closed_statuses", "")),
        "severity_order": _split_list(request.POST.get("severity_order", "")),
        "priority_order": _split_list(request.POST.get("priority_order", "")),
        "multi_value_delimiter": request.POST.get("multi_value_delimiter") or ";",
        "date_format": request.POST.get("date_format") or None,
    }
    open_statuses = _split_list(request.POST.get("open_statuses", ""))
    if open_statuses:
        definition["open_statuses"] = open_statuses
    return definition


@project_page
def defects_map(request: HttpRequest, sha: str) -> HttpResponse:
    """Step 2 and 3: the first rows as stored, the mapping editor, a preview of how the map reads them, import."""
    _import_required(request)
    upload = _uploads(request).get(sha)
    if upload is None or upload.get("project") != request.project.slug:
        raise Http404(ERR_UPLOAD_GONE)
    path_on_disk = raw_file_path(upload["path"])
    raw = defect_export_preview(path=path_on_disk, column_map=None, limit=PREVIEW_ROWS, filename=upload["name"])
    maps = list(DefectColumnMap.objects.filter(project=request.project).order_by("name"))
    map_error = ""
    definition: dict
    if request.method == "POST":
        definition = _map_from_post(request, DEFECT_FIELDS)
    elif request.GET.get("map"):
        try:
            definition = column_map_get(project=request.project, name=request.GET["map"]).to_dict()
        except ColumnMapError as exc:
            map_error, definition = str(exc), {"name": "", "fields": _guess_fields(raw["columns"], DEFECT_FIELDS)}
    else:
        definition = {"name": "", "fields": _guess_fields(raw["columns"], DEFECT_FIELDS)}
    column_map = None
    try:
        column_map = ColumnMap.from_dict({"name": definition.get("name") or "unsaved", **{
            k: v for k, v in definition.items() if k != "name"}})
    except ColumnMapError as exc:
        map_error = map_error or str(exc)
    save_name = (request.POST.get("map_name") or "").strip()[:200] if request.POST.get("save_map") else ""
    if (save_name and not request.user.is_staff
            and DefectColumnMap.objects.filter(project=request.project, name=save_name).exists()):
        # As in the API (ColumnMapWrite): changing a saved map changes how every later export that names it
        # is read, so only admins overwrite one. Nothing is imported, so the request is not half done.
        map_error = map_error or ERR_MAP_EXISTS.format(name=save_name)
    elif request.method == "POST" and request.POST.get("action") == "import" and column_map is not None:
        if save_name:
            column_map_save(project=request.project, column_map=column_map)
        with open(path_on_disk, "rb") as stream:
            job = defects_job_create(project=request.project, name=upload["name"], stream=stream,
                                     column_map=column_map, user=request.user, via="web")
        transaction.on_commit(lambda: job_enqueue(job))
        messages.success(request, MSG_QUEUED.format(pk=job.pk))
        return redirect("import-job", slug=request.project.slug, pk=job.pk)
    preview = (defect_export_preview(path=path_on_disk, column_map=column_map, limit=PREVIEW_ROWS,
                                     filename=upload["name"]) if column_map is not None else None)
    fields = definition.get("fields", {})
    context = {
        "upload": upload, "sha": sha, "raw": raw, "preview": preview, "maps": maps, "map_error": map_error,
        "definition": definition,
        "field_rows": [{"field": f, "column": fields.get(f, ""), "required": f in REQUIRED_FIELDS}
                       for f in DEFECT_FIELDS],
        "columns": raw["columns"],
        "raw_rows": [{"line": r["line"], "problem": r["problem"],
                      "cells": [_cell(r["values"], c) for c in raw["columns"]]} for r in raw["rows"]],
        "mapped_fields": list(DEFECT_FIELDS),
        "mapped_rows": [[_cell(r, f) for f in ("line", *DEFECT_FIELDS)] for r in (preview or {}).get("mapped", [])],
        "date_formats": DATE_FORMATS,
        "list_text": {k: "\n".join(definition.get(k) or []) for k in
                      ("closed_statuses", "open_statuses", "severity_order", "priority_order")},
    }
    return render_page(request, "imports/defects_map.html", context, page="imports")


def _cell(values, key: str) -> str:
    value = values.get(key, "") if hasattr(values, "get") else ""
    if isinstance(value, list | tuple):
        return "; ".join(str(v) for v in value)
    if isinstance(value, dict):
        import json

        return json.dumps(value, ensure_ascii=False)
    return "" if value is None else str(value)


urlpatterns = [
    path("", imports, name="imports"),
    path("builds/<int:pk>/", build_detail, name="build-detail"),
    path("jobs/", job_list, name="import-jobs"),
    path("jobs/<int:pk>/", job_detail, name="import-job"),
    path("jobs/<int:pk>/status/", job_status, name="import-job-status"),
    path("jobs/<int:pk>/retry/", job_retry, name="import-job-retry"),
    path("defects/upload/", defects_upload, name="defects-upload"),
    path("defects/map/<str:sha>/", defects_map, name="defects-map"),
]
