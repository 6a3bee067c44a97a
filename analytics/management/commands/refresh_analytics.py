"""python manage.py refresh_analytics --project SLUG: run every detector synchronously."""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError

from analytics.services.refresh import analytics_refresh
from ingest.models import Project


class Command(BaseCommand):
    help = "Recompute every analytics result of a project now (flaky tests, failure causes, forecasts)."

    def add_arguments(self, parser):
        parser.add_argument("--project", required=True)

    def handle(self, *args, **opts):
        project = Project.objects.filter(slug=opts["project"]).first()
        if project is None:
            raise CommandError(f"no project with slug {opts['project']!r}")
        for detector, (count, seconds) in analytics_refresh(project_id=project.pk).items():
            self.stdout.write(f"{detector}: {count} rows written in {seconds:.1f} s")
