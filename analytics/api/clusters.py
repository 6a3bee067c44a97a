"""API endpoints: failure causes (prefix /api/v1/, see analytics/api/urls.py).

- ``GET projects/<slug>/failure-clusters/``: the clusters that hold failures, largest first, paginated
  with ``limit``/``offset``.
- ``GET projects/<slug>/failure-clusters/<id>/``: one cluster with its suggested and confirmed defects
  (cosine similarity ``score``) and its failures, newest first, paginated with ``limit``/``offset``. A
  cluster that was merged into another answers with ``merged_into`` set and no failures, so bookmarks
  keep working.

- ``POST projects/<slug>/failure-clusters/<id>/merge/`` ``{"into": <id>}``: merge this cluster into
  another; ``POST .../split/`` ``{"signature_keys": [...]}``: move signatures into a new cluster;
  ``POST .../defects/`` ``{"defect": "<defect key>"}``: confirm that a defect describes this cause.
  Refits keep these decisions.

Read access: a project API token (``Authorization: Bearer <key>``, its own project only) or any
signed-in person. Changes: signed-in people with the ``analytics.triage`` permission (group "triagers")
only, never API tokens.
"""

from __future__ import annotations

from django.core.exceptions import PermissionDenied as DjangoPermissionDenied
from django.core.exceptions import ValidationError as DjangoValidationError
from django.shortcuts import get_object_or_404
from django.urls import path
from drf_spectacular.utils import extend_schema
from rest_framework import generics, serializers, status
from rest_framework.exceptions import PermissionDenied, ValidationError
from rest_framework.pagination import LimitOffsetPagination
from rest_framework.permissions import BasePermission
from rest_framework.response import Response
from rest_framework.views import APIView

from analytics.models import ClusterDefectLink, FailureCluster, FailureSignature
from analytics.selectors_causes import active_clusters_qs, cluster_results_qs
from analytics.services.clusters import (
    ERR_NOT_TRIAGER,
    cluster_defect_link_confirm,
    cluster_merge,
    cluster_split,
)
from analytics.services.triage import triage_allowed
from ingest.api.auth import ProjectAccess, TokenPrincipal
from ingest.models import Defect, Project

ERR_TOKEN_CANNOT_CHANGE = "API tokens may read failure clusters but not change them; sign in as a triager."
ERR_UNKNOWN_DEFECT = "no defect {key!r} in this project"


class FailureClusterOutput(serializers.ModelSerializer):
    class Meta:
        model = FailureCluster
        fields = [
            "id",
            "label",
            "exception",
            "failures",
            "tests_affected",
            "builds_affected",
            "first_seen",
            "last_seen",
            "representative_text",
            "weekly_trend",
            "merged_into",
            "note",
        ]


class ClusterDefectOutput(serializers.Serializer):
    key = serializers.CharField(source="defect.key")
    title = serializers.CharField(source="defect.title")
    status = serializers.CharField(source="defect.status")
    score = serializers.FloatField(
        help_text="Cosine similarity of the defect's text and the cluster's messages."
    )
    confirmed = serializers.BooleanField(help_text="A person confirmed that the defect describes this cause.")
    confirmed_at = serializers.DateTimeField(allow_null=True)


class ClusterFailureOutput(serializers.Serializer):
    id = serializers.IntegerField()
    build = serializers.CharField(source="build.external_id")
    started_at = serializers.DateTimeField(source="build.started_at")
    classname = serializers.CharField(source="test_case.classname")
    name = serializers.CharField(source="test_case.name")
    attempt = serializers.IntegerField()
    outcome = serializers.CharField()
    failure_type = serializers.CharField()
    message = serializers.CharField()
    signature = serializers.CharField()


class ClusterSignatureOutput(serializers.Serializer):
    key = serializers.CharField()
    text = serializers.CharField(help_text="The normalised failure signature.")
    occurrences = serializers.IntegerField()
    pinned = serializers.BooleanField(help_text="Placed by a person (merge or split); refits keep it.")


class FailureClusterDetailOutput(serializers.Serializer):
    cluster = FailureClusterOutput()
    defects = ClusterDefectOutput(many=True)
    signatures = ClusterSignatureOutput(many=True)
    failures = serializers.DictField(help_text="count, next, previous, results (ClusterFailure rows).")


class FailureClustersView(generics.ListAPIView):
    """Failure clusters of a project, largest first."""

    permission_classes = [ProjectAccess]
    serializer_class = FailureClusterOutput
    filter_backends: list = []

    def get_queryset(self):
        project = get_object_or_404(Project, slug=self.kwargs["slug"])
        return active_clusters_qs(project_id=project.pk)


