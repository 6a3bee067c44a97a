"""Defect-export API: upload an export (202 + job URL), download its rejected rows, read and save column maps.

Who may do what (same token auth as the results upload, ``ingest/api/auth.py``):

* ``POST /api/v1/projects/<slug>/defects/``: a token of the project, a staff person or a triager
  (``analytics.triage``), as on the dashboard's upload page; other signed-in people get 403.
* ``GET  /api/v1/projects/<slug>/imports/<id>/rejected.csv``: a token of the project, or any signed-in person.
* ``GET  /api/v1/projects/<slug>/column-maps/<name>/``: same.
* ``PUT  /api/v1/projects/<slug>/column-maps/<name>/``: a token of the project (so a pipeline can keep its
  map under version control and push it) or a staff person. Other signed-in people get 403: a map decides
  how every later export of the project is read, so changing it is an administrator's act.
"""

from __future__ import annotations

import io
import json

from django.conf import settings
from django.db import transaction
from django.http import HttpResponse
from django.shortcuts import get_object_or_404
from drf_spectacular.utils import OpenApiResponse, extend_schema
from rest_framework import serializers, status
from rest_framework.parsers import JSONParser, MultiPartParser
from rest_framework.response import Response
from rest_framework.views import APIView

from ingest.api.auth import ERR_FOREIGN_TOKEN, CanImport, ProjectAccess, TokenPrincipal
from ingest.api.views import ERR_TOO_LARGE, ImportJobOutput, PayloadTooLarge, upload_size_check
from ingest.models import DefectColumnMap, ImportJob, Project
from ingest.parsers.defects import ColumnMap, ColumnMapError
from ingest.services.defects import (
    column_map_get,
    column_map_save,
    defects_job_create,
    defects_rejected_csv_write,
)
from ingest.tasks import job_enqueue

ERR_ONE_MAP = "give exactly one of 'mapping' (the name of a saved column map) or 'column_map' (its JSON)"
ERR_MAP_JSON = "column_map: not valid JSON ({detail})"
ERR_NAME_MISMATCH = "the map's name {body!r} differs from the name in the URL {url!r}"
ERR_MAP_WRITE = "Saving a column map needs a token of this project or a staff account."
ERR_NO_SUCH_MAP = "no saved column map named {name!r} in project {slug!r}"


class DefectUploadInput(serializers.Serializer):
    file = serializers.FileField(
        help_text="The export: CSV (comma, semicolon or tab), JSON array or JSON lines."
    )
    mapping = serializers.CharField(required=False, allow_blank=True, help_text="Name of a saved column map.")
    column_map = serializers.CharField(required=False, allow_blank=True, help_text="A column map as JSON.")
    strict = serializers.BooleanField(
        required=False, default=False, help_text="Import nothing if a row is bad."
    )


class DefectUploadView(APIView):
    """Store a defect export and queue its import; the job URL shows counts, rejected rows and errors."""

    permission_classes = [CanImport]
    parser_classes = [MultiPartParser]

    @extend_schema(request={"multipart/form-data": DefectUploadInput}, responses={202: ImportJobOutput})
    def post(self, request, slug: str):
        upload_size_check(request)
        project = get_object_or_404(Project, slug=slug)
        form = DefectUploadInput(data=request.data)
        form.is_valid(raise_exception=True)
        data = form.validated_data
        upload = data["file"]
        if upload.size > settings.BAROMETER_MAX_UPLOAD_BYTES:
            raise PayloadTooLarge(
                ERR_TOO_LARGE.format(size=upload.size, limit=settings.BAROMETER_MAX_UPLOAD_BYTES)
            )
        if bool(data.get("mapping")) == bool(data.get("column_map")):
            return Response({"detail": ERR_ONE_MAP}, status=status.HTTP_400_BAD_REQUEST)
        try:
            if data.get("mapping"):
                column_map = column_map_get(project=project, name=data["mapping"])
            else:
                try:
                    definition = json.loads(data["column_map"])
                except json.JSONDecodeError as exc:
                    raise ColumnMapError(ERR_MAP_JSON.format(detail=exc)) from exc
                column_map = ColumnMap.from_dict(definition)
        except ColumnMapError as exc:
            return Response({"detail": str(exc)}, status=status.HTTP_400_BAD_REQUEST)
        job = defects_job_create(
            project=project,
            name=upload.name,
            stream=upload,
            column_map=column_map,
            strict=data["strict"],
            user=request.user,
            via="api",
        )
        transaction.on_commit(lambda: job_enqueue(job))
        body = ImportJobOutput(job).data
        return Response(body, status=status.HTTP_202_ACCEPTED, headers={"Location": body["url"]})


class RejectedRowsCsvView(APIView):
    """The rejected rows of an import as CSV (line, column, field, reason, raw values), formula-safe."""

    permission_classes = [ProjectAccess]

    @extend_schema(
        responses={(200, "text/csv"): OpenApiResponse(description="CSV, one rejected row per line")}
    )
    def get(self, request, slug: str, pk: int):
        job = get_object_or_404(ImportJob.objects.select_related("project"), project__slug=slug, pk=pk)
        out = io.StringIO()
        defects_rejected_csv_write(job=job, out=out)
        response = HttpResponse(out.getvalue(), content_type="text/csv; charset=utf-8")
        response["Content-Disposition"] = f'attachment; filename="import-{job.pk}-rejected.csv"'
        return response


class ColumnMapWrite(ProjectAccess):
    """Reads as ProjectAccess; a PUT needs a token of the project or a staff person."""

    message = ERR_FOREIGN_TOKEN

    def has_permission(self, request, view) -> bool:
        self.message = ERR_FOREIGN_TOKEN
        if not super().has_permission(request, view):
            return False
        if request.method in ("GET", "HEAD", "OPTIONS"):
            return True
        self.message = ERR_MAP_WRITE
        return isinstance(request.user, TokenPrincipal) or bool(getattr(request.user, "is_staff", False))


class ColumnMapView(APIView):
    """One saved column map of the project, as the JSON the import reads (see ingest.parsers.defects)."""

    permission_classes = [ColumnMapWrite]
    parser_classes = [JSONParser]

    @extend_schema(responses={200: dict})
    def get(self, request, slug: str, name: str):
        project = get_object_or_404(Project, slug=slug)
        saved = DefectColumnMap.objects.filter(project=project, name=name).first()
        if saved is None:
            return Response({"detail": ERR_NO_SUCH_MAP.format(name=name, slug=slug)}, status=404)
        return Response(saved.definition)

    @extend_schema(request=dict, responses={200: dict, 201: dict})
    def put(self, request, slug: str, name: str):
        project = get_object_or_404(Project, slug=slug)
        body = request.data if isinstance(request.data, dict) else {}
        body = {**body, "name": body.get("name", name)}
        if body["name"] != name:
            return Response(
                {"detail": ERR_NAME_MISMATCH.format(body=body["name"], url=name)},
                status=status.HTTP_400_BAD_REQUEST,
            )
        try:
            column_map = ColumnMap.from_dict(body)
        except ColumnMapError as exc:
            return Response({"detail": str(exc)}, status=status.HTTP_400_BAD_REQUEST)
        existed = DefectColumnMap.objects.filter(project=project, name=name).exists()
        saved = column_map_save(project=project, column_map=column_map)
        return Response(saved.definition, status=status.HTTP_200_OK if existed else status.HTTP_201_CREATED)
