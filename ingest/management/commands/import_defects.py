"""python manage.py import_defects FILE --project SLUG (--mapping NAME | --mapping-file JSON | --map F=C ...)"""

from __future__ import annotations

import json
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from ingest.models import ImportJob, Project
from ingest.parsers.defects import ColumnMap, ColumnMapError
from ingest.services.defects import (
    DefectImportError,
    column_map_get,
    column_map_save,
    defects_job_create,
    defects_job_reimport,
    defects_job_run,
    defects_rejected_csv_write,
)

ERR_ONE_MAP_SOURCE = "give exactly one of --mapping NAME, --mapping-file PATH or --map FIELD=COLUMN ..."
ERR_MAP_OPTIONS = "--closed-status, --open-status, --severity-order, --priority-order, --date-format and "
ERR_MAP_OPTIONS += "--delimiter only go with --map (a saved or file map carries its own)"
ERR_NO_FILE = "{path}: no such file"
ERR_FILE_OR_JOB = "give either FILE or --from-job ID"
ERR_NO_JOB = "no import job {job_id} in project {slug!r}"
ERR_MAP_FILE = "{path}: {reason}"
SHOWN_ROW_ERRORS = 20
MORE_ROW_ERRORS = "  … {count} more: write them all with --rejected-csv FILE, or GET {url}"


def column_map_file_read(path: Path) -> ColumnMap:
    """A column map from a JSON file; CommandError naming the file when it is missing or malformed."""
    try:
        data = json.loads(path.read_text(encoding="utf-8-sig"))
    except OSError as exc:
        raise CommandError(ERR_MAP_FILE.format(path=path, reason=exc.strerror or exc)) from exc
    except json.JSONDecodeError as exc:
        reason = f"line {exc.lineno}: not valid JSON ({exc.msg})"
        raise CommandError(ERR_MAP_FILE.format(path=path, reason=reason)) from exc
    try:
        return ColumnMap.from_dict(data)
    except ColumnMapError as exc:
        raise CommandError(ERR_MAP_FILE.format(path=path, reason=exc)) from exc


