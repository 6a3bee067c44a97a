"""The one refresh entry point: every detector runs, each run is recorded, a failure is recorded and raised."""

from __future__ import annotations

import pytest
from django.core.management import CommandError, call_command

from analytics.models import AnalyticsRun
from analytics.services import refresh
from ingest.models import Project


@pytest.mark.django_db
def test_full_refresh_records_one_run_per_detector():
    project = Project.objects.create(slug="p", name="P")
    outcome = refresh.analytics_refresh(project_id=project.pk)
    runs = {run.detector: run for run in AnalyticsRun.objects.filter(project=project)}
    assert set(runs) == set(outcome) and "flaky" in runs
    assert all(run.ok and run.finished_at is not None and run.scope == "full" for run in runs.values())
    assert all(run.details["count"] == outcome[name][0] for name, run in runs.items())


@pytest.mark.django_db
def test_a_failing_detector_is_recorded_with_its_error_and_raised(monkeypatch):
    project = Project.objects.create(slug="p", name="P")

    def explode(**kwargs):
        raise RuntimeError("matrix is singular")

    monkeypatch.setattr("analytics.services.flaky.flaky_scores_refresh", explode)
    with pytest.raises(RuntimeError):
        refresh.analytics_refresh(project_id=project.pk)
    run = AnalyticsRun.objects.get(project=project, detector="flaky")
    assert not run.ok and run.details["error"] == "RuntimeError: matrix is singular"


@pytest.mark.django_db
def test_export_refuses_forecast_options_for_other_outputs_and_unknown_projects():
    Project.objects.create(slug="p", name="P")
    with pytest.raises(CommandError, match="--what forecast only"):
        call_command("export_analytics", "--project", "p", "--what", "flaky", "--horizon-weeks", "4")
    with pytest.raises(CommandError, match="no project with slug 'nope'"):
        call_command("export_analytics", "--project", "nope", "--what", "flaky")


@pytest.mark.django_db
def test_refresh_command_names_each_detector(capsys):
    Project.objects.create(slug="p", name="P")
    call_command("refresh_analytics", "--project", "p")
    assert "flaky:" in capsys.readouterr().out


@pytest.mark.django_db
def test_each_refresh_path_runs_its_detectors():
    from django.utils import timezone

    from ingest.models import Build

    project = Project.objects.create(slug="p", name="P")
    build = Build.objects.create(project=project, external_id="1", started_at=timezone.now())
    assert set(refresh.analytics_refresh(project_id=project.pk)) == {
        "flaky", "clusters", "runtime_growth", "forecasts", "duplicates"}
    assert set(refresh.analytics_refresh_after_build(project_id=project.pk, build_id=build.pk)) == {
        "flaky", "clusters", "runtime_growth"}
    assert set(refresh.analytics_refresh_after_defects(project_id=project.pk)) == {
        "forecasts", "duplicates", "cluster_defects"}
    assert AnalyticsRun.objects.filter(project=project, ok=False).count() == 0
