"""python manage.py ingest_results PATH... --project SLUG --build ID [...] | --manifest FILE --project SLUG"""

from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError
from django.db import connection

from ingest.models import ImportedReport, Project
from ingest.services.results import (
    BuildMeta,
    ImportCounts,
    ResultsImportError,
    reports_from_path,
    results_job_create,
    results_job_run,
)

MANIFEST_COLUMNS = ("build", "file", "commit", "branch", "started", "ci_job")
ERR_MANIFEST_COLUMNS = "{name}: the manifest needs the columns build and file (found: {found})"
ERR_MANIFEST_ROW = "{name}, row {row}: {reason}"
#: Analysed at the end of a backfill (PostgreSQL): the tables the dashboard's queries read.
ANALYZE_TABLES = ("ingest_testresult", "ingest_testweek", "ingest_projectweek", "ingest_testcase", "ingest_build")


def manifest_read(path: Path) -> list[dict]:
    """Rows of a CSV or JSON-list manifest, grouped by build in file order; file paths made absolute."""
    if not path.exists():
        raise CommandError(f"{path}: no such manifest file")
    if path.suffix.lower() == ".json":
        try:
            rows = json.loads(path.read_text(encoding="utf-8"))
        except json.JSONDecodeError as exc:
            raise CommandError(f"{path}, line {exc.lineno}: not valid JSON ({exc.msg})") from exc
        if not isinstance(rows, list):
            raise CommandError(f"{path}: a JSON manifest must be a list of objects")
    else:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.DictReader(fh))
    if rows and not {"build", "file"} <= set(rows[0]):
        raise CommandError(ERR_MANIFEST_COLUMNS.format(name=path, found=", ".join(rows[0])))
    for number, row in enumerate(rows, start=2 if path.suffix.lower() != ".json" else 1):
        if not row.get("build") or not row.get("file"):
            raise CommandError(ERR_MANIFEST_ROW.format(name=path, row=number, reason="build and file are required"))
        row["_path"] = (path.parent / row["file"]).resolve()
    return rows