class FailureClusterView(APIView):
    """One failure cluster with its defects and its failures (paginated)."""

    permission_classes = [ProjectAccess]

    @extend_schema(responses=FailureClusterDetailOutput)
    def get(self, request, slug: str, pk: int):
        project = get_object_or_404(Project, slug=slug)
        cluster = get_object_or_404(FailureCluster, project=project, pk=pk)
        links = ClusterDefectLink.objects.filter(cluster=cluster).select_related("defect")
        paginator = LimitOffsetPagination()
        page = paginator.paginate_queryset(cluster_results_qs(cluster=cluster), request, view=self)
        failures = paginator.get_paginated_response(ClusterFailureOutput(page, many=True).data).data
        signatures = FailureSignature.objects.filter(cluster=cluster).order_by("-occurrences", "key")
        return Response(
            {
                "cluster": FailureClusterOutput(cluster).data,
                "defects": ClusterDefectOutput(links, many=True).data,
                "signatures": ClusterSignatureOutput(signatures, many=True).data,
                "failures": failures,
            }
        )


class CanChangeClusters(BasePermission):
    """Signed-in people with ``analytics.triage``; never API tokens."""

    message = ERR_NOT_TRIAGER

    def has_permission(self, request, view) -> bool:
        if isinstance(request.user, TokenPrincipal):
            self.message = ERR_TOKEN_CANNOT_CHANGE
            return False
        return triage_allowed(request.user)


class MergeInput(serializers.Serializer):
    into = serializers.IntegerField(help_text="Id of the cluster that takes this cluster's failures.")


class SplitInput(serializers.Serializer):
    signature_keys = serializers.ListField(child=serializers.CharField(max_length=32), allow_empty=False)


class ConfirmDefectInput(serializers.Serializer):
    defect = serializers.CharField(max_length=200, help_text="The defect's key in the tracker.")


class _ClusterAction(APIView):
    permission_classes = [ProjectAccess, CanChangeClusters]

    def cluster(self, slug: str, pk: int) -> FailureCluster:
        return get_object_or_404(FailureCluster, project__slug=slug, pk=pk)

    @staticmethod
    def run(action):
        try:
            return action()
        except DjangoValidationError as exc:
            raise ValidationError({"detail": exc.messages}) from exc
        except DjangoPermissionDenied as exc:
            raise PermissionDenied(str(exc)) from exc


class FailureClusterMergeView(_ClusterAction):
    @extend_schema(request=MergeInput, responses=FailureClusterOutput)
    def post(self, request, slug: str, pk: int):
        cluster = self.cluster(slug, pk)
        form = MergeInput(data=request.data)
        form.is_valid(raise_exception=True)
        into = get_object_or_404(FailureCluster, project__slug=slug, pk=form.validated_data["into"])
        merged = self.run(lambda: cluster_merge(cluster=cluster, into=into, user=request.user))
        return Response(FailureClusterOutput(merged).data)


class FailureClusterSplitView(_ClusterAction):
    @extend_schema(request=SplitInput, responses={201: FailureClusterOutput})
    def post(self, request, slug: str, pk: int):
        cluster = self.cluster(slug, pk)
        form = SplitInput(data=request.data)
        form.is_valid(raise_exception=True)
        keys = form.validated_data["signature_keys"]
        new = self.run(lambda: cluster_split(cluster=cluster, signature_keys=keys, user=request.user))
        return Response(FailureClusterOutput(new).data, status=status.HTTP_201_CREATED)


class FailureClusterDefectView(_ClusterAction):
    @extend_schema(request=ConfirmDefectInput, responses=ClusterDefectOutput)
    def post(self, request, slug: str, pk: int):
        cluster = self.cluster(slug, pk)
        form = ConfirmDefectInput(data=request.data)
        form.is_valid(raise_exception=True)
        key = form.validated_data["defect"]
        defect = Defect.objects.filter(project=cluster.project, key=key).first()
        if defect is None:
            raise ValidationError({"defect": [ERR_UNKNOWN_DEFECT.format(key=key)]})
        link = self.run(
            lambda: cluster_defect_link_confirm(cluster=cluster, defect=defect, user=request.user)
        )
        return Response(ClusterDefectOutput(link).data)


urlpatterns = [
    path(
        "projects/<slug:slug>/failure-clusters/", FailureClustersView.as_view(), name="api-failure-clusters"
    ),
    path(
        "projects/<slug:slug>/failure-clusters/<int:pk>/",
        FailureClusterView.as_view(),
        name="api-failure-cluster",
    ),
    path(
        "projects/<slug:slug>/failure-clusters/<int:pk>/merge/",
        FailureClusterMergeView.as_view(),
        name="api-failure-cluster-merge",
    ),
    path(
        "projects/<slug:slug>/failure-clusters/<int:pk>/split/",
        FailureClusterSplitView.as_view(),
        name="api-failure-cluster-split",
    ),
    path(
        "projects/<slug:slug>/failure-clusters/<int:pk>/defects/",
        FailureClusterDefectView.as_view(),
        name="api-failure-cluster-defect",
    ),
]