class Command(BaseCommand):
    help = (
        "Import a defect export (CSV, JSON array or JSON lines) into a project. Defects are matched by key: "
        "new keys are added, known keys updated, defects absent from the file are kept. Rejected rows are "
        "listed with line and reason; --strict imports nothing when any row is rejected."
    )

    def add_arguments(self, parser):
        parser.add_argument("file", type=Path, nargs="?", help="The export; or give --from-job instead.")
        parser.add_argument(
            "--from-job",
            type=int,
            metavar="ID",
            help="Re-import the raw export kept by this earlier defect import (e.g. with a corrected map).",
        )
        parser.add_argument("--project", required=True, help="Project slug (created if absent).")
        parser.add_argument("--mapping", help="Name of a column map saved in the project.")
        parser.add_argument("--mapping-file", type=Path, help="Column-map JSON file.")
        parser.add_argument(
            "--map",
            action="append",
            default=[],
            metavar="FIELD=COLUMN",
            help="One field mapping, e.g. --map 'key=Ticket No'; repeat for each field (key, title and "
            "created are required; a JSON column is a dotted path such as fields.component.name).",
        )
        parser.add_argument("--closed-status", action="append", default=[], metavar="VALUE")
        parser.add_argument("--open-status", action="append", default=[], metavar="VALUE")
        parser.add_argument(
            "--severity-order",
            action="append",
            default=[],
            metavar="VALUE",
            help="Severity values from lowest to highest; repeat in order.",
        )
        parser.add_argument(
            "--priority-order",
            action="append",
            default=[],
            metavar="VALUE",
            help="Priority values from lowest to highest; repeat in order.",
        )
        parser.add_argument(
            "--date-format",
            default=None,
            help="iso, epoch_s, epoch_ms, dayfirst, monthfirst or a strptime format.",
        )
        parser.add_argument(
            "--delimiter",
            default=None,
            help="Separator of several components or labels in one cell (default ';').",
        )
        parser.add_argument("--save-mapping", metavar="NAME", help="Save the column map used under NAME.")
        parser.add_argument("--strict", action="store_true", help="Import nothing when any row is rejected.")
        parser.add_argument(
            "--rejected-csv",
            type=Path,
            metavar="FILE",
            help="Write every rejected row (line, column, field, reason, raw values) here.",
        )
        parser.add_argument(
            "--no-refresh",
            action="store_true",
            help="Do not queue the defect analytics (duplicates) after the import.",
        )

    def handle(self, *args, **opts):
        path: Path | None = opts["file"]
        if (path is None) == (opts["from_job"] is None):
            raise CommandError(ERR_FILE_OR_JOB)
        if path is not None and not path.is_file():
            raise CommandError(ERR_NO_FILE.format(path=path))
        if sum(bool(opts[k]) for k in ("mapping", "mapping_file", "map")) != 1:
            raise CommandError(ERR_ONE_MAP_SOURCE)
        extras = (
            "closed_status",
            "open_status",
            "severity_order",
            "priority_order",
            "date_format",
            "delimiter",
        )
        if not opts["map"] and any(opts[k] for k in extras):
            raise CommandError(ERR_MAP_OPTIONS)
        project, _ = Project.objects.get_or_create(slug=opts["project"], defaults={"name": opts["project"]})
        column_map = self._column_map(project, opts)
        if path is None:
            earlier = ImportJob.objects.filter(project=project, pk=opts["from_job"]).first()
            if earlier is None:
                raise CommandError(ERR_NO_JOB.format(job_id=opts["from_job"], slug=project.slug))
            try:
                job = defects_job_reimport(job=earlier, column_map=column_map, strict=opts["strict"])
            except DefectImportError as exc:
                raise CommandError(str(exc)) from exc
        else:
            with open(path, "rb") as fh:
                job = defects_job_create(
                    project=project, name=str(path), stream=fh, column_map=column_map, strict=opts["strict"]
                )
        try:
            counts = defects_job_run(job=job, refresh=not opts["no_refresh"])
        except DefectImportError as exc:
            job.refresh_from_db()
            self._row_errors(job)
            self._rejected_csv(job, opts["rejected_csv"])
            raise CommandError(str(exc)) from exc
        job.refresh_from_db()
        self._summary(counts, job)
        self._rejected_csv(job, opts["rejected_csv"])

    def _column_map(self, project: Project, opts: dict) -> ColumnMap:
        try:
            if opts["mapping"]:
                column_map = column_map_get(project=project, name=opts["mapping"])
            elif opts["mapping_file"]:
                column_map = column_map_file_read(opts["mapping_file"])
            else:
                column_map = ColumnMap.from_cli(
                    opts["map"],
                    name=opts["save_mapping"] or "command-line",
                    closed_statuses=opts["closed_status"],
                    open_statuses=opts["open_status"],
                    severity_order=opts["severity_order"],
                    priority_order=opts["priority_order"],
                    multi_value_delimiter=opts["delimiter"] or ";",
                    date_format=opts["date_format"],
                )
            if opts["save_mapping"]:
                column_map.name = opts["save_mapping"]
                column_map_save(project=project, column_map=column_map)
                self.stdout.write(f"saved column map {column_map.name!r}")
        except ColumnMapError as exc:
            raise CommandError(str(exc)) from exc
        return column_map

    def _summary(self, counts: dict, job: ImportJob) -> None:
        w = self.stdout.write
        w(f"import job        {job.pk}")
        w(f"rows read         {counts['rows']}")
        w(f"  created         {counts['created']}")
        w(f"  updated         {counts['updated']}")
        w(f"  unchanged       {counts['unchanged']}")
        w(f"  rejected        {counts['rejected']}")
        self._row_errors(job)
        warnings = counts.get("warnings", [])
        w(f"warnings          {len(warnings)}")
        for text in warnings[:SHOWN_ROW_ERRORS]:
            w(f"  - {text}")

    def _row_errors(self, job: ImportJob) -> None:
        w = self.stdout.write
        for err in job.row_errors[:SHOWN_ROW_ERRORS]:
            column = f"column {err['column']!r}" if err["column"] else "whole record"
            w(f"  line {err['line']}, {column}: {err['reason']}")
        if len(job.row_errors) > SHOWN_ROW_ERRORS:
            url = f"/api/v1/projects/{job.project.slug}/imports/{job.pk}/rejected.csv"
            w(MORE_ROW_ERRORS.format(count=len(job.row_errors) - SHOWN_ROW_ERRORS, url=url))

    def _rejected_csv(self, job: ImportJob, target: Path | None) -> None:
        if target is None:
            return
        with open(target, "w", encoding="utf-8", newline="") as out:
            count = defects_rejected_csv_write(job=job, out=out)
        self.stdout.write(f"rejected rows     {count} written to {target}")
