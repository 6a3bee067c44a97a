"""Recompute a project's weekly rollups from its stored results (after deleting rows by hand, or an upgrade)."""

from __future__ import annotations

from django.core.management.base import BaseCommand, CommandError

from ingest.models import Project
from ingest.services.results import rollup_rebuild


class Command(BaseCommand):
    help = (
        "Recompute the weekly rollups of a project (per test and week, and per component and week) from its "
        "stored results. Imports keep them up to date; run this after deleting results, builds or test cases "
        "outside the admin, or when workers of an older version imported during an upgrade."
    )

    def add_arguments(self, parser):
        parser.add_argument("--project", required=True, help="project slug")

    def handle(self, *args, **options):
        project = Project.objects.filter(slug=options["project"]).first()
        if project is None:
            raise CommandError(f"no project with slug {options['project']!r}")
        rollup_rebuild(project=project)
        self.stdout.write(f"{project.slug}: weekly rollups recomputed from the stored results")