class Command(BaseCommand):
    help = "Import JUnit-XML reports (files, directories of *.xml, or .zip) into one build, or backfill from a manifest."

    def add_arguments(self, parser):
        parser.add_argument("paths", nargs="*", type=Path)
        parser.add_argument("--project", required=True, help="Project slug (created if absent).")
        parser.add_argument("--build", help="External build id.")
        parser.add_argument("--commit", default="")
        parser.add_argument("--branch", default="")
        parser.add_argument("--started", default="", help="ISO 8601 start of the build.")
        parser.add_argument("--ci-job", default="")
        parser.add_argument("--manifest", type=Path, help="CSV or JSON list: build,file,commit,branch,started,ci_job")
        parser.add_argument("--project-name", default="", help="Display name when the project is created.")
        parser.add_argument("--no-progress", action="store_true")
        parser.add_argument("--no-refresh", action="store_true",
                            help="Do not queue the analytics refresh afterwards (run refresh_analytics yourself).")

    def handle(self, *args, **opts):
        project, _ = Project.objects.get_or_create(
            slug=opts["project"], defaults={"name": opts["project_name"] or opts["project"]}
        )
        if opts["manifest"]:
            if opts["paths"]:
                raise CommandError("give either report paths or --manifest, not both")
            total = self._manifest(project, Path(opts["manifest"]), progress=not opts["no_progress"],
                                   refresh=not opts["no_refresh"])
        else:
            if not opts["paths"]:
                raise CommandError("give at least one report path (file, directory or .zip), or --manifest")
            meta = BuildMeta(
                build=opts["build"] or "", commit=opts["commit"], branch=opts["branch"],
                ci_job=opts["ci_job"], started=opts["started"],
            )
            total = self._one_build(project, meta, opts["paths"], refresh=not opts["no_refresh"])
        self._summary(total)

    def _one_build(self, project: Project, meta: BuildMeta, paths: list[Path], *, refresh: bool = True) -> ImportCounts:
        try:
            files = [p for path in paths for p in reports_from_path(path)]
            handles = [open(p, "rb") for p in files]
            try:
                job = results_job_create(
                    project=project, files=[(str(p), h) for p, h in zip(files, handles)], meta=meta, via="cli"
                )
            finally:
                for h in handles:
                    h.close()
            return results_job_run(job=job, refresh=refresh)
        except ResultsImportError as exc:
            raise CommandError(str(exc)) from exc

    def _manifest(self, project: Project, manifest: Path, *, progress: bool, refresh: bool) -> ImportCounts:
        from tqdm import tqdm

        rows = manifest_read(manifest)
        builds: dict[str, list[dict]] = {}
        for row in rows:
            builds.setdefault(str(row["build"]), []).append(row)
        total = ImportCounts()
        bar = tqdm(builds.items(), total=len(builds), unit="build", disable=not progress, file=self.stderr._out)
        for build_id, build_rows in bar:
            first = build_rows[0]
            meta = BuildMeta(
                build=build_id, commit=str(first.get("commit") or ""), branch=str(first.get("branch") or ""),
                ci_job=str(first.get("ci_job") or ""), started=str(first.get("started") or ""),
            )
            paths = [r["_path"] for r in build_rows]
            if self._already_imported(project, build_id, paths):
                # A rerun of the backfill: count the reports as skipped without creating an empty job.
                total.reports_already_imported += len(paths)
                continue
            counts = self._one_build(project, meta, paths, refresh=False)
            for key, value in counts.as_dict().items():
                setattr(total, key, getattr(total, key) + value)
            total.warnings.extend(counts.warnings)
        if total.tests:
            self._analyze()
        if total.tests and refresh:
            # One analytics refresh for the whole backfill instead of one per build.
            from analytics.tasks import refresh_project
            from ingest.dispatch import task_enqueue

            task_enqueue(refresh_project, project.pk)
        return total

    @staticmethod
    def _analyze() -> None:
        """Refresh the planner statistics after a backfill (PostgreSQL).

        Without them the planner guesses on the freshly filled tables: the overview's weekly queries took 20 s
        instead of 0.2 s in bench/FINDINGS.md §3. A server with autovacuum on would get there later by itself.
        """
        if connection.vendor != "postgresql":
            return
        with connection.cursor() as cursor:
            cursor.execute("ANALYZE " + ", ".join(ANALYZE_TABLES))

    @staticmethod
    def _already_imported(project: Project, build_id: str, paths: list[Path]) -> bool:
        """True when every report file of this manifest build is already in that build (same sha256)."""
        if not all(Path(p).suffix.lower() == ".xml" for p in paths):
            return False  # directories and archives are expanded by the import itself
        known = set(
            ImportedReport.objects.filter(project=project, build__external_id=build_id).values_list("sha256", flat=True)
        )
        if not known:
            return False
        for path in paths:
            digest = hashlib.sha256()
            with open(path, "rb") as handle:
                for chunk in iter(lambda: handle.read(1 << 20), b""):
                    digest.update(chunk)
            if digest.hexdigest() not in known:
                return False
        return True

    def _summary(self, c: ImportCounts) -> None:
        w = self.stdout.write
        w(f"reports imported  {c.reports}   (already imported, skipped: {c.reports_already_imported})")
        w(f"results           {c.tests}")
        w(f"  passed          {c.passed}")
        w(f"  failed          {c.failed}")
        w(f"  errors          {c.errors}")
        w(f"  skipped         {c.skipped}")
        w(f"  reruns          {c.reruns}")
        w(f"new test cases    {c.new_test_cases}")
        w(f"warnings          {len(c.warnings)}")
        for text in c.warnings[:20]:
            w(f"  - {text}")
        if len(c.warnings) > 20:
            w(f"  … {len(c.warnings) - 20} more (see the import jobs)")
