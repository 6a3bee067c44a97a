"""API endpoints: flaky-test scores, the quarantine list for CI, and triage (prefix /api/v1/, see urls.py).

Who may do what
---------------
- Read (``GET``): a project API token (``Authorization: Bearer <key>``, its own project only) or any
  signed-in person (session cookie, as the dashboard does).
- Change a triage state (``POST .../triage/``): signed-in people with the ``analytics.triage`` permission
  (group "triagers") only. API tokens may read but never change triage states: a CI job must not be able
  to quarantine its own failing tests.

Test ids
--------
A test is named ``classname::name`` (just ``name`` when the report gave no classname), as in the
``id`` field of every row; the classname is the part before the first ``::``. In URLs, percent-encode it.

Quarantine
----------
Quarantining hides failures. A quarantined test keeps running and being reported to Barometer, which keeps
scoring it and counts its green builds, but a CI job that deselects the tests on the quarantine list no
longer fails the build on them, so a real regression in such a test goes unnoticed. Release tests from
quarantine as soon as they are fixed; the list marks those that stayed green long enough.
"""

from __future__ import annotations

from django.conf import settings
from django.shortcuts import get_object_or_404
from django.urls import path
from drf_spectacular.utils import OpenApiParameter, extend_schema
from rest_framework import generics, serializers, status
from rest_framework.exceptions import NotFound
from rest_framework.permissions import BasePermission
from rest_framework.renderers import BaseRenderer, JSONRenderer
from rest_framework.response import Response
from rest_framework.views import APIView

from analytics.core.flaky import VERDICTS
from analytics.models import TriageState
from analytics.selectors import flaky_health_qs, quarantined_tests_qs, testcase_by_ref
from analytics.services.flaky import EVIDENCE_FIELDS, flaky_row, testcase_ref
from analytics.services.triage import ERR_NOT_ALLOWED, QUARANTINE_WARNING, triage_allowed, triage_set
from ingest.api.auth import ProjectAccess, TokenPrincipal
from ingest.models import Project

ERR_TOKEN_CANNOT_TRIAGE = "API tokens may read but not change triage states; sign in as a triager."
ERR_UNKNOWN_TEST = "no test {ref!r} in this project (ids are classname::name)"
ID_FORMAT = "classname::name"


class PlainTextRenderer(BaseRenderer):
    """``?format=txt``: the view hands over the text; errors become ``detail`` lines."""

    media_type = "text/plain"
    format = "txt"
    charset = "utf-8"

    def render(self, data, accepted_media_type=None, renderer_context=None):
        if isinstance(data, str):
            return data.encode(self.charset)
        if isinstance(data, dict) and "detail" in data:
            return f"{data['detail']}\n".encode(self.charset)
        return f"{data}\n".encode(self.charset)


def _one_line(text: str) -> str:
    return text.replace("\\", "\\\\").replace("\r", "\\r").replace("\n", "\\n")


class FlakyTestsInput(serializers.Serializer):
    verdict = serializers.ChoiceField(choices=VERDICTS, required=False)
    component = serializers.CharField(required=False, allow_blank=True, max_length=200,
                                      help_text="Component name, any case; empty = tests without a component.")
    min_score = serializers.FloatField(required=False, min_value=0.0, max_value=1.0)


class FlakyTestOutput(serializers.Serializer):
    id = serializers.CharField(help_text=f"Test id: {ID_FORMAT}.")
    classname = serializers.CharField()
    name = serializers.CharField()
    component = serializers.CharField()
    score = serializers.FloatField(help_text="Probability in [0, 1] that the test is flaky.")
    verdict = serializers.ChoiceField(choices=VERDICTS)
    scored_by = serializers.CharField(help_text="'rules' (unsupervised) or 'classifier' (trained on triage).")
    triage_state = serializers.ChoiceField(choices=TriageState.choices)
    runs = serializers.IntegerField()
    failures = serializers.IntegerField()
    last_failure_at = serializers.DateTimeField(allow_null=True)
    recent_outcomes = serializers.CharField(help_text="Latest runs, oldest first: P passed, F failed, E error.")
    explanation = serializers.ListField(child=serializers.CharField(), help_text="The evidence in plain words.")
    computed_at = serializers.DateTimeField()
    # Evidence figures (analytics.core.flaky.evidence_frame); null where undefined.
    same_commit_contradictions = serializers.IntegerField(allow_null=True)
    pass_on_rerun = serializers.IntegerField(allow_null=True)
    flip_rate = serializers.FloatField(allow_null=True)
    entropy = serializers.FloatField(allow_null=True)
    runs_z = serializers.FloatField(allow_null=True, help_text="Wald-Wolfowitz runs test z over the history.")
    runs_p = serializers.FloatField(allow_null=True)
    failure_rate = serializers.FloatField(allow_null=True)
    failure_rate_low = serializers.FloatField(allow_null=True)
    failure_rate_high = serializers.FloatField(allow_null=True)
    message_diversity = serializers.FloatField(allow_null=True)
    duration_cv = serializers.FloatField(allow_null=True)
    timeout_failures = serializers.IntegerField(allow_null=True)
    longest_failure_streak = serializers.IntegerField(allow_null=True)
    failing_now = serializers.BooleanField(allow_null=True)

    def to_representation(self, instance):
        row = flaky_row(instance)
        row["explanation"] = list(instance.explanation or [])
        return super().to_representation(row)


