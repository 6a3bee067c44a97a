"""python manage.py refresh_analytics --project SLUG: run every detector synchronously."""

from __future__ import annotations

import time

from django.core.management.base import BaseCommand, CommandError

from analytics.services.flaky import flaky_scores_refresh
from ingest.models import Project


class Command(BaseCommand):
    help = "Recompute every analytics result of a project now (flaky-test scores)."

    def add_arguments(self, parser):
        parser.add_argument("--project", required=True)

    def handle(self, *args, **opts):
        project = Project.objects.filter(slug=opts["project"]).first()
        if project is None:
            raise CommandError(f"no project with slug {opts['project']!r}")
        started = time.perf_counter()
        n = flaky_scores_refresh(project_id=project.pk)
        self.stdout.write(f"flaky-test scores: {n} tests scored in {time.perf_counter() - started:.1f} s")
