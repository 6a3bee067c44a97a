"""Upload API: store the files, answer 202 with the job's URL; a worker does the parsing."""

from __future__ import annotations

from django.conf import settings
from django.db import transaction
from django.shortcuts import get_object_or_404
from django.urls import reverse
from drf_spectacular.utils import extend_schema
from rest_framework import serializers, status
from rest_framework.exceptions import APIException
from rest_framework.parsers import MultiPartParser
from rest_framework.response import Response
from rest_framework.views import APIView

from ingest.api.auth import CanImport, ProjectAccess
from ingest.models import ImportJob, Project
from ingest.services.results import BuildMeta, ResultsImportError, results_job_create
from ingest.tasks import job_enqueue

ERR_TOO_LARGE = "upload is {size} bytes; the limit is {limit} bytes (BAROMETER_MAX_UPLOAD_BYTES)"


class PayloadTooLarge(APIException):
    status_code = status.HTTP_413_REQUEST_ENTITY_TOO_LARGE
    default_detail = "upload too large"
    default_code = "too_large"


def upload_size_check(request) -> None:
    limit = settings.BAROMETER_MAX_UPLOAD_BYTES
    declared = int(request.META.get("CONTENT_LENGTH") or 0)
    if declared > limit:
        raise PayloadTooLarge(ERR_TOO_LARGE.format(size=declared, limit=limit))


class ResultsUploadInput(serializers.Serializer):
    files = serializers.ListField(child=serializers.FileField(), allow_empty=False)
    build = serializers.CharField(max_length=200)
    commit = serializers.CharField(max_length=80, required=False, allow_blank=True)
    branch = serializers.CharField(max_length=250, required=False, allow_blank=True)
    ci_job = serializers.CharField(max_length=250, required=False, allow_blank=True)
    started = serializers.CharField(required=False, allow_blank=True, help_text="ISO 8601")


class ImportJobOutput(serializers.ModelSerializer):
    url = serializers.SerializerMethodField()
    build = serializers.SerializerMethodField()

    class Meta:
        model = ImportJob
        fields = [
            "id", "url", "kind", "status", "progress", "original_name", "size", "counts", "warnings",
            "row_errors", "error", "build", "created_at", "started_at", "finished_at",
        ]

    def get_url(self, job) -> str:
        return reverse("api-import-job", kwargs={"slug": job.project.slug, "pk": job.pk})

    def get_build(self, job) -> str | None:
        return job.build.external_id if job.build_id else None


def job_progress(job: ImportJob) -> float:
    if job.status == ImportJob.Status.RUNNING:
        from django.core.cache import cache

        from ingest.services.results import progress_cache_key

        return float(cache.get(progress_cache_key(job.pk), job.progress))
    return job.progress


class ResultsUploadView(APIView):
    """Store JUnit reports and queue their import: a token of the project, a staff person or a triager."""

    permission_classes = [CanImport]
    parser_classes = [MultiPartParser]

    @extend_schema(request={"multipart/form-data": ResultsUploadInput}, responses={202: ImportJobOutput})
    def post(self, request, slug: str):
        upload_size_check(request)
        project = get_object_or_404(Project, slug=slug)
        data = {k: request.data.get(k) for k in ("build", "commit", "branch", "ci_job", "started") if k in request.data}
        data["files"] = request.FILES.getlist("files") or request.FILES.getlist("file")
        form = ResultsUploadInput(data=data)
        form.is_valid(raise_exception=True)
        files = form.validated_data["files"]
        total = sum(f.size for f in files)
        if total > settings.BAROMETER_MAX_UPLOAD_BYTES:
            raise PayloadTooLarge(ERR_TOO_LARGE.format(size=total, limit=settings.BAROMETER_MAX_UPLOAD_BYTES))
        try:
            meta = BuildMeta.from_dict(form.validated_data)
            job = results_job_create(
                project=project,
                files=[(f.name, f) for f in files],
                meta=meta,
                user=request.user,
                via="api",
            )
        except ResultsImportError as exc:
            return Response({"detail": str(exc)}, status=status.HTTP_400_BAD_REQUEST)
        transaction.on_commit(lambda: job_enqueue(job))
        body = ImportJobOutput(job).data
        return Response(body, status=status.HTTP_202_ACCEPTED, headers={"Location": body["url"]})


class ImportJobView(APIView):
    permission_classes = [ProjectAccess]

    @extend_schema(responses=ImportJobOutput)
    def get(self, request, slug: str, pk: int):
        job = get_object_or_404(ImportJob.objects.select_related("project", "build"), project__slug=slug, pk=pk)
        body = ImportJobOutput(job).data
        body["progress"] = job_progress(job)
        return Response(body)
