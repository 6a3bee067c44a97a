"""Load the invented demo team's history through the real ingest paths (idempotent)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from django.conf import settings
from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group, Permission
from django.core.management import call_command
from django.core.management.base import BaseCommand
from django.db import transaction

from ingest.models import Component, ComponentAlias, ComponentRule, Project, normalise_alias
from ingest.services.components import components_apply_rules

DEMO_DIR = Path(settings.BASE_DIR) / "demo_fixtures" / "data"
DEMO_USER = "demo"
DEMO_PASSWORD = "harbour-demo-2026"
DEMO_MAP_NAME = "harbour-desk-export"
# The three kinds of user (login, password, what they may do). Demo passwords only: change them.
DEMO_LOGINS = (
    (DEMO_USER, DEMO_PASSWORD, "admin: everything, including the admin site (tokens, column maps, components)"),
    ("triager", "harbour-triage-2026", "triager: triage flaky tests, merge/split failure causes, upload defects"),
    ("viewer", "harbour-view-2026", "viewer: read every page and download tables, charts and numbers"),
)


def demo_roles() -> None:
    """The three roles: viewers (any signed-in user), triagers (this group), admins (staff)."""
    triagers, _ = Group.objects.get_or_create(name="triagers")
    triagers.permissions.add(Permission.objects.get(codename="triage", content_type__app_label="analytics"))


class Command(BaseCommand):
    help = "Generate (if absent) and load the demo data through the real ingest code; safe to run twice."

    def add_arguments(self, parser):
        parser.add_argument("--data", type=Path, default=DEMO_DIR)
        parser.add_argument("--no-user", action="store_true", help="Do not create the demo login.")
        parser.add_argument("--skip-analytics", action="store_true")

    def handle(self, *args, **opts):
        data: Path = opts["data"]
        if not (data / "manifest.csv").exists():
            self.stdout.write(f"generating demo data into {data} …")
            subprocess.run(
                [sys.executable, "-m", "demo_fixtures.generate", "--out", str(data)],
                check=True, cwd=settings.BASE_DIR, env={**os.environ},
            )
        layout = json.loads((data / "components.json").read_text(encoding="utf-8"))
        project = self._project(layout)
        self.stdout.write("importing test results …")
        call_command("ingest_results", manifest=str(data / "manifest.csv"), project=project.slug,
                     no_progress=not sys.stderr.isatty(), no_refresh=True, stdout=self.stdout)
        self.stdout.write("importing defects …")
        # The real path; the map is saved for the upload page. The full refresh below covers the defects,
        # so the per-import analytics refresh is skipped (as for the results backfill above: one refresh, once).
        call_command("import_defects", str(data / "defects.csv"), project=project.slug,
                     mapping_file=data / "defects.columnmap.json", save_mapping=DEMO_MAP_NAME,
                     no_refresh=True, stdout=self.stdout)
        if not opts["skip_analytics"]:
            call_command("refresh_analytics", project=project.slug, stdout=self.stdout)
        demo_roles()
        if not opts["no_user"]:
            self._users()

    @transaction.atomic
    def _project(self, layout: dict) -> Project:
        info = layout["project"]
        project, _ = Project.objects.get_or_create(slug=info["slug"], defaults={"name": info["name"]})
        for entry in layout["components"]:
            component, _ = Component.objects.get_or_create(project=project, name=entry["name"])
            for prefix in entry.get("classname_prefixes", []):
                ComponentRule.objects.update_or_create(
                    project=project, classname_prefix=prefix, defaults={"component": component}
                )
            for alias in entry.get("aliases", []):
                ComponentAlias.objects.get_or_create(
                    project=project, alias=normalise_alias(alias), defaults={"component": component}
                )
        components_apply_rules(project=project)
        return project

    def _users(self) -> None:
        User = get_user_model()
        triagers = Group.objects.get(name="triagers")
        for username, password, _role in DEMO_LOGINS:
            user, created = User.objects.get_or_create(username=username)
            if created:
                user.set_password(password)
                user.is_staff = user.is_superuser = username == DEMO_USER
                user.save()
                if username in (DEMO_USER, "triager"):
                    user.groups.add(triagers)
        self.stdout.write("\nDemo logins (demo passwords: change them with DEBUG=1 .venv/bin/python manage.py changepassword USER):")
        for username, password, role in DEMO_LOGINS:
            self.stdout.write(f"  {username:<8} / {password:<20} {role}")
