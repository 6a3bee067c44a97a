"""python manage.py column_maps --project SLUG [--export NAME | --all | --import FILE]"""

from __future__ import annotations

import json
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from ingest.management.commands.import_defects import column_map_file_read
from ingest.models import DefectColumnMap, Project
from ingest.services.defects import column_map_save

ERR_NO_PROJECT = "no project with slug {slug!r}"
ERR_NO_MAP = "no saved column map named {name!r} in project {slug!r}"


class Command(BaseCommand):
    help = "List, export (as JSON, to keep under version control) or import a project's defect column maps."

    def add_arguments(self, parser):
        parser.add_argument("--project", required=True, help="Project slug.")
        group = parser.add_mutually_exclusive_group()
        group.add_argument("--export", metavar="NAME", help="Print one map as JSON.")
        group.add_argument("--all", action="store_true", help="Print every map as a JSON list.")
        group.add_argument("--import", dest="import_file", type=Path, metavar="FILE", help="Save a map JSON file.")

    def handle(self, *args, **opts):
        project = Project.objects.filter(slug=opts["project"]).first()
        if project is None:
            raise CommandError(ERR_NO_PROJECT.format(slug=opts["project"]))
        maps = DefectColumnMap.objects.filter(project=project).order_by("name")
        if opts["import_file"]:
            column_map = column_map_file_read(opts["import_file"])
            column_map_save(project=project, column_map=column_map)
            self.stdout.write(f"saved column map {column_map.name!r}")
        elif opts["export"]:
            saved = maps.filter(name=opts["export"]).first()
            if saved is None:
                raise CommandError(ERR_NO_MAP.format(name=opts["export"], slug=project.slug))
            self.stdout.write(json.dumps(saved.definition, indent=2, ensure_ascii=False))
        elif opts["all"]:
            self.stdout.write(json.dumps([m.definition for m in maps], indent=2, ensure_ascii=False))
        else:
            for saved in maps:
                fields = ", ".join(f"{k}={v}" for k, v in saved.definition.get("fields", {}).items())
                self.stdout.write(f"{saved.name}\t{fields}")