class FlakyTestsView(generics.ListAPIView):
    """Flaky-test scores of a project, most likely flaky first, with the evidence behind each score."""

    permission_classes = [ProjectAccess]
    serializer_class = FlakyTestOutput
    filter_backends: list = []

    def get_queryset(self):
        project = get_object_or_404(Project, slug=self.kwargs["slug"])
        params = FlakyTestsInput(data=self.request.query_params)
        params.is_valid(raise_exception=True)
        return flaky_health_qs(project_id=project.pk, **params.validated_data)

    @extend_schema(
        parameters=[FlakyTestsInput],
        description="Every scored test with its P(flaky), verdict, triage state and evidence figures ("
        + ", ".join(EVIDENCE_FIELDS) + "). Paginated with limit/offset.",
    )
    def get(self, request, *args, **kwargs):
        return super().get(request, *args, **kwargs)


class QuarantinedTestOutput(serializers.Serializer):
    id = serializers.CharField(help_text=f"Test id: {ID_FORMAT}.")
    classname = serializers.CharField()
    name = serializers.CharField()
    component = serializers.CharField()
    note = serializers.CharField()
    quarantined_by = serializers.CharField(allow_null=True)
    green_runs_since_quarantine = serializers.IntegerField()
    release_suggested = serializers.BooleanField()


class QuarantineView(APIView):
    """The quarantined tests of a project, for CI jobs that deselect them.

    Quarantining hides failures: the tests keep running and being reported, but a build no longer fails on
    them. ``?format=txt`` answers one test id (classname::name) per line.
    """

    permission_classes = [ProjectAccess]
    renderer_classes = [JSONRenderer, PlainTextRenderer]

    @extend_schema(
        parameters=[OpenApiParameter("format", str, enum=["json", "txt"],
                                     description="txt: one test id (classname::name) per line.")],
        responses={200: QuarantinedTestOutput(many=True)},
        description=QUARANTINE_WARNING,
    )
    def get(self, request, slug: str):
        project = get_object_or_404(Project, slug=slug)
        release_after = settings.BAROMETER_RELEASE_AFTER_GREEN_RUNS
        tests = list(quarantined_tests_qs(project_id=project.pk))
        if request.accepted_renderer.format == "txt":
            return Response("".join(_one_line(testcase_ref(t)) + "\n" for t in tests))
        rows = [
            {
                "id": testcase_ref(t),
                "classname": t.classname,
                "name": t.name,
                "component": t.component.name if t.component_id else "",
                "note": t.triage.note,
                "quarantined_by": t.triage.updated_by.get_username() if t.triage.updated_by_id else None,
                "green_runs_since_quarantine": t.triage.green_runs_since_quarantine,
                "release_suggested": t.triage.green_runs_since_quarantine >= release_after,
            }
            for t in tests
        ]
        return Response({
            "warning": QUARANTINE_WARNING,
            "id_format": ID_FORMAT,
            "release_after_green_runs": release_after,
            "count": len(rows),
            "tests": QuarantinedTestOutput(rows, many=True).data,
        })


class CanTriage(BasePermission):
    """Signed-in people with ``analytics.triage``; never API tokens."""

    message = ERR_NOT_ALLOWED

    def has_permission(self, request, view) -> bool:
        if isinstance(request.user, TokenPrincipal):
            self.message = ERR_TOKEN_CANNOT_TRIAGE
            return False
        return triage_allowed(request.user)


class TriageInput(serializers.Serializer):
    state = serializers.ChoiceField(choices=TriageState.choices)
    note = serializers.CharField(required=False, allow_blank=True, max_length=4000, default="")


class TriageOutput(serializers.Serializer):
    id = serializers.CharField()
    from_state = serializers.CharField()
    state = serializers.CharField()
    note = serializers.CharField()
    by = serializers.CharField()
    at = serializers.DateTimeField()
    warning = serializers.CharField(allow_null=True)


class TriageView(APIView):
    """Set a test's triage state (confirmed flaky, quarantined, not flaky, not reviewed) with a note.

    Every change is kept in the audit log with who and when. Quarantining hides failures: the test keeps
    running and being reported, but CI jobs reading the quarantine list stop failing the build on it.
    """

    permission_classes = [CanTriage]

    @extend_schema(request=TriageInput, responses={201: TriageOutput}, description=QUARANTINE_WARNING)
    def post(self, request, slug: str, ref: str):
        project = get_object_or_404(Project, slug=slug)
        test_case = testcase_by_ref(project_id=project.pk, ref=ref)
        if test_case is None:
            raise NotFound(ERR_UNKNOWN_TEST.format(ref=ref))
        data = TriageInput(data=request.data)
        data.is_valid(raise_exception=True)
        event = triage_set(test_case=test_case, user=request.user, **data.validated_data)
        out = {
            "id": testcase_ref(test_case),
            "from_state": event.from_state,
            "state": event.to_state,
            "note": event.note,
            "by": request.user.get_username(),
            "at": event.at,
            "warning": QUARANTINE_WARNING if event.to_state == TriageState.QUARANTINED else None,
        }
        return Response(TriageOutput(out).data, status=status.HTTP_201_CREATED)


urlpatterns = [
    path("projects/<slug:slug>/flaky-tests/", FlakyTestsView.as_view(), name="api-flaky-tests"),
    path("projects/<slug:slug>/quarantine/", QuarantineView.as_view(), name="api-quarantine"),
    path("projects/<slug:slug>/tests/<path:ref>/triage/", TriageView.as_view(), name="api-test-triage"),
]
